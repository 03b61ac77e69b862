"""Heat flow through the building envelope from surface temperatures: surface heat flux
density, the ISO 9869-1 average method and its acceptance criteria, pixel footprint on the
wall, linear thermal transmittance of thermal bridges, annual transmission loss and the
uncertainty of an in-situ U-value.

Pure functions on arrays, SI units (K, W, m, s). Temperatures in kelvin unless a name says
otherwise; differences of temperature are the same in K and degrees C.

Notes
-----
Inside surface (heat flow positive from inside to outside)::

    q = h_c (T_ai - T_si) + eps_h sigma (T_r^4 - T_si^4)                  (1)

Outside surface::

    q = h_c (T_se - T_ae) + eps_h sigma (T_se^4 - T_sky^4)                (2)

Average method (ISO 9869-1:2014, clause 7.2, "average method")::

    U = sum_j q_j dt_j / sum_j (T_i,j - T_e,j) dt_j                        (3)

each frame j standing for its interval dt_j. The inside method is normalised by the
air-to-air difference (Tejedor et al. 2017); the outside method by the difference of
environmental temperatures, T_env = (h_c T_air + h_r T_rad) / (h_c + h_r) (ISO 9869-1
uses environmental temperatures; the weighting by h_c and h_r is the usual definition,
given here from memory).

References
----------
.. [1] ISO 6946:2017, "Building components and building elements - Thermal resistance and
   thermal transmittance - Calculation methods", Annex C (surface resistances).
   Values used here are given from memory (REFERENCES.md section 10, tag [M]).
.. [2] ISO 9869-1:2014, "Thermal insulation - Building elements - In-situ measurement of
   thermal resistance and thermal transmittance - Part 1: Heat flow meter method".
   Acceptance criteria as commonly summarised, from memory.
.. [3] B. Tejedor, M. Casals, M. Gangolells, X. Roca, "Quantitative internal infrared
   thermography for determining in-situ thermal behaviour of facades", Energy and
   Buildings 151 (2017) 187-197, doi:10.1016/j.enbuild.2017.06.040.
.. [4] B. Tejedor, E. Barreira, R. M. S. F. Almeida, M. Casals, "Thermographic 2D U-value
   map for quantifying thermal bridges in building facades", Energy and Buildings 224
   (2020) 110176.
.. [5] ISO 14683:2017 / ISO 10211:2017: linear thermal transmittance psi as the extra
   heat flow per length and kelvin.
.. [6] JCGM 100:2008 (GUM) and JCGM 101:2008 (propagation of distributions by Monte Carlo).
"""
from __future__ import annotations

import math

import numpy as np

from .constants import SIGMA

# ISO 6946:2017 Annex C, convective coefficient at inside surfaces [W/(m2 K)] by direction of
# heat flow (from memory, REFERENCES.md section 10 [M])
H_C_INSIDE = {"horizontal": 2.5, "upward": 5.0, "downward": 0.7}
# Ratio of total hemispherical to near-normal emissivity for dielectric (non-metallic)
# surfaces of normal emissivity about 0.9 (from memory: the hemispherical value of a
# dielectric is a few per cent below the normal one)
HEMISPHERICAL_RATIO_DIELECTRIC = 0.95
# ISO 9869-1 criteria (from memory): minimum duration, tolerance of the convergence checks,
# heavy element threshold of the areal heat capacity and stored-heat tolerance
MIN_DURATION_S = 72 * 3600.0
CONVERGENCE_TOLERANCE = 0.05
HEAVY_CAPACITY_J_M2K = 20e3
STORED_HEAT_TOLERANCE = 0.05
DAY_S = 86400.0

ENERGY_CAUTION = ("In-situ U-values, psi-values and heat losses are estimates under the logged conditions and the "
                  "stated surface coefficients; design values and decisions (retrofit, compliance, cost) rest with "
                  "a qualified energy assessor.")


# --- surface coefficients (ISO 6946 Annex C) ---------------------------------------------

