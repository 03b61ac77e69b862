"""Benchmark: a building survey of many small stacks, ``irpipe run`` against the I/O floor.

Generates N stacks (default 200) of 4 frames of 640 x 512 uint16 counts of smooth scenes
(a vertical gradient, a slow horizontal ramp, a warm patch, a cold corner, sensor noise of
a few counts) in a temporary folder, each stack with its own distance and reflected
temperature, two regions, a hot-spot search relative to a region and the GUM uncertainty
section on, and times, each in a fresh Python subprocess:

* ``run``:   ``python -m irpipe.cli run survey_<n>.yaml --out OUT --quiet [--jobs J]``
  on the first n stacks;
* ``floor``: one process that reads each of the n stacks with tifffile and writes one
  float32 stack of the same shape: the least any tool that reads the stacks and writes
  temperature stacks must do.

for a small and a large survey (N_small = 20 and N = 200 by default). The per-stack cost
is (T(N) - T(N_small)) / (N - N_small), which removes start-up (interpreter, imports,
shared tables) from the comparison; the whole-run ratio keeps it.

Also measured, on the large survey:

* peak memory of all processes of the run together (the process and all its
  descendants): summed RSS, and summed PSS, which counts a page shared by forked
  processes once (/proc polled every 20 ms, so a peak shorter than that can be missed),
  in one more run of each command, untimed: polling takes CPU from the run;
* report bytes per stack: report.html plus any per-stack pages, divided by N; and the
  same for a small survey of noisy scenes (``--noisy-stacks``, noise of 60 counts, run
  once, untimed), the hard case for picture compression;
* the time headless Chromium (/usr/bin/chromium through /usr/bin/chromedriver, selenium)
  takes from navigation to the load event, and to the end of a forced layout of the whole
  page after it, read from the page's own performance timing. When the report is an index
  page plus stack pages, both the index and the first stack page are timed.

Both commands write into new files: each one's earlier outputs are deleted and the timed
process starts ``benchcommon.PAUSE_S`` seconds later (``benchcommon`` explains why:
on this kind of virtual machine, refilling page-cache pages freed a moment ago is about ten
times faster than filling new ones). ``os.sync()`` before each timed process keeps one
run's write-back out of the next one's time. Keep the other core free while measuring.

    python benchmarks/bench_survey.py [--stacks 200] [--stacks-small 20] [--repeat 3]
                                      [--jobs J] [--no-browser] [--keep]

Prints a table and writes the "survey" section of ``benchmarks/results.json`` (the
long-stack figures of bench_run.py in the same file are kept).
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

from benchcommon import before_timing, machine_info

ROOT = Path(__file__).resolve().parent.parent
ROWS, COLS, FRAMES = 512, 640, 4
GAIN, OFFSET = 300.0, 1000.0          # counts per W m-2 sr-1, counts at zero radiance
NOISE_COUNTS = 4.0                    # sensor noise of a few counts (~0.015 K at 0 C)
NOISY_COUNTS = 60.0                   # the noisy scenes of the report-size check
EMISSIVITY, AIR_C = 0.93, 4.0

FLOOR = r"""
import sys
import numpy as np
import tifffile
pairs = sys.argv[1:]
for src, dst in zip(pairs[::2], pairs[1::2]):
    with tifffile.TiffFile(src) as tif, tifffile.TiffWriter(dst) as tw:
        for page in tif.pages:
            tw.write(page.asarray().astype(np.float32), contiguous=True, metadata=None,
                     photometric="minisblack")
