"""Golden output: the demo survey's arrays and report entries are those recorded before the
code was restructured (tests/data/golden_demo.json, written by tests/golden.py; first
recorded from commit 02b23b4). A change that moves code must not move a number; a change
that means to move one re-records the file and says why in its commit.

Re-recorded once since: exact-rank region percentiles (every arrays bit-identical; only
some p95_c values moved, by at most 0.0005 K, e.g. 30.125 -> 30.1255); and perturbed paths of
the uncertainty propagation built from coarse-node transmittance (uncertainty arrays moved by at
most 1.2e-7 K, one float32 step; temperatures bit-identical); and the plane fit of the robust
region minimum solved in closed form (Cramer's rule) instead of by LAPACK per pixel (one stack's
minimum surface temperature and temperature factor moved in the last binary digit, 4e-15 K);
and region spread and percentiles of the lookup plan taken from the exact (tally group, raw
value) counts instead of the streaming 0.01 K histogram (arrays bit-identical; p05_c/p95_c moved
by at most 0.005 K to numpy's exact values, std_c by at most 2e-7 K); and spectral radiances
rounded to float32 before the float64 band sums (the kept Planck table at half the memory):
temperature arrays moved by at most 3.8e-6 K (one float32 step, in 1-4 % of the pixels),
uncertainty arrays by at most 1.5e-5 K, report figures by at most 1.9e-6 K (on the same frames; the
demo's own frames, drawn through the same band integrals, moved by one count in 8 pixels); and
the stacks' own paths built, like the perturbed ones, from coarse-node transmittance, with the
inverse grids by local cubic Hermite interpolation instead of a global cubic spline (within
1e-9 K of the closed-form inverse): temperature arrays moved by at most 1.9e-6 K (one float32
step), uncertainty arrays by at most 2.9e-6 K, heat-flux arrays by at most 1.5e-5 W m-2, U-value
arrays by at most 2.4e-7 W m-2 K-1 (against 0.1.0 on the same frames still at most 3.8e-6 K and
1.5e-5 K; demo frames unchanged).

Stacks added to the demo later are not in the record and are not compared."""
import json
from pathlib import Path

from golden import fingerprints
from irpipe.pipeline import run

RECORD = Path(__file__).parent / "data" / "golden_demo.json"


def test_demo_outputs_unchanged(tmp_path):
    from irpipe.demo import write_demo

    cfg = write_demo(tmp_path / "frames")
    run(cfg, tmp_path / "out", quiet=True)
    got = fingerprints(tmp_path / "out")
    want = json.loads(RECORD.read_text())
    for name, fp in want.items():
        assert name in got, f"demo stack {name} missing from the run"
        for kind, h in fp.items():
            assert got[name][kind] == h, f"{name}: {kind} differs from the golden record"
