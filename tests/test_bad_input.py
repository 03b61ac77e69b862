"""Bad input: each case gives one clear line naming the culprit, the right exit code, no
traceback, no half-written file, and earlier outputs stay intact (brief, issue 4).
Error-handling behaviour is the project's own contract (no external source)."""
import json
import os

import numpy as np
import pytest
import tifffile

from conftest import linear_camera_yaml
from irpipe.cli import main

GOOD_CAMERA = f"camera: {linear_camera_yaml()}\n"


def _stack(path, frames=3, shape=(24, 32), value=20000):
    tifffile.imwrite(path, np.full((frames,) + shape, value, np.uint16), photometric="minisblack")


def _cfg(tmp_path, body, camera=GOOD_CAMERA):
    p = tmp_path / "survey.yaml"
    p.write_text(camera + body)
    return p


BASE_COND = "conditions: {emissivity: 0.93, reflected_temperature_c: 5, air_temperature_c: 5, relative_humidity_pct: 70, distance_m: 0}\n"


def _run(capsys, *args):
    code = main(list(args))
    err = capsys.readouterr().err
    return code, err


def _assert_clean(err, *needles):
    assert "Traceback" not in err
    lines = [l for l in err.strip().splitlines() if l]
    assert len(lines) == 1, lines
    for n in needles:
        assert n in lines[0], (n, lines[0])


def _no_partials(folder):
    if not folder.exists():
        return
    for f in folder.rglob("*"):
        assert not f.name.endswith(".part"), f
        if f.suffix == ".tif":
            tifffile.imread(f)       # every TIFF left behind is readable


def test_missing_stack(tmp_path, capsys):
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: nowhere.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 2
    _assert_clean(err, "survey.yaml", "stacks[0].path", "nowhere.tif", "not found")


def test_truncated_stack(tmp_path, capsys):
    _stack(tmp_path / "a.tif", frames=5)
    data = (tmp_path / "a.tif").read_bytes()
    (tmp_path / "a.tif").write_bytes(data[: len(data) // 2])
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg), "--out", str(tmp_path / "out"))
    assert code == 3
    _assert_clean(err, "a.tif")
    assert "truncated" in err or "not a readable TIFF" in err
    _no_partials(tmp_path / "out")


def test_non_tiff_stack(tmp_path, capsys):
    (tmp_path / "a.tif").write_bytes(b"\x89PNG\r\n\x1a\n" + b"0" * 100)
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "a.tif", "not a TIFF")


def test_four_d_stack(tmp_path, capsys):
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((2, 3, 8, 8), np.uint16), photometric="minisblack")
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "a.tif", "4-D")


def test_float_stack_given_as_counts(tmp_path, capsys):
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((2, 8, 8), np.float32), photometric="minisblack")
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "a.tif", "float32", "apparent_temperature")


@pytest.mark.parametrize("cond, needles", [
    ("emissivity: 1.7", ["line 3", "conditions.emissivity", "1.7", "(0, 1]"]),
    ("emissivity: 93", ["conditions.emissivity", "did you mean 0.93?"]),
    ("relative_humidity_pct: 140", ["line 3", "conditions.relative_humidity_pct", "140"]),
    ("distance_m: -3", ["conditions.distance_m", "-3"]),
    ("emisivity: 0.9", ["conditions.emisivity", "unknown key", "did you mean 'emissivity'?"]),
    ("air_temperature_c: -300", ["conditions.air_temperature_c", "-300"]),
])
def test_config_value_errors(tmp_path, capsys, cond, needles):
    _stack(tmp_path / "a.tif")
    lines = {"emissivity": "0.93", "reflected_temperature_c": "5", "air_temperature_c": "5",
             "relative_humidity_pct": "70", "distance_m": "0"}
    key = cond.split(":")[0]
    lines.pop(key, None)
    body = "conditions:\n  " + cond + "\n" + "".join(f"  {k}: {v}\n" for k, v in lines.items())
    cfg = _cfg(tmp_path, body + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "validate", str(cfg))
    assert code == 2
    _assert_clean(err, "survey.yaml", *needles)


