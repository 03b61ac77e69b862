"""Benchmark: building measurement models for a survey of many stacks, with the
uncertainty variants of each, with and without the shared tables of irpipe.modeltables.

Each stack has its own distance (1 m + 0.45 m per stack) and reflected temperature
(-10 C + 0.1 K per stack) at one air temperature and humidity, as on one survey day.
Per stack the benchmark does what preparing and the uncertainty stage do: the path's
spectral transmittance (LOWTRAN7 table), the nominal ``MeasurementModel`` on the default
range -60..650 C, its report figure (``describe``) and background, and a GUM
propagation over 1024 signal values with non-zero u for all six inputs, whose path
inputs build six perturbed-path models through a ``ModelCache`` (as
``irpipe.stages.uncertainty.model_factory`` does). A second survey repeats 10 distinct
distances over the stacks (equal conditions).

Modes, each in a fresh Python process:

* ``cached``: the current code;
* ``uncached``: the current code inside ``modeltables.disabled()``: the same arithmetic
  with Planck's law evaluated afresh for every model, i.e. the cost before the caches;
* ``before``: with ``--before DIR``, the package at DIR (e.g. ``git archive`` of an
  older commit) instead of this checkout.

The U values of every mode are hashed: equal hashes show that the caches change no
number. Reported: seconds per stack, models built, calls of ``planck_radiance`` and
peak RSS of the process.

    python benchmarks/bench_model.py [--stacks 200] [--reference-stacks N] [--modes cached,uncached]
                                     [--before DIR]

Prints a table and writes ``benchmarks/results_model.json``.
"""
from __future__ import annotations

import argparse
import hashlib
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
T_RANGE_C = (-60.0, 650.0)        # irpipe's default camera range
AIR_K, RH = 278.15, 0.75


def _worker(mode, stacks, repeat_distances, compare):
    import numpy as np

    from irpipe import radiometry
    from irpipe.atmosphere import spectral_transmittance
    from irpipe.correction import CameraModel, MeasurementModel
    from irpipe.radiometry import SpectralResponse
    from irpipe.uncertainty import InputUncertainties, ModelCache, gum_uncertainty, path_variant

    calls = [0]
    planck = radiometry.planck_radiance

    def counting(*a):
        calls[0] += 1
        return planck(*a)

    radiometry.planck_radiance = counting
    try:
        from irpipe import modeltables
    except ImportError:             # an older checkout
        modeltables = None
    if mode == "uncached":
        no_cache = modeltables.disabled()      # held for the life of the process
        no_cache.__enter__()

    cam = CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6))
    lam = cam.response.wavelength
    t_range = (T_RANGE_C[0] + 273.15, T_RANGE_C[1] + 273.15)
    u = InputUncertainties(emissivity=0.02, reflected_temperature=1.0, air_temperature=0.5,
                           relative_humidity=0.05, distance=0.1, camera=0.3)
    digests = []
    built = [0]

    def stack(distance, reflected):
        tau = spectral_transmittance(lam, distance, AIR_K, RH)
        base = MeasurementModel(cam, tau, t_range)
        built[0] += 1
        base.describe()
        base.background(0.9, reflected, AIR_K)

        def make(ta, rh, d):
            t = spectral_transmittance(lam, d, ta, rh) if d > 0 else 1.0
            if np.shape(t) == base.tau.shape and np.array_equal(t, base.tau):
                return base
            built[0] += 1
            return path_variant(base, t)

        models = ModelCache(make, known={(AIR_K, RH, distance): base})
        s = base.signal_table.forward_fast(np.linspace(250.0, 330.0, 1024))
        uc = gum_uncertainty(s, 0.93, reflected, AIR_K, RH, distance, u, models)
        digests.append(hashlib.sha256(np.ascontiguousarray(uc).tobytes()).digest())

    out = {}
    for label, dists in (("distinct", [1.0 + 0.45 * i for i in range(stacks)]),
                         ("equal_conditions", [1.0 + 10.0 * (i % repeat_distances) for i in range(stacks)])):
        calls[0], built[0] = 0, 0
        t0 = time.perf_counter()
        for i, d in enumerate(dists):
            stack(d, 263.15 + 0.1 * i)
        dt = time.perf_counter() - t0
        out[label] = {"seconds": round(dt, 3), "ms_per_stack": round(1000 * dt / stacks, 2),
                      "models_built": built[0], "planck_calls": calls[0]}
    n = stacks if compare is None else min(compare, stacks)
    out["u_sha256"] = hashlib.sha256(b"".join(digests[:n] + digests[stacks:stacks + n])).hexdigest()
    out["peak_rss_mb"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)
    if modeltables is not None and mode == "cached":
        info = modeltables.cache_info()
        out["planck_table_mb"] = round(info["planck_bytes"] / 2**20, 1)
    print(json.dumps(out))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stacks", type=int, default=200)
    ap.add_argument("--repeat-distances", type=int, default=10)
    ap.add_argument("--reference-stacks", type=int,
                    help="stacks for the modes uncached and before (default: --stacks); per-stack "
                         "figures compare, and U is compared over the stacks both ran")
    ap.add_argument("--modes", default="cached,uncached")
    ap.add_argument("--before", help="folder holding an older irpipe package (mode 'before')")
    ap.add_argument("--json", default=str(Path(__file__).with_name("results_model.json")))
    ap.add_argument("--worker", help=argparse.SUPPRESS)
    ap.add_argument("--compare", type=int, help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.worker:
        return _worker(a.worker, a.stacks, a.repeat_distances, a.compare)
    modes = [m for m in a.modes.split(",") if m]
    if a.before:
        modes.append("before")
    results = {}
    for mode in modes:
        env = dict(os.environ, PYTHONPATH=str(Path(a.before).resolve() if mode == "before" else ROOT))
        run_mode = "cached" if mode == "before" else mode
        ref = a.reference_stacks or a.stacks
        p = subprocess.run([sys.executable, __file__, "--worker", run_mode,
                            "--stacks", str(a.stacks if mode == "cached" else ref),
                            "--repeat-distances", str(a.repeat_distances), "--compare", str(min(ref, a.stacks))],
                           env=env, capture_output=True, text=True, check=True)
        results[mode] = json.loads(p.stdout.strip().splitlines()[-1])
        r = results[mode]
        print(f"{mode:9s} distinct: {r['distinct']['ms_per_stack']:8.1f} ms/stack "
              f"({r['distinct']['models_built']} models, {r['distinct']['planck_calls']} Planck calls)   "
              f"equal conditions: {r['equal_conditions']['ms_per_stack']:8.1f} ms/stack   "
              f"peak RSS {r['peak_rss_mb']:.0f} MB   U {r['u_sha256'][:12]}", flush=True)
    if "cached" in results:
        for ref in ("uncached", "before"):
            if ref in results:
                for k in ("distinct", "equal_conditions"):
                    results[f"speedup_{k}_vs_{ref}"] = round(
                        results[ref][k]["ms_per_stack"] / results["cached"][k]["ms_per_stack"], 2)
        results["identical_u"] = len({r["u_sha256"] for m, r in results.items() if isinstance(r, dict)
                                      and "u_sha256" in r}) == 1
    results["stacks"] = {m: (a.stacks if m == "cached" else (a.reference_stacks or a.stacks)) for m in modes}
    results["machine"] = f"{platform.machine()}, {os.cpu_count()} cores, load {os.getloadavg()[0]:.1f}"
    Path(a.json).write_text(json.dumps(results, indent=2) + "\n")
    print(json.dumps({k: v for k, v in results.items() if not isinstance(v, dict)}))


if __name__ == "__main__":
    main()