def convective_coefficient_inside(direction="horizontal"):
    """h_c,i at an inside surface [W/(m2 K)], ISO 6946:2017 Annex C (values from memory).

    Parameters
    ----------
    direction : {"horizontal", "upward", "downward"}
        Direction of heat flow (walls: horizontal).
    """
    return H_C_INSIDE[direction]


def convective_coefficient_outside(wind_speed):
    """h_c,e = 4 + 4 v at an outside surface [W/(m2 K)], ISO 6946:2017 Annex C (from memory).

    Parameters
    ----------
    wind_speed : float or ndarray
        Wind speed at the surface [m/s].
    """
    return 4.0 + 4.0 * np.asarray(wind_speed, float)    # ISO 6946 Annex C


def radiative_coefficient(emissivity, mean_temperature):
    """Linearised radiative coefficient h_r = eps * 4 sigma T_m^3 [W/(m2 K)].

    Parameters
    ----------
    emissivity : float
        Total hemispherical emissivity of the surface.
    mean_temperature : float
        Mean of the surface and radiant temperatures [K].
    """
    return emissivity * 4.0 * SIGMA * np.asarray(mean_temperature, float) ** 3   # ISO 6946 Annex C


def surface_resistance(h_c, h_r):
    """R_s = 1 / (h_c + h_r) [m2 K/W] (ISO 6946 Annex C)."""
    return 1.0 / (h_c + h_r)


# --- heat flux density -----------------------------------------------------------------

def heat_flux_inside(surface_temperature, air_temperature, radiant_temperature, h_c, emissivity):
    """Heat flux density into an inside surface, Eq. (1), positive from inside to outside.

    Parameters
    ----------
    surface_temperature, air_temperature, radiant_temperature : float or ndarray [K]
    h_c : float or ndarray
        Convective coefficient [W/(m2 K)].
    emissivity : float or ndarray
        Total hemispherical emissivity eps_h.

    Returns
    -------
    q : ndarray [W/m2]
    """
    ts = np.asarray(surface_temperature, float)
    return (h_c * (np.asarray(air_temperature, float) - ts)
            + emissivity * SIGMA * (np.asarray(radiant_temperature, float) ** 4 - ts ** 4))   # Eq. (1)


def heat_flux_outside(surface_temperature, air_temperature, radiant_temperature, h_c, emissivity):
    """Heat flux density leaving an outside surface, Eq. (2), positive from inside to outside.

    ``radiant_temperature`` is that of the sky and ground the wall sees [K].
    """
    ts = np.asarray(surface_temperature, float)
    return (h_c * (ts - np.asarray(air_temperature, float))
            + emissivity * SIGMA * (ts ** 4 - np.asarray(radiant_temperature, float) ** 4))   # Eq. (2)


def environmental_temperature(air_temperature, radiant_temperature, h_c, h_r):
    """T_env = (h_c T_air + h_r T_rad) / (h_c + h_r) [K] (ISO 9869-1 environmental
    temperature; weighting given from memory)."""
    return (h_c * np.asarray(air_temperature, float) + h_r * np.asarray(radiant_temperature, float)) / (h_c + h_r)


# --- time weighting and the average method ---------------------------------------------

def frame_weights(times_s):
    """Duration each frame stands for [s]: the interval to the next frame; the last frame
    gets the median interval, so N regular frames at dt cover N dt.

    Parameters
    ----------
    times_s : ndarray of shape (F,), strictly increasing [s]
    """
    t = np.asarray(times_s, float)
    if t.size == 0:
        return t
    if t.size == 1:
        return np.ones(1)
    d = np.diff(t)
    return np.append(d, np.median(d))


def average_method(q, delta_t, weights=None):
    """ISO 9869-1 average method, Eq. (3): U = sum w q / sum w dT [W/(m2 K)].

    Parameters
    ----------
    q : ndarray of shape (F,) [W/m2]
    delta_t : ndarray of shape (F,), temperature difference driving the flow [K]
    weights : ndarray of shape (F,), duration of each frame [s]; equal when None
    """
    q = np.asarray(q, float)
    w = np.ones_like(q) if weights is None else np.asarray(weights, float)
    den = float(np.sum(w * delta_t))
    return float(np.sum(w * q)) / den if den != 0 else math.nan