def test_yaml_syntax_error(tmp_path, capsys):
    cfg = _cfg(tmp_path, "conditions: {emissivity: 0.9\nstacks: [\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 2
    _assert_clean(err, "survey.yaml", "line", "column", "YAML syntax error")


def test_emissivity_map_with_zeros(tmp_path, capsys):
    _stack(tmp_path / "a.tif")
    m = np.full((24, 32), 0.9, np.float32)
    m[3, 4] = 0.0
    tifffile.imwrite(tmp_path / "eps.tif", m)
    cfg = _cfg(tmp_path, "conditions: {emissivity: {map: eps.tif}, reflected_temperature_c: 5, air_temperature_c: 5}\n"
                         "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "eps.tif", "row 3, col 4", "(0, 1]")


def test_map_wrong_shape(tmp_path, capsys):
    _stack(tmp_path / "a.tif")
    tifffile.imwrite(tmp_path / "eps.tif", np.full((20, 32), 0.9, np.float32))
    cfg = _cfg(tmp_path, "conditions: {emissivity: {map: eps.tif}, reflected_temperature_c: 5, air_temperature_c: 5}\n"
                         "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "eps.tif", "20x32", "24x32")


@pytest.mark.parametrize("sysfile", ["/etc/passwd", "/dev/null", "/proc/cpuinfo"])
def test_path_to_system_file(tmp_path, capsys, sysfile):
    if not os.path.exists(sysfile):
        pytest.skip(f"{sysfile} not on this system")
    cfg = _cfg(tmp_path, BASE_COND + f"stacks: [{{name: a, path: {sysfile}}}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code in (2, 3)
    _assert_clean(err, sysfile)


def test_region_outside_image(tmp_path, capsys):
    _stack(tmp_path / "a.tif")
    cfg = _cfg(tmp_path, BASE_COND + "stacks:\n  - name: a\n    path: a.tif\n    regions:\n"
                                     "      - {name: r, rect: [0, 0, 30, 10]}\n")
    code, err = _run(capsys, "validate", str(cfg))
    assert code == 2
    _assert_clean(err, "line 7", "stacks[0].regions[0]", "24x32")


def test_label_without_value(tmp_path, capsys):
    _stack(tmp_path / "a.tif")
    lab = np.ones((24, 32), np.uint8)
    lab[:5] = 7
    tifffile.imwrite(tmp_path / "lab.tif", lab)
    cfg = _cfg(tmp_path, "conditions: {emissivity: {labels: lab.tif, values: {1: 0.9}}, reflected_temperature_c: 5,"
                         " air_temperature_c: 5}\nstacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "validate", str(cfg))
    assert code == 2
    _assert_clean(err, "conditions.emissivity.values", "label(s) 7")


def test_corrupt_second_stack_on_rerun_keeps_earlier_outputs(tmp_path, capsys):
    _stack(tmp_path / "a.tif", value=20000)
    _stack(tmp_path / "b.tif", value=21000)
    body = BASE_COND + "stacks: [{name: a, path: a.tif}, {name: b, path: b.tif}]\n"
    cfg = _cfg(tmp_path, body)
    out = tmp_path / "out"
    assert main(["run", str(cfg), "--out", str(out)]) == 0
    before = {f.name: f.read_bytes() for f in out.iterdir() if f.is_file()}
    # second stack gets corrupted (truncated copy), then the survey is run again
    data = (tmp_path / "b.tif").read_bytes()
    (tmp_path / "b.tif").write_bytes(data[: len(data) - 900])
    capsys.readouterr()
    code, err = _run(capsys, "run", str(cfg), "--out", str(out))
    assert code == 3
    _assert_clean(err, "b.tif")
    _no_partials(out)
    after = {f.name: f.read_bytes() for f in out.iterdir() if f.is_file()}
    for name in ("a.temperature.tif", "b.temperature.tif", "report.json"):
        assert after[name] == before[name] or name == "a.temperature.tif" and \
            np.array_equal(tifffile.imread(out / name), tifffile.imread(tmp_path / "out" / name))
    # keep-going finishes the good stack and reports the bad one
    capsys.readouterr()
    code = main(["run", str(cfg), "--out", str(out), "--keep-going"])
    assert code == 3
    rep = json.loads((out / "report.json").read_text())
    assert [s["status"] for s in rep["stacks"]] == ["done", "failed"]


def test_resume_skips_unchanged(tmp_path, capsys):
    _stack(tmp_path / "a.tif")
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    out = tmp_path / "out"
    assert main(["run", str(cfg), "--out", str(out)]) == 0
    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--resume"]) == 0
    assert "0 stack(s) processed, 1 unchanged and skipped" in capsys.readouterr().out   # counted once
    man = json.loads((out / "manifest.json").read_text())
    assert man["stacks"][0]["status"] == "done" and len(man["stacks"][0]["inputs"]) == 1


def test_stale_temporary_outputs_are_removed_by_the_next_run(tmp_path):
    """A killed run leaves `.<name>.<random>.part` files and Zarr folders; the next run into
    the folder removes those older than its own start, and nothing else."""
    _stack(tmp_path / "a.tif")
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    out = tmp_path / "out"
    out.mkdir()
    old_file = out / ".a.temperature.tif.x1y2.part"
    old_dir = out / ".a.temperature.zarr.k3j4.part"
    keep = out / "notes.part"                       # not a temporary output's name
    old_file.write_bytes(b"half")
    old_dir.mkdir()
    (old_dir / "0.0.0").write_bytes(b"chunk")
    keep.write_text("mine")
    t_old = os.path.getmtime(old_file) - 3600
    for p in (old_file, old_dir, keep):
        os.utime(p, (t_old, t_old))
    assert main(["run", str(cfg), "--out", str(out), "--quiet"]) == 0
    assert not old_file.exists() and not old_dir.exists()
    assert keep.read_text() == "mine"
    assert not [p for p in out.iterdir() if p.name.endswith(".part") and p.name.startswith(".")]


def test_a_part_file_newer_than_the_run_is_left_alone(tmp_path):
    """A parallel writer's temporary file (younger than this run's start) is not touched."""
    import time

    from irpipe.io import remove_stale_parts

    f = tmp_path / ".x.tif.abcd.part"
    f.write_bytes(b"in progress")
    assert remove_stale_parts(tmp_path, before=time.time() - 60) == []
    assert f.exists()
    assert remove_stale_parts(tmp_path, before=time.time() + 60) == [f.name]


def test_schema_into_a_closed_pipe_ends_quietly():
    """`irpipe schema | head`: the reader has gone before the schema is written (here it
    closes the pipe at once); the command ends without an error message or traceback."""
    import subprocess
    import sys

    p = subprocess.Popen([sys.executable, "-m", "irpipe.cli", "schema"], stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE)
    p.stdout.close()                       # the reader is gone before the child writes
    err = p.stderr.read().decode()
    p.wait()
    assert "Error" not in err and "Traceback" not in err, err
    assert p.returncode in (0, 141), p.returncode      # 141 = 128 + SIGPIPE: quiet too


def test_four_d_imagej_hyperstack(tmp_path, capsys):
    """An ImageJ hyperstack of 2 time points x 3 slices is stored as six 2-D pages; its
    description declares the 4-D shape, which must be refused like tifffile's own."""
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((2, 3, 8, 8), np.uint16), imagej=True, metadata={"axes": "TZYX"})
    cfg = _cfg(tmp_path, BASE_COND + "stacks: [{name: a, path: a.tif}]\n")
    code, err = _run(capsys, "run", str(cfg))
    assert code == 3
    _assert_clean(err, "a.tif", "4-D")