"""


def stack_conditions(k):
    """Distance [m] and reflected temperature [C] of stack ``k``: each stack its own."""
    return round(2.0 + (k * 0.37) % 18.0, 2), round(-6.0 + (k * 1.3) % 14.0, 1)


def stack_name(k):
    return f"room {k // 4 + 1:03d}: view {k % 4 + 1}"     # spaces and colons: safe page names needed


def scene(k, rng):
    """Truth temperature [C] of stack ``k``: smooth interior wall with a warm patch (a
    heating pipe) and a cold corner; position and size vary per stack."""
    r, c = np.mgrid[0:ROWS, 0:COLS].astype(np.float32)
    t = 17.0 + 2.5 * (r / ROWS) + 0.8 * np.sin(np.pi * c / COLS + 0.1 * k)
    pr, pc = 120 + (k * 37) % 280, 100 + (k * 53) % 440
    t += 6.0 * np.exp(-(((r - pr) / 25.0) ** 2 + ((c - pc) / 40.0) ** 2))
    t -= 4.0 * np.exp(-((r / 90.0) ** 2 + ((COLS - 1 - c) / 90.0) ** 2))
    return t


def write_inputs(folder: Path, n: int, noise: float, prefix: str):
    """n stacks of FRAMES frames; counts from the measurement equation of each stack's
    reflected temperature (path transmittance taken as 1 for the generation)."""
    import tifffile

    sys.path.insert(0, str(ROOT))
    from irpipe.correction import CameraModel, MeasurementModel
    from irpipe.radiometry import SpectralResponse

    m = MeasurementModel(CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6)), 1.0)
    grid = np.linspace(-10.0, 45.0, 1101)
    rng = np.random.default_rng(2026)
    for k in range(n):
        _, refl = stack_conditions(k)
        table = GAIN * m.received_signal(grid + 273.15, EMISSIVITY, refl + 273.15, AIR_C + 273.15) + OFFSET
        base = np.interp(scene(k, rng), grid, table)
        with tifffile.TiffWriter(folder / f"{prefix}{k:04d}.tif") as tw:
            for f in range(FRAMES):
                x = base + rng.normal(0.0, noise, base.shape)
                tw.write(np.rint(x).astype(np.uint16), contiguous=True, metadata=None, photometric="minisblack")


def write_config(folder: Path, n: int, prefix: str, tag: str):
    lines = ["# survey benchmark (generated by benchmarks/bench_survey.py)",
             "survey: {title: \"survey benchmark\", indoor_air_c: 20.0, outdoor_air_c: 2.0,",
             "         indoor_relative_humidity_pct: 50, building_use: dwelling}",
             "camera:",
             "  spectral_band_um: [7.5, 14.0]",
             "  input: counts",
             f"  calibration: {{model: linear, gain: {GAIN}, offset_counts: {OFFSET}}}",
             "conditions:",
             f"  emissivity: {EMISSIVITY}",
             f"  air_temperature_c: {AIR_C}",
             "  relative_humidity_pct: 50",
             "  reflected_temperature_c: 0.0",
             "uncertainty: {emissivity: 0.02, reflected_temperature_k: 2.0, air_temperature_k: 1.0,",
             "              relative_humidity_pct: 5.0, distance_m: 0.2, camera_k: 0.5}",
             "stacks:"]
    for k in range(n):
        d, refl = stack_conditions(k)
        lines += [f"  - name: \"{stack_name(k)}\"",
                  f"    path: {prefix}{k:04d}.tif",
                  f"    conditions: {{distance_m: {d}, reflected_temperature_c: {refl}}}",
                  "    regions:",
                  "      - {name: wall, rect: [40, 40, 470, 300]}",
                  "      - {name: corner, ellipse: {center: [60, 580], radii: [50, 50]}}",
                  "    hotspots: {above_reference_k: 2.0, reference: wall, min_area_px: 30}"]
    lines += ["output:", "  report: true", ""]
    cfg = folder / f"survey_{tag}.yaml"
    cfg.write_text("\n".join(lines))
    return cfg


def _tree_memory(pid):
    """(summed resident set, summed proportional set) [bytes] of ``pid`` and all its
    descendants, from /proc. RSS counts pages shared by forked processes once per process;
    PSS (``smaps_rollup``) splits each shared page between its sharers, so its sum is the
    memory the processes take together."""
    children = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat", "rb") as fh:
                s = fh.read()
            ppid = int(s[s.rindex(b")") + 2:].split()[1])
        except (OSError, ValueError):
            continue
        children.setdefault(ppid, []).append(int(d))
    rss = pss = 0
    todo = [pid]
    page = os.sysconf("SC_PAGE_SIZE")
    while todo:
        p = todo.pop()
        try:
            with open(f"/proc/{p}/statm") as fh:
                rss += int(fh.read().split()[1]) * page
            with open(f"/proc/{p}/smaps_rollup") as fh:
                for line in fh:
                    if line.startswith("Pss:"):
                        pss += int(line.split()[1]) * 1024
                        break
        except (OSError, ValueError):
            pass
        todo += children.get(p, [])
    return rss, pss


def timed(cmd, env, remove=(), watch=False):
    """Wall time [s], peak summed RSS and peak summed PSS of the process tree [MB] of one
    subprocess.

    ``remove``: the command's earlier outputs (files or folders), deleted first so that it
    writes new files (``benchcommon.before_timing``). Dirty pages of earlier runs are
    written out first (``os.sync``), so that no run pays for the write-back of another
    one's output.

    ``watch``: poll the process tree's memory every 20 ms. Reading every process's
    ``smaps_rollup`` takes CPU from the run (on 2 cores about a fifth of its time), so
    memory is measured in runs of its own, never in the timed ones; an unwatched run
    reports the largest single process's peak RSS (``wait4``) and no PSS."""
    before_timing(remove)
    peak = [0, 0]
    with tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        p = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=err)
        stop = threading.Event()

        def poll():
            while not stop.is_set():
                rss, pss = _tree_memory(p.pid)
                peak[0], peak[1] = max(peak[0], rss), max(peak[1], pss)
                stop.wait(0.02)

        th = threading.Thread(target=poll, daemon=True)
        if watch:
            th.start()
        _, status, ru = os.wait4(p.pid, 0)
        dt = time.perf_counter() - t0
        stop.set()
        if watch:
            th.join()
        p.returncode = os.waitstatus_to_exitcode(status)
        if p.returncode != 0:
            err.seek(0)
            raise SystemExit(f"bench: {' '.join(map(str, cmd))[:300]} failed ({p.returncode}):\n"
                             f"{err.read().decode(errors='replace')[-2000:]}")
    # the largest single process (wait4) is a lower bound of the summed peak
    return dt, max(peak[0] / 2 ** 20, ru.ru_maxrss / 1024.0), peak[1] / 2 ** 20