def cumulative_u(q, delta_t, weights):
    """Cumulative average U after each frame [W/(m2 K)] (ISO 9869-1 running average)."""
    w = np.asarray(weights, float)
    num = np.cumsum(w * np.asarray(q, float))
    den = np.cumsum(w * np.asarray(delta_t, float))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den != 0, num / den, np.nan)


def _within(a, b, tol):
    return bool(np.isfinite(a) and np.isfinite(b) and b != 0 and abs(a / b - 1.0) <= tol)


def iso9869_criteria(times_s, weights, q, delta_t, areal_heat_capacity=None, element_temperature=None,
                     assumed_capacity=False):
    """ISO 9869-1 acceptance criteria of the average method, applied to a cumulative average.

    Parameters
    ----------
    times_s : ndarray (F,)
        Start time of each frame [s] (any origin).
    weights : ndarray (F,)
        Duration of each frame [s]; frames outside the data window have weight 0.
    q, delta_t : ndarray (F,)
        Heat flux density [W/m2] and driving temperature difference [K].
    areal_heat_capacity : float or None
        Areal heat capacity of the element [J/(m2 K)]; None when unknown.
    element_temperature : ndarray (F,) or None
        Estimate of the element's mean temperature [K] for the stored-heat condition.
    assumed_capacity : bool
        The capacity is an assumed upper value, not a given one (said in the detail).

    Returns
    -------
    list of dict
        ``{"name", "met", "detail", ...figures}``; ``met`` is True, False or None (not
        evaluable). Criteria (ISO 9869-1:2014 clause 7.2, from memory):

        1. duration >= 72 h;
        2. the end value within +-5 % of the value 24 h earlier;
        3. the value from the first INT(2 D/3) whole days within +-5 % of that from the
           last INT(2 D/3) whole days (D the duration in days);
        4. heavy elements (areal heat capacity > 20 kJ/(m2 K)): analysis over whole 24 h
           periods and change of stored heat < 5 % of the heat through the element.
    """
    t = np.asarray(times_s, float)
    w = np.asarray(weights, float)
    q = np.asarray(q, float)
    dT = np.asarray(delta_t, float)
    use = w > 0
    out = []
    if not use.any():
        return [{"name": n, "met": None, "detail": "no frame in the data window"} for n in
                ("duration", "end_vs_24h_earlier", "first_vs_last_days", "stored_heat")]
    tu, wu, qu, du = t[use], w[use], q[use], dT[use]
    end = tu + wu                                 # end of each frame's interval
    duration = float(wu.sum())
    hours = duration / 3600.0
    out.append({"name": "duration", "met": duration >= MIN_DURATION_S - 1e-6, "duration_h": round(hours, 3),
                "detail": f"{hours:.1f} h of data; ISO 9869-1 asks for at least 72 h (from memory)"})
    cum = cumulative_u(qu, du, wu)
    u_end = cum[-1]
    # value 24 h before the end: the cumulative average over the frames ending by then
    cut = end[-1] - DAY_S
    k = np.flatnonzero(end <= cut + 1e-6)
    if k.size == 0:
        out.append({"name": "end_vs_24h_earlier", "met": None,
                    "detail": f"not evaluable: {hours:.1f} h of data, no value 24 h before the end"})
    else:
        u24 = cum[k[-1]]
        dev = (u_end / u24 - 1.0) * 100 if u24 else math.nan
        out.append({"name": "end_vs_24h_earlier", "met": _within(u_end, u24, CONVERGENCE_TOLERANCE),
                    "u_end": float(u_end), "u_24h_earlier": float(u24), "deviation_pct": round(float(dev), 2),
                    "detail": f"end {u_end:.3f} vs 24 h earlier {u24:.3f} W/(m2 K) ({dev:+.1f} %, limit +-5 %)"})
    days = int(2 * (duration / DAY_S) / 3 + 1e-9)      # INT(2 D / 3)
    if days < 1:
        out.append({"name": "first_vs_last_days", "met": None,
                    "detail": f"not evaluable: INT(2 D/3) = 0 whole days for D = {duration / DAY_S:.2f} d"})
    else:
        span = days * DAY_S
        first = end <= tu[0] + span + 1e-6
        last = tu >= end[-1] - span - 1e-6
        u1 = average_method(qu[first], du[first], wu[first])
        u2 = average_method(qu[last], du[last], wu[last])
        dev = (u1 / u2 - 1.0) * 100 if u2 else math.nan
        out.append({"name": "first_vs_last_days", "met": _within(u1, u2, CONVERGENCE_TOLERANCE), "days": days,
                    "u_first": float(u1), "u_last": float(u2), "deviation_pct": round(float(dev), 2),
                    "detail": f"first {days} d {u1:.3f} vs last {days} d {u2:.3f} W/(m2 K) "
                              f"({dev:+.1f} %, limit +-5 %)"})
    out.append(_stored_heat(tu, wu, qu, end, duration, areal_heat_capacity, element_temperature,
                            use, assumed_capacity))
    return out


