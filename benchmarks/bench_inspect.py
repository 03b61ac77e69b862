"""Benchmark: ``irpipe inspect`` page size and time until the page is usable.

Generates one 640 x 512 stack of 10 frames (uint16 counts, linear calibration, a
number emissivity, two regions, an uncertainty section) in a temporary folder, builds the
page with ``irpipe inspect``, opens it in headless Chromium (selenium, tests/browser.py)
and measures, over ``--repeat`` loads:

* ``ready_ms``: the page's own clock (``performance.now()``, zero at navigation start) when
  ``window.irpipe.ready`` resolves;
* ``wall_ms``: from ``driver.get`` to the resolved promise, as seen from Python;

plus the page size and its share per stack and per carried frame.

    python benchmarks/bench_inspect.py [--frames 10] [--rows 512] [--cols 640] [--repeat 3]

Prints the figures and writes ``benchmarks/results_inspect.json``. Keep the other core free
while measuring (2-core machine).
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=10)
    ap.add_argument("--rows", type=int, default=512)
    ap.add_argument("--cols", type=int, default=640)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)
    from browser import browser, wait_ready
    from inspect_scenes import big_scene as make_survey
    from irpipe.inspect import page_budget, write_page

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        cfg = make_survey(tmp, a.rows, a.cols, a.frames)
        t0 = time.perf_counter()
        page, _ = write_page(cfg, tmp / "page.html")
        build_s = time.perf_counter() - t0
        html = page.read_text()
        data = json.loads(html.split('id="irpipe-data">', 1)[1].split("</script>", 1)[0])
        st = data["stacks"][0]
        frames_b = len(st.get("frames_q", {}).get("data", ""))
        stack_b = sum(len(v) for k, v in st.items() if isinstance(v, str)) + sum(
            len(json.dumps(v)) for k, v in st.items() if not isinstance(v, str))
        drv = browser(1400, 1000)
        ready, wall = [], []
        try:
            for _ in range(a.repeat):
                t0 = time.perf_counter()
                drv.get(page.as_uri())
                r = wait_ready(drv)
                wall.append(1000 * (time.perf_counter() - t0))
                ready.append(r)
        finally:
            drv.quit()
    res = {"rows": a.rows, "cols": a.cols, "frames": a.frames, "page_bytes": len(html.encode()),
           "stack_bytes": stack_b, "frames_bytes": frames_b,
           "bytes_per_frame": frames_b / max(1, st.get("frames_q", {}).get("count", 1)),
           "stack_bytes_without_frames": stack_b - frames_b, "build_s": round(build_s, 2),
           "budget_bytes": page_budget(a.rows, a.cols, min(a.frames, 32)) if a.frames > 1 else page_budget(a.rows, a.cols, 0),
           "ready_ms": [round(x, 1) for x in ready], "wall_ms": [round(x, 1) for x in wall]}
    print(json.dumps(res, indent=2))
    (ROOT / "benchmarks" / "results_inspect.json").write_text(json.dumps(res, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
