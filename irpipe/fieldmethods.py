"""Field methods: measuring an emissivity on site, and calibrating the camera against a
blackbody. Pure functions on arrays; the commands ``irpipe emissivity`` and ``irpipe
calibrate`` (``irpipe.cli_field``) read the files and call them.

Emissivity (ASTM E1933 [1]_). A surface of unknown emissivity eps is compared with a
neighbouring reference of known emissivity eps_ref (tape, paint: the "non-contact
thermometer method") at the same temperature, or with a contact-thermometer reading
(the "contact thermometer method"). With the reflected temperature T_refl (ASTM E1862
[2]_) and the path known, the surface temperature T comes from the reference (or the
probe), and the measurement equation solved for the emissivity gives

    eps = [S - P - G(T_refl)] / [G(T) - G(T_refl)],

S the surface's offset-free signal, P = S(T_air) - G(T_air) the path emission and
G(T) = S(T) tau_eff(T) (``irpipe.correction``). Its standard uncertainty follows the GUM
[3]_: central-difference sensitivities to u(eps_ref), u(T_refl), u(T_contact) and the
camera, plus the scatter of the per-pixel estimates over the region.

Calibration. Blackbody frames at known temperatures give (i) per-pixel gain and offset
maps by the two-point non-uniformity correction (``calibration.two_point_nuc``) between
the coldest and hottest reference, and (ii) a fit of the ``linear`` or
``sakuma-hattori`` model (``calibration.fit_linear``, ``calibration.fit_sakuma_hattori``)
to the corrected counts; residuals are given in kelvin per reference point.

References
----------
.. [1] ASTM E1933-14 (2022), "Standard Practice for Measuring and Compensating for
   Emissivity Using Infrared Imaging Radiometers", ASTM International.
.. [2] ASTM E1862-14 (2022), "Standard Practice for Measuring and Compensating for
   Reflected Temperature Using Infrared Imaging Radiometers", ASTM International.
.. [3] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement", BIPM (2008).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .calibration import (fit_linear, fit_sakuma_hattori, sakuma_hattori_signal, sakuma_hattori_temperature,
                          two_point_nuc)
from .constants import ZERO_CELSIUS
from .uncertainty import COVERAGE_FACTOR, STEPS, sensitivity

# A surface closer than this to the reflected temperature leaves G(T) - G(T_refl) too
# small for a useful emissivity (ASTM E1933 asks for a specimen temperature well away
# from the reflected temperature; the 10 K figure is common practice, from memory).
MIN_CONTRAST_K = 10.0


# --- emissivity (ASTM E1933) -----------------------------------------------------------

@dataclass
class EmissivityEstimate:
    """An emissivity measured on site, with its GUM uncertainty.

    Attributes
    ----------
    emissivity : float
        Estimate (mean over the region's pixels) [fraction].
    standard_uncertainty : float
        Combined standard uncertainty u_c [fraction].
    expanded_uncertainty : float
        U = k u_c [fraction], k = ``coverage_factor``.
    coverage_factor : float
    surface_temperature : float
        Surface temperature used (from the reference or the probe) [K].
    reflected_temperature : float
        [K].
    method : str
        "reference" (non-contact, reference material) or "contact".
    budget : dict
        Standard contributions |c_i| u(x_i) per input [fraction].
    pixels : int
        Pixels in the region.
    pixel_scatter : float
        Standard deviation of the per-pixel estimates [fraction].
    warnings : list of str
    """

    emissivity: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float
    surface_temperature: float
    reflected_temperature: float
    method: str
    budget: dict
    pixels: int
    pixel_scatter: float
    warnings: list = field(default_factory=list)


def emissivity_from_signal(signal, surface_temperature, reflected_temperature, air_temperature, model):
    """Emissivity that makes the measurement equation give ``surface_temperature``.

    Parameters
    ----------
    signal : array_like
        Offset-free received signal of the surface (camera units).
    surface_temperature, reflected_temperature, air_temperature : float or array_like
        [K].
    model : irpipe.correction.MeasurementModel

    Returns
    -------
    ndarray
        eps = [S - P - G(T_refl)] / [G(T) - G(T_refl)]  [fraction]; NaN where
        G(T) = G(T_refl).

    Notes
    -----
    The measurement equation S = eps G(T) + (1 - eps) G(T_refl) + P ([1]_ procedure,
    written in signal units; see ``irpipe.correction``) solved for eps.
    """
    g_refl, path = model.background(1.0, reflected_temperature, air_temperature)
    g_t = model.path_signal(np.asarray(surface_temperature, float))
    with np.errstate(invalid="ignore", divide="ignore"):
        return (np.asarray(signal, float) - path - g_refl) / (g_t - g_refl)


def _shift_apparent(model, signal, dt):
    """Signal of the apparent temperature moved by dt [K] (a camera reading error)."""
    s = np.atleast_1d(np.asarray(signal, float))
    return model.signal_table.forward(model.apparent_temperature(s) + dt)


def estimate_emissivity(surface_signal, reflected_temperature, air_temperature, model, *,
                        reference_signal=None, reference_emissivity=None, contact_temperature=None,
                        u_reference_emissivity=0.0, u_reflected_temperature=0.0, u_contact=0.0, u_camera=0.0,
                        coverage_factor=COVERAGE_FACTOR):
    """Emissivity of a surface region by ASTM E1933, with its GUM uncertainty.

    Give either ``reference_signal`` with ``reference_emissivity`` (non-contact method:
    a reference material of known emissivity on the same surface, at the same
    temperature) or ``contact_temperature`` (contact thermometer method).

    Parameters
    ----------
    surface_signal : ndarray of shape (P,)
        Offset-free signal of each pixel of the unknown surface (frame mean).
    reflected_temperature : float
        Reflected temperature [K] (ASTM E1862).
    air_temperature : float
        Air temperature of the path [K].
    model : irpipe.correction.MeasurementModel
        Camera and path of the stack.
    reference_signal : ndarray of shape (Q,), optional
        Offset-free signal of each pixel of the reference region (frame mean).
    reference_emissivity : float, optional
        Emissivity of the reference material [fraction].
    contact_temperature : float, optional
        Surface temperature read by a contact thermometer [K].
    u_reference_emissivity : float
        Standard uncertainty of ``reference_emissivity`` [fraction].
    u_reflected_temperature : float
        Standard uncertainty of the reflected temperature [K].
    u_contact : float
        Standard uncertainty of the contact reading [K] (include the probe's disturbance
        of the surface).
    u_camera : float
        Standard uncertainty of the camera's apparent temperature [K]; treated as common
        to both regions (an offset of the camera cancels largely in the non-contact
        method).
    coverage_factor : float
        k for the expanded uncertainty.

    Returns
    -------
    EmissivityEstimate

    Notes
    -----
    T = T_obj(S_ref; eps_ref, T_refl) from the reference (or the probe), then
    eps = [S - P - G(T_refl)] / [G(T) - G(T_refl)] on the region-mean signal
    (``emissivity_from_signal``). u_c^2 = sum_i c_i^2 u_i^2 + s_pix^2 (Eq. 10 of [3]_),
    with c_i by central differences and s_pix the standard deviation of the per-pixel
    estimates. s_pix is not divided by sqrt(P): neighbouring pixels are not independent
    (optics, real surface texture) and the value will be applied to single pixels.
    """
    s = np.asarray(surface_signal, float).ravel()
    s = s[np.isfinite(s)]
    if s.size == 0:
        raise ValueError("the surface region has no valid pixel")
    contact = contact_temperature is not None
    if contact == (reference_signal is not None):
        raise ValueError("give either a reference region with its emissivity or a contact temperature")
    if not contact:
        if reference_emissivity is None or not 0 < reference_emissivity <= 1:
            raise ValueError(f"reference emissivity must be in (0, 1], got {reference_emissivity!r}")
        r = np.asarray(reference_signal, float).ravel()
        r = r[np.isfinite(r)]
        if r.size == 0:
            raise ValueError("the reference region has no valid pixel")
    s_mean = float(s.mean())
    r_mean = None if contact else float(r.mean())

    def surface_t(tr, eps_ref, t_contact, dt_cam):
        if contact:
            return float(t_contact)
        rs = _shift_apparent(model, r_mean, dt_cam) if dt_cam else np.array([r_mean])
        return float(model.object_temperature(rs, eps_ref, tr, air_temperature)[0])

    def estimate(tr, eps_ref, t_contact, dt_cam):
        t = surface_t(tr, eps_ref, t_contact, dt_cam)
        ss = _shift_apparent(model, s_mean, dt_cam) if dt_cam else np.array([s_mean])
        return float(emissivity_from_signal(ss, t, tr, air_temperature, model)[0])

    x0 = dict(tr=float(reflected_temperature), eps_ref=reference_emissivity, t_contact=contact_temperature,
              dt_cam=0.0)
    eps0 = estimate(**x0)
    t0 = surface_t(x0["tr"], reference_emissivity, contact_temperature, 0.0)
    if not np.isfinite(t0):
        raise ValueError("the reference region's signal has no physical solution; check its emissivity and "
                         "the reflected temperature")
    inputs = [("reflected_temperature", "tr", u_reflected_temperature),
              ("camera", "dt_cam", u_camera)]
    inputs += [("contact_temperature", "t_contact", u_contact)] if contact else \
        [("reference_emissivity", "eps_ref", u_reference_emissivity)]
    inputs = [(name, key, u) for name, key, u in inputs if u]
    coef = sensitivity(lambda **one: estimate(**{**x0, **one}), x0, {key: STEPS[name] for name, key, _ in inputs})
    budget = {name: abs(float(coef[key])) * u for name, key, u in inputs}
    eps_pix = emissivity_from_signal(s, t0, x0["tr"], air_temperature, model)
    scatter = float(np.std(eps_pix, ddof=1)) if s.size > 1 else 0.0
    budget["pixel_scatter"] = scatter
    uc = float(np.sqrt(sum(v * v for v in budget.values())))           # Eq. 10 of [3]
    warnings = []
    if abs(t0 - x0["tr"]) < MIN_CONTRAST_K:
        warnings.append(f"the surface ({t0 - ZERO_CELSIUS:.1f} C) is only {abs(t0 - x0['tr']):.1f} K from the "
                        f"reflected temperature ({x0['tr'] - ZERO_CELSIUS:.1f} C); below about {MIN_CONTRAST_K:g} K "
                        "the method loses its sensitivity: heat or cool the specimen, or change the surroundings")
    if not 0 < eps0 <= 1:
        warnings.append(f"the estimate {eps0:.3f} is outside (0, 1]: check the reflected temperature, the "
                        "reference emissivity and that both regions are at the same temperature")
    return EmissivityEstimate(eps0, uc, coverage_factor * uc, coverage_factor, t0, x0["tr"],
                              "contact" if contact else "reference",
                              budget, int(s.size), scatter, warnings)


# --- calibration against a blackbody -----------------------------------------------------

@dataclass
class CalibrationFit:
    """A calibration model fitted to blackbody reference points.

    Attributes
    ----------
    parameters : dict
        The ``camera.calibration`` mapping in config units: ``{model: linear, gain,
        offset_counts}`` or ``{model: sakuma-hattori, A_um, B_umK, C, offset_counts}``.
    temperatures : ndarray of shape (K,)
        Reference temperatures [K].
    counts : ndarray of shape (K,)
        Mean (NUC-corrected) counts at each reference.
    residuals : ndarray of shape (K,)
        Temperature given by the fitted model at each reference minus the reference [K].
    """

    parameters: dict
    temperatures: np.ndarray
    counts: np.ndarray
    residuals: np.ndarray


def _bb_source_signal(signal_func, temperatures, emissivity, surroundings):
    """Signal a blackbody of ``emissivity`` at T sends, reflecting surroundings at T_s."""
    if emissivity >= 1.0:
        return signal_func(temperatures)
    return emissivity * signal_func(temperatures) + (1 - emissivity) * signal_func(surroundings)


def fit_calibration(temperatures, counts, response, model="linear", blackbody_emissivity=1.0,
                    surroundings_temperature=None, offset_counts=None):
    """Fit a counts calibration to blackbody reference points.

    Parameters
    ----------
    temperatures : array_like of shape (K,)
        Blackbody temperatures [K].
    counts : array_like of shape (K,)
        Mean counts of the blackbody at each temperature (after NUC, when used).
    response : irpipe.radiometry.SpectralResponse
        Camera spectral response (band radiance for the ``linear`` model).
    model : {"linear", "sakuma-hattori"}
    blackbody_emissivity : float
        Emissivity of the reference source [fraction]; below 1 the source also reflects
        its surroundings.
    surroundings_temperature : float, optional
        Temperature of the surroundings reflected by the source [K]; needed when
        ``blackbody_emissivity`` < 1.
    offset_counts : float, optional
        ``sakuma-hattori``: counts at zero signal, when known (e.g. from a shutter
        frame); fitted when None and at least 4 references are given, else 0. The
        ``linear`` model always fits its offset.

    Returns
    -------
    CalibrationFit

    Notes
    -----
    linear: counts = gain [eps L(T) + (1 - eps) L(T_s)] + offset, least squares
    (``fit_linear``). sakuma-hattori: counts - offset = eps S(T) + (1 - eps) S(T_s) with
    S(T) = C / (exp(c2 / (A T + B)) - 1); for eps < 1 the blackbody-equivalent signal is
    refined by fixed-point iteration (the reflected part is small), and the offset, when
    fitted, by a bounded one-dimensional search on the RMS residual in kelvin.
    """
    t = np.asarray(temperatures, float)
    k = np.asarray(counts, float)
    order = np.argsort(t)
    t, k = t[order], k[order]
    eps = float(blackbody_emissivity)
    if not 0 < eps <= 1:
        raise ValueError(f"blackbody emissivity must be in (0, 1], got {eps!r}")
    if eps < 1 and surroundings_temperature is None:
        raise ValueError("a blackbody emissivity below 1 needs the temperature of the surroundings it reflects")
    ts = surroundings_temperature
    if model == "linear":
        if t.size < 2:
            raise ValueError("the linear model needs at least 2 reference temperatures")
        l_src = _bb_source_signal(response.band_radiance, t, eps, ts)
        gain, offset = fit_linear(l_src, k)
        params = {"model": "linear", "gain": float(gain), "offset_counts": float(offset)}
        t_fit = _invert_source((k - offset) / gain, response.band_radiance, eps, ts, t)
        return CalibrationFit(params, t, k, t_fit - t)
    if model != "sakuma-hattori":
        raise ValueError(f"unknown calibration model '{model}'; use linear or sakuma-hattori")
    if t.size < 3:
        raise ValueError("the Sakuma-Hattori model needs at least 3 reference temperatures")

    lam0 = 0.5 * sum(response.band)                 # start A at the band centre

    def fit(offset):
        s = k - offset
        if np.any(s <= 0):
            return None, np.inf
        s_bb = s.copy()
        a0, b0 = lam0, 50e-6
        try:
            with np.errstate(over="ignore", invalid="ignore"):
                for _ in range(8 if eps < 1 else 1):
                    a, b, c = fit_sakuma_hattori(t, s_bb, a0=a0, b0=b0)
                    a0, b0 = a, b
                    if eps < 1:
                        s_bb = (s - (1 - eps) * sakuma_hattori_signal(ts, a, b, c)) / eps
                resid = _invert_source(s, lambda x: sakuma_hattori_signal(x, a, b, c), eps, ts, t,
                                       inverse=lambda y: sakuma_hattori_temperature(y, a, b, c)) - t
        except (ValueError, FloatingPointError):
            return None, np.inf
        rms = float(np.sqrt(np.mean(resid**2)))
        return ((a, b, c), rms) if np.isfinite(rms) and np.isfinite(c) else (None, np.inf)

    if offset_counts is None and t.size >= 4:
        # start from the offset of a straight line in band radiance (S-H follows the band
        # radiance closely), then refine it on the RMS residual in kelvin
        from scipy.optimize import minimize_scalar
        _, off_lin = fit_linear(_bb_source_signal(response.band_radiance, t, eps, ts), k)
        span = float(k.max() - k.min())
        hi_b = min(float(k.min()) - 1e-6 * max(span, 1.0), off_lin + 0.25 * span)
        lo_b = min(off_lin - 0.25 * span, hi_b - 0.5 * span)
        res = minimize_scalar(lambda o: fit(o)[1], bounds=(lo_b, hi_b), method="bounded",
                              options={"xatol": 1e-9 * max(span, 1.0), "maxiter": 200})
        offset = float(res.x)
    else:
        offset = 0.0 if offset_counts is None else float(offset_counts)
    p, _ = fit(offset)
    if p is None:
        raise ValueError("the Sakuma-Hattori fit failed; check the reference temperatures and counts "
                         "(counts must rise with temperature)")
    a, b, c = p
    params = {"model": "sakuma-hattori", "A_um": float(a * 1e6), "B_umK": float(b * 1e6), "C": float(c),
              "offset_counts": float(offset)}
    t_fit = _invert_source(k - offset, lambda x: sakuma_hattori_signal(x, a, b, c), eps, ts, t,
                           inverse=lambda y: sakuma_hattori_temperature(y, a, b, c))
    return CalibrationFit(params, t, k, t_fit - t)


def _invert_source(signal, signal_func, eps, surroundings, t_ref, inverse=None):
    """Temperature of a source of emissivity ``eps`` giving ``signal`` [K]."""
    from .radiometry import MonotoneTable

    s = np.asarray(signal, float)
    if eps < 1:
        s = (s - (1 - eps) * signal_func(surroundings)) / eps
    if inverse is not None:
        return inverse(s)
    tab = MonotoneTable(signal_func, float(np.min(t_ref)) - 40.0, float(np.max(t_ref)) + 40.0, n=1024)
    return tab.inverse(s)


def nuc_from_references(frames_low, frames_high, max_gain_ratio=2.0):
    """Two-point NUC maps from the coldest and hottest blackbody frames, with bad pixels.

    Parameters
    ----------
    frames_low, frames_high : ndarray of shape (M, N)
        Mean raw frames of the uniform source at the lowest and highest temperature.
    max_gain_ratio : float
        A pixel whose gain is more than this factor from the median gain (either way),
        or not finite, is flagged bad (common practice, no source).

    Returns
    -------
    gain, offset : ndarray of shape (M, N)
        Corrected counts = gain raw + offset (``calibration.two_point_nuc``, targets the
        spatial medians); bad pixels get the median gain and offset so the maps stay
        finite (the pipeline replaces them when given the bad-pixel mask).
    bad : ndarray of bool, shape (M, N)
        Bad (dead, stuck or erratic) pixels.
    """
    lo = np.asarray(frames_low, float)
    hi = np.asarray(frames_high, float)
    good0 = np.isfinite(lo) & np.isfinite(hi) & (hi > lo)
    if not good0.any():
        raise ValueError("the hottest reference does not read higher than the coldest on any pixel")
    gain, offset = two_point_nuc(lo, hi, np.median(lo[good0]), np.median(hi[good0]))
    med = np.median(gain[good0])
    with np.errstate(invalid="ignore", divide="ignore"):
        bad = ~good0 | ~np.isfinite(gain) | (gain > med * max_gain_ratio) | (gain < med / max_gain_ratio)
    gain = np.where(bad, med, gain)
    offset = np.where(bad, np.median(offset[~bad]), offset)
    return gain, offset, bad