def _stored_heat(tu, wu, qu, end, duration, capacity, element_temperature, use, assumed):
    name = "stored_heat"
    whole_days = abs(duration / DAY_S - round(duration / DAY_S)) * DAY_S <= 0.5 * float(np.median(wu)) \
        and duration >= DAY_S - 1e-6
    if capacity is None:
        return {"name": name, "met": None,
                "detail": "not evaluable: areal heat capacity unknown (give heat_flow.areal_heat_capacity_kj_m2k)"}
    if capacity <= HEAVY_CAPACITY_J_M2K:
        return {"name": name, "met": True,
                "detail": f"light element ({capacity / 1e3:.0f} kJ/(m2 K) <= 20): condition does not apply "
                          "(ISO 9869-1, from memory)"}
    if element_temperature is None or duration < DAY_S - 1e-6:
        return {"name": name, "met": None,
                "detail": "not evaluable: heavy element needs at least one whole 24 h period"}
    te = np.asarray(element_temperature, float)[use]
    first = end <= tu[0] + DAY_S + 1e-6
    last = tu >= end[-1] - DAY_S - 1e-6
    d_theta = float(np.average(te[last], weights=wu[last]) - np.average(te[first], weights=wu[first]))
    stored = capacity * d_theta                          # [J/m2]
    through = float(np.sum(wu * qu))                     # [J/m2]
    frac = abs(stored / through) if through else math.inf
    src = "assumed" if assumed else "given"
    ok = bool(whole_days and frac < STORED_HEAT_TOLERANCE)
    return {"name": name, "met": ok, "stored_fraction": round(frac, 4), "whole_days": bool(whole_days),
            "detail": f"heavy element ({src} {capacity / 1e3:.0f} kJ/(m2 K)): change of stored heat "
                      f"{100 * frac:.1f} % of the heat through (limit 5 %), analysis over "
                      f"{'whole' if whole_days else 'NOT whole'} 24 h periods (ISO 9869-1, from memory)"}


def survey_condition_checks(indoor_c, outdoor_c, weights, min_difference_k=10.0, max_indoor_std_k=1.0,
                            max_difference_cv=0.3):
    """Survey conditions the air log makes checkable (common practice, no source; a 10 K
    indoor-outdoor difference is the usual rule for quantitative thermography).

    Parameters
    ----------
    indoor_c, outdoor_c : ndarray (F,) air temperatures [C]
    weights : ndarray (F,) frame durations [s]

    Returns
    -------
    list of dict ``{"name", "met", "detail"}``.
    """
    w = np.asarray(weights, float)
    use = w > 0
    ti, te, w = np.asarray(indoor_c, float)[use], np.asarray(outdoor_c, float)[use], w[use]
    d = ti - te
    md = float(np.average(d, weights=w))
    mind = float(d.min())
    si = float(np.sqrt(np.average((ti - np.average(ti, weights=w)) ** 2, weights=w)))
    sd = float(np.sqrt(np.average((d - md) ** 2, weights=w)))
    cv = sd / md if md > 0 else math.inf
    return [
        {"name": "indoor_outdoor_difference", "met": md >= min_difference_k, "mean_k": round(md, 3),
         "minimum_k": round(mind, 3),
         "detail": f"mean indoor-outdoor difference {md:.1f} K (minimum {mind:.1f} K); at least "
                   f"{min_difference_k:g} K is common practice (no source)"},
        {"name": "indoor_air_stability", "met": si <= max_indoor_std_k, "std_k": round(si, 3),
         "detail": f"indoor air standard deviation {si:.2f} K (at most {max_indoor_std_k:g} K: common "
                   "practice, no source)"},
        {"name": "outdoor_air_stability", "met": cv <= max_difference_cv, "difference_cv": round(cv, 3),
         "detail": f"indoor-outdoor difference varies by {100 * cv:.0f} % (standard deviation over mean; at "
                   f"most {100 * max_difference_cv:.0f} %: common practice, no source)"},
    ]


