"""Whole stacks in parallel processes (``irpipe run --jobs N``): the same files and bytes
as the serial run, apart from the fields listed as volatile in docs/report_schema.md
(creation and start/finish times, per-stack ``seconds``); a failing stack stops the run
without outputs of later stacks, or fails alone under --keep-going."""
import json

import numpy as np
import pytest
import tifffile

from conftest import linear_camera_yaml
from irpipe.cli import main

CONFIG = """
survey: {{indoor_air_c: 20.0, outdoor_air_c: 1.0}}
camera: {camera}
conditions: {{emissivity: 0.93, reflected_temperature_c: 2.0, air_temperature_c: 4.0, relative_humidity_pct: 70}}
uncertainty: {{emissivity: 0.02, reflected_temperature_k: 2.0}}
stacks:
{stacks}
output: {{frame_chunk: 3}}
"""

VOLATILE = {"created_utc", "started_utc", "finished_utc", "seconds"}


def _survey(folder, n=5, bad=None):
    rng = np.random.default_rng(5)
    lines = []
    for k in range(n):
        frames = np.rint(17000 + 300 * k + rng.normal(0, 10, (4, 20, 24))).astype(np.uint16)
        name = f"s{k}.tif"
        extra = ""
        if k == bad:
            # fails while running, not at the check: its reflector region is saturated in every frame
            frames[:, 14:18, 14:18] = 65535
            extra = ", reflected_temperature_c: {reflector: foil}"
        tifffile.imwrite(folder / name, frames, photometric="minisblack")
        lines.append(f"  - {{name: s{k}, path: {name}, conditions: {{distance_m: {3 + 2 * k}{extra}}}, "
                     f"regions: [{{name: r, rect: [2, 2, 12, 12]}}, {{name: foil, rect: [14, 14, 18, 18]}}], "
                     f"hotspots: {{above_reference_k: 0.5, reference: median}}}}")
    p = folder / "survey.yaml"
    p.write_text(CONFIG.format(camera=linear_camera_yaml(), stacks="\n".join(lines)))
    return p


def _strip(x):
    if isinstance(x, dict):
        return {k: _strip(v) for k, v in x.items() if k not in VOLATILE}
    if isinstance(x, list):
        return [_strip(v) for v in x]
    return x


def test_jobs_give_the_files_and_bytes_of_the_serial_run(tmp_path):
    cfg = _survey(tmp_path)
    assert main(["run", str(cfg), "--out", str(tmp_path / "one"), "--jobs", "1", "--quiet"]) == 0
    assert main(["run", str(cfg), "--out", str(tmp_path / "two"), "--jobs", "2", "--quiet"]) == 0
    a = sorted(p.name for p in (tmp_path / "one").iterdir())
    b = sorted(p.name for p in (tmp_path / "two").iterdir())
    assert a == b
    for name in a:
        x, y = (tmp_path / "one" / name).read_bytes(), (tmp_path / "two" / name).read_bytes()
        if name.endswith(".json"):
            assert _strip(json.loads(x)) == _strip(json.loads(y)), name
        elif name != "report.html":       # carries the creation time
            assert x == y, name


def test_a_failing_stack_stops_the_run_before_later_outputs(tmp_path):
    cfg = _survey(tmp_path, n=5, bad=1)
    out = tmp_path / "out"
    assert main(["run", str(cfg), "--out", str(out), "--jobs", "2", "--quiet"]) == 3
    names = {p.name for p in out.iterdir()}
    assert "s0.temperature.tif" in names
    assert not any(n.startswith(("s2.", "s3.", "s4.")) for n in names), names
    assert not [n for n in names if n.endswith(".part")]


def test_keep_going_fails_the_bad_stack_alone(tmp_path):
    cfg = _survey(tmp_path, n=4, bad=2)
    out = tmp_path / "out"
    assert main(["run", str(cfg), "--out", str(out), "--jobs", "2", "--keep-going", "--quiet"]) == 3
    rep = json.loads((out / "report.json").read_text())
    assert [s["status"] for s in rep["stacks"]] == ["done", "done", "failed", "done"]
    assert (out / "s3.temperature.tif").exists()


def test_jobs_and_workers_exclude_each_other(tmp_path, capsys):
    cfg = _survey(tmp_path, n=2)
    assert main(["run", str(cfg), "--jobs", "2", "--workers", "2"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--jobs" in err[0] and "--workers" in err[0]


def test_a_survey_on_a_cluster_runs_whole_stacks_with_serial_outputs(tmp_path):
    """--scheduler with many stacks: whole stacks go to the cluster's workers, which write
    through the shared output folder; the outputs are the serial run's (LocalCluster)."""
    distributed = pytest.importorskip("distributed")
    cfg = _survey(tmp_path, n=3)
    assert main(["run", str(cfg), "--out", str(tmp_path / "one"), "--jobs", "1", "--quiet"]) == 0
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        assert main(["run", str(cfg), "--out", str(tmp_path / "cl"), "--scheduler", lc.scheduler_address,
                     "--quiet"]) == 0
    for name in sorted(p.name for p in (tmp_path / "one").iterdir()):
        x, y = (tmp_path / "one" / name).read_bytes(), (tmp_path / "cl" / name).read_bytes()
        if name.endswith(".json"):
            assert _strip(json.loads(x)) == _strip(json.loads(y)), name
        elif name != "report.html":
            assert x == y, name