def report_bytes(out: Path):
    """(total bytes of report.html plus the per-stack pages, list of page files)."""
    files = [out / "report.html"] if (out / "report.html").is_file() else []
    pages = out / "report_pages"
    if pages.is_dir():
        files += sorted(p for p in pages.rglob("*.html"))
    return sum(f.stat().st_size for f in files), files


def browser_times(pages):
    """{page name: {"load_ms", "layout_ms"}} from headless Chromium: navigation start to
    the load event end, and to the end of a forced layout of the whole document."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = "/usr/bin/chromium"
    for f in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
              "--window-size=1200,1000"):
        opts.add_argument(f)
    drv = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts)
    drv.set_page_load_timeout(300)
    out = {}
    try:
        for name, path in pages:
            drv.get(Path(path).as_uri())       # returns after the load event
            t = drv.execute_script(
                "const h = document.documentElement.scrollHeight + document.body.getBoundingClientRect().height;"
                "const p = performance.getEntriesByType('navigation')[0];"
                "return {load: p.loadEventEnd, layout: performance.now(), h: h};")
            out[name] = {"load_ms": round(t["load"], 1), "layout_ms": round(t["layout"], 1)}
    finally:
        drv.quit()
    return out


def has_jobs_flag(env):
    r = subprocess.run([sys.executable, "-m", "irpipe.cli", "run", "--help"], env=env, capture_output=True, text=True)
    return "--jobs" in r.stdout


def main(argv=None):
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] == ["--generate"]:
        write_inputs(Path(argv[1]), int(argv[2]), float(argv[3]), argv[4])
        return 0
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stacks", type=int, default=200, help="N, stacks of the large survey")
    ap.add_argument("--stacks-small", type=int, default=20, help="N_small, stacks of the small survey")
    ap.add_argument("--noisy-stacks", type=int, default=10, help="stacks of the noisy report-size check (0: none)")
    ap.add_argument("--repeat", type=int, default=1, help="runs per measurement; the fastest counts (3: best of 3)")
    ap.add_argument("--jobs", type=int, default=None,
                    help="pass --jobs J to irpipe run (only when irpipe run --help lists it)")
    ap.add_argument("--no-browser", action="store_true", help="skip the headless Chromium load time")
    ap.add_argument("--keep", action="store_true", help="keep the generated folder and print it")
    ap.add_argument("--label", default=None, help="stored with the figures, e.g. 'baseline'")
    ap.add_argument("--json", default=str(Path(__file__).with_name("results.json")))
    a = ap.parse_args(argv)
    if a.stacks <= a.stacks_small:
        ap.error("--stacks must exceed --stacks-small")

    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    jobs_args = []
    if a.jobs is not None:
        if not has_jobs_flag(env):
            ap.error("--jobs: this irpipe's 'run' has no --jobs option yet (see irpipe run --help)")
        jobs_args = ["--jobs", str(a.jobs)]
    load_start = os.getloadavg()[0]       # other work on the machine skews every figure: record it
    folder = Path(tempfile.mkdtemp(prefix="irpipe-survey-"))
    try:
        t0 = time.perf_counter()
        subprocess.run([sys.executable, __file__, "--generate", str(folder), str(a.stacks), str(NOISE_COUNTS), "s"],
                       env=env, check=True)
        print(f"bench: generated {a.stacks} stacks in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
        res = {}
        for n in (a.stacks_small, a.stacks):
            cfg = write_config(folder, n, "s", str(n))
            run_cmd = [sys.executable, "-m", "irpipe.cli", "run", str(cfg), "--out", str(folder / f"out_{n}"),
                       "--quiet", *jobs_args]
            pairs = []
            for k in range(n):
                pairs += [str(folder / f"s{k:04d}.tif"), str(folder / f"floor_{k:04d}.tif")]
            floor_cmd = [sys.executable, "-c", FLOOR, *pairs]
            outputs = {"floor": pairs[1::2], "run": [folder / f"out_{n}"]}
            best = {}
            for _ in range(a.repeat):
                for kind, cmd in (("floor", floor_cmd), ("run", run_cmd)):
                    dt, rss, _ = timed(cmd, env, outputs[kind])
                    if kind not in best or dt < best[kind][0]:
                        best[kind] = (dt, rss)
                    best[kind + "_rss"] = max(best.get(kind + "_rss", 0.0), rss)
            for kind, cmd in (("floor", floor_cmd), ("run", run_cmd)):     # memory: runs of its own
                _, rss, pss = timed(cmd, env, outputs[kind], watch=True)
                best[kind + "_rss"] = max(best[kind + "_rss"], rss)
                best[kind + "_pss"] = pss
            res[n] = {k: {"seconds": round(best[k][0], 3), "peak_rss_mb": round(best[k + "_rss"], 1),
                          "peak_pss_mb": round(best[k + "_pss"], 1)} for k in ("run", "floor")}
            for f in folder.glob("floor_*.tif"):
                f.unlink()
            print(f"bench: {n} stacks: run {best['run'][0]:.2f} s, floor {best['floor'][0]:.2f} s", file=sys.stderr)

        big = folder / f"out_{a.stacks}"
        size, pages = report_bytes(big)
        sizes = {"smooth": round(size / a.stacks)}
        browser = None
        if not a.no_browser:
            targets = [("report.html", pages[0])] + ([("first stack page", pages[1])] if len(pages) > 1 else [])
            try:
                browser = browser_times(targets)
            except Exception as exc:       # no browser on this machine: say so, keep the rest
                print(f"bench: headless Chromium not timed ({str(exc).splitlines()[0]})", file=sys.stderr)
        if a.noisy_stacks:
            subprocess.run([sys.executable, __file__, "--generate", str(folder), str(a.noisy_stacks),
                            str(NOISY_COUNTS), "n"], env=env, check=True)
            cfg = write_config(folder, a.noisy_stacks, "n", "noisy")
            timed([sys.executable, "-m", "irpipe.cli", "run", str(cfg), "--out", str(folder / "out_noisy"),
                   "--quiet", *jobs_args], env)
            sizes["noisy"] = round(report_bytes(folder / "out_noisy")[0] / a.noisy_stacks)

        s, l = a.stacks_small, a.stacks
        per = {k: (res[l][k]["seconds"] - res[s][k]["seconds"]) / (l - s) for k in ("run", "floor")}
        survey = {
            "label": a.label,
            "stack_shape": [FRAMES, ROWS, COLS], "dtype": "uint16", "stacks_small": s, "stacks_large": l,
            "noise_counts": NOISE_COUNTS, "repeat": a.repeat, "jobs": a.jobs,
            "run_s": {str(s): res[s]["run"]["seconds"], str(l): res[l]["run"]["seconds"]},
            "floor_s": {str(s): res[s]["floor"]["seconds"], str(l): res[l]["floor"]["seconds"]},
            "per_stack_ms": {"run": round(per["run"] * 1e3, 1), "floor": round(per["floor"] * 1e3, 2)},
            "per_stack_ratio": round(per["run"] / per["floor"], 2) if per["floor"] > 0 else None,
            "whole_run_ratio": {str(n): round(res[n]["run"]["seconds"] / res[n]["floor"]["seconds"], 2)
                                for n in (s, l)},
            "peak_rss_mb": {"run": {str(n): res[n]["run"]["peak_rss_mb"] for n in (s, l)},
                            "floor": {str(n): res[n]["floor"]["peak_rss_mb"] for n in (s, l)}},
            "peak_pss_mb": {"run": {str(n): res[n]["run"]["peak_pss_mb"] for n in (s, l)},
                            "floor": {str(n): res[n]["floor"]["peak_pss_mb"] for n in (s, l)}},
            "report_bytes_per_stack": sizes,
            "report_pages": len(pages),
            "noisy_stacks": a.noisy_stacks, "noisy_noise_counts": NOISY_COUNTS,
            "chromium_ms": browser,
            "load_average_1min": {"start": round(load_start, 2), "end": round(os.getloadavg()[0], 2)},
            "machine": machine_info(),
            "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        }
    finally:
        if a.keep:
            print(f"bench: inputs and outputs kept in {folder}", file=sys.stderr)
        else:
            shutil.rmtree(folder, ignore_errors=True)

    w = 12
    print(f"{'':28s}{'run':>{w}s}{'floor':>{w}s}{'ratio':>{w}s}")
    for n in (s, l):
        r, f = res[n]["run"]["seconds"], res[n]["floor"]["seconds"]
        print(f"{f'whole run, {n} stacks [s]':28s}{r:{w}.2f}{f:{w}.2f}{r / f:{w}.1f}")
    print(f"{'per stack [ms]':28s}{per['run'] * 1e3:{w}.1f}{per['floor'] * 1e3:{w}.2f}"
          f"{survey['per_stack_ratio'] or float('nan'):{w}.1f}")
    for n in (s, l):
        print(f"{f'peak RSS, {n} stacks [MB]':28s}{res[n]['run']['peak_rss_mb']:{w}.0f}"
              f"{res[n]['floor']['peak_rss_mb']:{w}.0f}")
        print(f"{f'peak PSS, {n} stacks [MB]':28s}{res[n]['run']['peak_pss_mb']:{w}.0f}"
              f"{res[n]['floor']['peak_pss_mb']:{w}.0f}")
    for k, v in sizes.items():
        print(f"{f'report bytes/stack, {k}':28s}{v:{w}d}")
    for k, v in (browser or {}).items():
        print(f"{f'Chromium {k} [ms]':28s}  load {v['load_ms']:.0f}, layout done {v['layout_ms']:.0f}")
    print(f"best of {a.repeat}; jobs {a.jobs}; {os.cpu_count()} cpu(s)")
    p = Path(a.json)
    try:
        data = json.loads(p.read_text())
    except (OSError, ValueError):
        data = {}
    data["survey"] = survey
    p.write_text(json.dumps(data, indent=2) + "\n")
    print(f"results written to {a.json} (section 'survey')")
    return 0


if __name__ == "__main__":
    sys.exit(main())