# --- size on the wall ---------------------------------------------------------------------

def pixel_footprint(distance, cols, ifov=None, horizontal_fov=None, view_angle=0.0, tilt_axis="rows"):
    """Side lengths of one pixel on the wall (along rows, along cols) [m].

    Parameters
    ----------
    distance : float
        Camera-to-surface distance along the line of sight [m].
    cols : int
        Image width in pixels (for ``horizontal_fov``).
    ifov : float, optional
        Instantaneous field of view [rad]: side = d * IFOV (small angle).
    horizontal_fov : float, optional
        Horizontal field of view [rad]: side = 2 d tan(HFOV / 2) / W, the flat-wall form
        (the wall's width seen over W pixels at normal view).
    view_angle : float
        Angle between the line of sight and the wall normal [rad].
    tilt_axis : {"rows", "cols"}
        Image axis along which the wall recedes; that side is divided by cos(view angle).

    Returns
    -------
    (side_along_rows, side_along_cols) : tuple of float [m]
        ``side_along_rows`` is the pixel's extent in the direction in which the row index grows.
    """
    if ifov is not None:
        s = distance * ifov
    elif horizontal_fov is not None:
        s = 2.0 * distance * math.tan(horizontal_fov / 2.0) / cols
    else:
        raise ValueError("give ifov or horizontal_fov")
    c = math.cos(view_angle)
    return (s / c, s) if tilt_axis == "rows" else (s, s / c)


def footprint_from_scale(length, p0, p1, view_angle=0.0, tilt_axis="rows"):
    """Pixel sides [m] from a known length between two image points (row, col).

    The side along the tilt axis is 1/cos(view angle) times the other:
    length^2 = (dr s_r)^2 + (dc s_c)^2.
    """
    dr, dc = abs(p1[0] - p0[0]), abs(p1[1] - p0[1])
    f = 1.0 / math.cos(view_angle)
    fr, fc = (f, 1.0) if tilt_axis == "rows" else (1.0, f)
    s0 = length / math.hypot(dr * fr, dc * fc)
    return s0 * fr, s0 * fc


# --- thermal bridges and energy ---------------------------------------------------------------

def linear_thermal_transmittance(u_map, pixel_area, mask, u_ref, length):
    """psi = sum_px (U_px - U_ref) A_px / L [W/(m K)] over the valid pixels of ``mask``
    (Tejedor et al. 2020; definition of psi as in ISO 14683).

    Parameters
    ----------
    u_map : ndarray (M, N) [W/(m2 K)], NaN where invalid
    pixel_area : float or ndarray (M, N) [m2]
    mask : ndarray (M, N) bool
    u_ref : float
        U of the undisturbed wall [W/(m2 K)].
    length : float
        Length of the bridge [m].
    """
    a = np.broadcast_to(np.asarray(pixel_area, float), u_map.shape)
    ok = mask & np.isfinite(u_map)
    return float(np.sum((u_map[ok] - u_ref) * a[ok])) / length


def bridge_border(mask):
    """The two edges of a bridge region across the bridge: for a region longer along rows,
    the first and last column of each row; otherwise the first and last row of each column.

    Returns
    -------
    (edge_a, edge_b) : ndarray (M, N) bool
    """
    rr, cc = np.nonzero(mask)
    a = np.zeros_like(mask, bool)
    b = np.zeros_like(mask, bool)
    if rr.size == 0:
        return a, b
    along_rows = (rr.max() - rr.min()) >= (cc.max() - cc.min())
    if along_rows:
        for r in np.unique(rr):
            cs = cc[rr == r]
            a[r, cs.min()] = True
            b[r, cs.max()] = True
    else:
        for c in np.unique(cc):
            rs = rr[cc == c]
            a[rs.min(), c] = True
            b[rs.max(), c] = True
    return a, b


def annual_heat_loss_kwh(u, area, heating_degree_days):
    """Annual transmission heat loss Q = U A HDD 24 / 1000 [kWh/a] (degree-day method,
    common practice).

    Parameters
    ----------
    u : float [W/(m2 K)]; area : float [m2]; heating_degree_days : float [K d/a]
    """
    return u * area * heating_degree_days * 24.0 / 1000.0


def bridge_excess_loss_kwh(psi, length, heating_degree_days):
    """Excess annual loss of a thermal bridge psi L HDD 24 / 1000 [kWh/a]."""
    return psi * length * heating_degree_days * 24.0 / 1000.0


# --- uncertainty of a region's U (GUM and Monte Carlo) ----------------------------------------

INPUTS = ("surface", "emissivity", "radiant", "h_c", "indoor_air", "outdoor_air")


def region_u(series, e, side="inside"):
    """U of a region for perturbations ``e`` of the systematic inputs, each constant over
    frames and pixels (fully correlated).

    Parameters
    ----------
    series : dict of ndarray (F,)
        ``w`` frame durations [s], ``t_ai``, ``t_ae`` air [K], ``t_r`` radiant [K], ``h_c``
        [W/(m2 K)], ``eps_h``, and the region's per-frame pixel means of T_s^k, ``m1`` ..
        ``m4`` [K^k]; ``dts`` (scalar dict) sensitivities of the surface temperature to
        the emissivity ``d_eps`` [K] and to the radiant temperature ``d_tr`` [K/K].
    e : dict of ndarray (D,)
        Draws of the errors: ``surface`` [K] (camera offset or contact sensor),
        ``emissivity`` [fraction], ``eps_h`` [fraction], ``radiant`` [K], ``h_c``
        [W/(m2 K)], ``indoor_air``, ``outdoor_air`` [K].

    Returns
    -------
    ndarray (D,) of U [W/(m2 K)]
    """
    s = series
    w = s["w"][None, :]
    z = np.zeros(1)
    g = {k: np.atleast_1d(np.asarray(e.get(k, z), float))[:, None] for k in
         ("surface", "emissivity", "eps_h", "radiant", "h_c", "indoor_air", "outdoor_air")}
    d = g["surface"] + s["d_eps"] * g["emissivity"] + s["d_tr"] * g["radiant"]     # common shift of T_s
    m1, m2, m3, m4 = s["m1"], s["m2"], s["m3"], s["m4"]
    ts4 = m4 + 4 * d * m3 + 6 * d ** 2 * m2 + 4 * d ** 3 * m1 + d ** 4     # mean (T_s + d)^4 over pixels
    ts1 = m1 + d
    eps_h = s["eps_h"] + g["eps_h"]
    hc = s["h_c"] + g["h_c"]
    tr = s["t_r"] + g["radiant"]
    tai = s["t_ai"] + g["indoor_air"]
    tae = s["t_ae"] + g["outdoor_air"]
    if side == "inside":
        q = hc * (tai - ts1) + eps_h * SIGMA * (tr ** 4 - ts4)
        dT = tai - tae
    else:
        q = hc * (ts1 - tae) + eps_h * SIGMA * (ts4 - tr ** 4)
        hr = radiative_coefficient(eps_h, 0.5 * (ts1 + tr))
        dT = tai - environmental_temperature(tae, tr, hc, hr)
    return np.sum(w * q, axis=1) / np.sum(w * dT, axis=1)


def _draws(u, n, rng, eps_h_ratio):
    """Normal draws of each systematic input; eps_h follows the emissivity through
    ``eps_h_ratio`` (derived) or is drawn on its own (``eps_h_ratio`` None)."""
    e = {k: rng.standard_normal(n) * u.get(k, 0.0) for k in
         ("surface", "emissivity", "radiant", "h_c", "indoor_air", "outdoor_air")}
    if eps_h_ratio is not None:
        e["eps_h"] = eps_h_ratio * e["emissivity"]
    else:
        e["eps_h"] = rng.standard_normal(n) * u.get("eps_h", 0.0)
    return e


def u_value_uncertainty_mc(series, u, side="inside", draws=20000, seed=12345, eps_h_ratio=None):
    """Monte Carlo propagation (JCGM 101:2008) of the systematic inputs through the average
    method, each input one draw shared by all frames and pixels.

    Parameters
    ----------
    series : dict, see ``region_u``
    u : dict
        Standard uncertainties: ``surface`` [K], ``emissivity``, ``eps_h``, ``radiant`` [K],
        ``h_c`` [W/(m2 K)], ``indoor_air``, ``outdoor_air`` [K].

    Returns
    -------
    dict with ``u`` (nominal), ``standard_uncertainty``, ``expanded_uncertainty`` (half-width
    of the probabilistically symmetric 95 % coverage interval), ``interval`` (2.5 %, 97.5 %).
    """
    rng = np.random.default_rng(seed)
    vals = []
    batch = max(1, min(draws, int(2e6 // max(len(series["w"]), 1))))
    done = 0
    while done < draws:
        n = min(batch, draws - done)
        vals.append(region_u(series, _draws(u, n, rng, eps_h_ratio), side))
        done += n
    v = np.concatenate(vals)
    v = v[np.isfinite(v)]
    nominal = float(region_u(series, {}, side)[0])
    lo, hi = np.percentile(v, [2.5, 97.5])               # JCGM 101 clause 7.7, symmetric interval
    return {"u": nominal, "standard_uncertainty": float(v.std(ddof=1)),
            "expanded_uncertainty": float((hi - lo) / 2.0), "interval": (float(lo), float(hi)), "draws": int(v.size)}


def u_value_uncertainty_gum(series, u, side="inside", eps_h_ratio=None):
    """GUM law of propagation (JCGM 100:2008 Eq. 10) with sensitivity coefficients by
    central differences of ``region_u``; the emissivity enters both the surface
    temperature and eps_h (when derived from it) through one coefficient, so their
    correlation is kept.

    Returns
    -------
    dict with ``u``, ``standard_uncertainty``, ``expanded_uncertainty`` (k = 2) and
    ``budget`` {input: |c_i| u_i}.
    """
    nominal = float(region_u(series, {}, side)[0])
    budget = {}
    keys = ["surface", "emissivity", "radiant", "h_c", "indoor_air", "outdoor_air"]
    if eps_h_ratio is None:
        keys.append("eps_h")
    from .uncertainty import sensitivity

    def moved(**kw):                 # U with one input moved by the given deviation
        (k, dev), = kw.items()
        d = {k: np.array([dev])}
        if k == "emissivity" and eps_h_ratio is not None:
            d["eps_h"] = eps_h_ratio * d[k]
        return float(region_u(series, d, side)[0])

    active = [k for k in keys if u.get(k, 0.0)]
    coef = sensitivity(moved, {k: 0.0 for k in active}, {k: u[k] * 1e-2 for k in active})
    for k in active:
        budget[k] = abs(coef[k]) * u[k]
    uc = math.sqrt(sum(v * v for v in budget.values()))
    return {"u": nominal, "standard_uncertainty": uc, "expanded_uncertainty": 2.0 * uc, "budget": budget}


def power_means(temperature_k, axis=None):
    """Means of T, T^2, T^3, T^4 over ``axis`` (NaN ignored) for ``region_u``."""
    t = np.asarray(temperature_k, float)
    return tuple(np.nanmean(t ** k, axis=axis) for k in (1, 2, 3, 4))
