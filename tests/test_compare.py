"""Stacks compared: temporal noise, the aligned difference, its findings and their
suppression at edges, end to end through `irpipe run`, with the baseline from the same
run, from written outputs under --resume, and from another survey.

Scenes: tests/shifted_scenes.py (finer-grid integration, independent forward model). The
leak is a Gaussian cold plume placed at a known position in the depressurised state only.
Tolerances are the issue's (one colder finding within 3 px of the leak, delta_k within
0.3 K, nothing along the edges): # common practice, no source
"""
import json

import numpy as np
import pytest
import tifffile

from irpipe import compare as cmp
from irpipe.config import load_config
from irpipe.errors import ConfigError, InputDataError
from irpipe.pipeline import run
from shifted_scenes import CAMERA_YAML, Radiance, counts, pixel_radiance

SHAPE = (100, 120)
BASE_DRIFT = [(0.0, 0.0), (0.3, -0.2), (-0.4, 0.5)]
DEP_OFFSET = (1.37, -2.62)              # the depressurised state's camera position: non-integer
DEP_DRIFT = [(DEP_OFFSET[0] + a, DEP_OFFSET[1] + b) for a, b in [(0.0, 0.0), (0.2, 0.3), (-0.5, -0.1)]]
LEAK = (30.0, 52.0, 3.0, 2.5)           # scene row, col, depth [K], radius [px]
OUTDOOR_CHANGE_K = 0.4                  # the whole wall warmed meanwhile (removed as the median offset)


@pytest.fixture(scope="module")
def rad():
    return Radiance()


def _write(path, frames):
    tifffile.imwrite(path, np.stack(frames), photometric="minisblack")


@pytest.fixture(scope="module")
def scene_dir(tmp_path_factory, rad):
    d = tmp_path_factory.mktemp("cmp")
    rng = np.random.default_rng(4)
    _write(d / "base.tif", [counts(pixel_radiance(rad, SHAPE, s), rng) for s in BASE_DRIFT])
    _write(d / "dep.tif", [counts(pixel_radiance(rad, SHAPE, s, leak=LEAK, offset_k=OUTDOOR_CHANGE_K), rng)
                           for s in DEP_DRIFT])
    # the same state without a leak, seen from the non-integer offset: no change at all
    _write(d / "same.tif", [counts(pixel_radiance(rad, SHAPE, s), rng) for s in DEP_DRIFT])
    return d


SURVEY = """survey: {{indoor_air_c: 20.0, outdoor_air_c: 0.0}}
stacks:
  - name: baseline
    path: {base}
    time: "2026-01-12 21:10"
    align: true
  - name: depressurised
    path: dep.tif
    time: "2026-01-12 22:05"
    align: true
    compare: {{baseline: baseline, below_k: {below}, above_k: 1.5, min_area_px: 6, pressure_difference_pa: 50}}
  - name: unchanged
    path: same.tif
    align: true
    compare: {{baseline: baseline}}
output: {{dir: out}}
"""


def _survey(d, below=1.5, base="base.tif"):
    p = d / "survey.yaml"
    p.write_text(CAMERA_YAML + SURVEY.format(below=below, base=base))
    return p


@pytest.fixture(scope="module")
def first_run(scene_dir):
    return run(_survey(scene_dir))


def test_one_colder_finding_at_the_leak(first_run, rad):
    st = first_run.report["stacks"][1]
    found = st["findings"]
    assert [f["kind"] for f in found] == ["colder"]
    f = found[0]
    # the leak in this stack's (reference frame's) geometry
    lr, lc = LEAK[0] + DEP_OFFSET[0], LEAK[1] + DEP_OFFSET[1]
    assert np.hypot(f["row"] - lr, f["col"] - lc) <= 3.0
    # truth: the pixel-integrated change, from the forward model, in the same geometry
    with_leak = rad.apparent_c(pixel_radiance(rad, SHAPE, DEP_OFFSET, leak=LEAK))
    without = rad.apparent_c(pixel_radiance(rad, SHAPE, DEP_OFFSET))
    assert f["delta_k"] == pytest.approx(float((with_leak - without).min()), abs=0.3)
    c = st["compare"]
    assert c["offset"]["removed_k"] == pytest.approx(OUTDOOR_CHANGE_K, abs=0.05)
    # the baseline's content relative to this stack: minus the camera offset
    assert c["registration"]["row_shift_px"] == pytest.approx(-DEP_OFFSET[0], abs=0.1)
    assert c["registration"]["col_shift_px"] == pytest.approx(-DEP_OFFSET[1], abs=0.1)
    assert c["pressure_difference_pa"] == 50.0 and c["baseline"]["time"] == "2026-01-12 21:10"


def test_no_findings_along_edges_for_a_non_integer_shift(first_run):
    st = first_run.report["stacks"][2]
    assert st["findings"] == []
    assert st["compare"]["findings"] == 0


def test_difference_file_nan_outside_overlap(first_run, scene_dir):
    d = tifffile.imread(scene_dir / "out" / "depressurised.difference.tif")
    assert d.shape == SHAPE and d.dtype == np.float32
    # this camera position is 1.37 px lower and 2.62 px further left in content terms: the
    # baseline's frame does not cover this stack's top rows and right-hand columns
    assert np.isnan(d[0]).all() and np.isnan(d[:, -1]).all() and np.isfinite(d[50, :-4]).all()
    assert np.isfinite(d[50, 60])
    u = tifffile.imread(scene_dir / "out" / "depressurised.difference_uncertainty.tif")
    assert np.array_equal(np.isnan(u), np.isnan(d))
    # both states give indoor and outdoor air: temperature-factor difference map
    assert (scene_dir / "out" / "depressurised.temperature_factor_difference.tif").is_file()
    # the baseline's mean is always written, whatever output.products says
    assert (scene_dir / "out" / "baseline.mean.tif").is_file()


def test_resume_reads_the_baseline_from_its_written_mean(first_run, scene_dir):
    before = first_run.report["stacks"][1]["findings"]
    res = run(_survey(scene_dir, below=1.4), resume=True)
    assert "baseline" in res.skipped and "depressurised" not in res.skipped
    st = res.report["stacks"][1]
    assert st["compare"]["baseline"]["source"] == "written outputs"
    assert [(f["row"], f["col"]) for f in st["findings"]] == [(f["row"], f["col"]) for f in before]
    assert st["findings"][0]["delta_k"] == pytest.approx(before[0]["delta_k"], abs=1e-3)


def test_other_survey_and_out_of_date_output(first_run, scene_dir, tmp_path, rad):
    other = tmp_path / "retrofit"
    other.mkdir()
    (other / "dep.tif").write_bytes((scene_dir / "dep.tif").read_bytes())
    (other / "survey.yaml").write_text(CAMERA_YAML + f"""stacks:
  - name: after
    path: dep.tif
    align: true
    compare: {{baseline: {{survey: {scene_dir / 'survey.yaml'}, stack: baseline}}, below_k: 1.5}}
output: {{dir: out}}
""")
    st = run(other / "survey.yaml").report["stacks"][0]
    assert [f["kind"] for f in st["findings"]] == ["colder"]
    assert st["compare"]["baseline"]["source"] == "written outputs of another survey"
    # the earlier survey's stack changes after its run: its outputs are out of date
    rng = np.random.default_rng(9)
    _write(scene_dir / "base.tif", [counts(pixel_radiance(rad, SHAPE, s), rng) for s in BASE_DRIFT])
    with pytest.raises(InputDataError, match=r"manifest.json: baseline of stack 'after' .*out of date"):
        run(other / "survey.yaml")


def test_missing_output_of_other_survey(tmp_path, scene_dir):
    (tmp_path / "a").mkdir()
    (tmp_path / "a" / "survey.yaml").write_text(CAMERA_YAML + "stacks:\n  - {name: old, path: ../b/dep.tif}\n")
    (tmp_path / "b").mkdir()
    (tmp_path / "b" / "dep.tif").write_bytes((scene_dir / "dep.tif").read_bytes())
    (tmp_path / "b" / "survey.yaml").write_text(CAMERA_YAML + "stacks:\n  - name: new\n    path: dep.tif\n"
                                                "    compare: {baseline: {survey: ../a/survey.yaml, stack: old}}\n")
    with pytest.raises(InputDataError, match=r"no readable run manifest; run that survey first"):
        run(tmp_path / "b" / "survey.yaml")


@pytest.mark.parametrize("baseline, msg", [
    ("later", r"stacks\[0\].compare.baseline: stack 'later' comes later in the config"),
    ("nosuch", r"stacks\[0\].compare.baseline: no stack named 'nosuch'"),
    ("first", r"stacks\[0\].compare.baseline: stack 'first' cannot be its own baseline"),
])
def test_baseline_must_be_an_earlier_stack(tmp_path, scene_dir, baseline, msg):
    (tmp_path / "s.tif").write_bytes((scene_dir / "dep.tif").read_bytes())
    p = tmp_path / "survey.yaml"
    p.write_text(CAMERA_YAML + f"stacks:\n  - name: first\n    path: s.tif\n    compare: {{baseline: {baseline}}}\n"
                 "  - name: later\n    path: s.tif\n")
    with pytest.raises(ConfigError, match=msg):
        load_config(p)


def test_offset_region_must_exist(tmp_path, scene_dir):
    (tmp_path / "s.tif").write_bytes((scene_dir / "dep.tif").read_bytes())
    p = tmp_path / "survey.yaml"
    p.write_text(CAMERA_YAML + "stacks:\n  - {name: a, path: s.tif}\n  - name: b\n    path: s.tif\n"
                 "    compare: {baseline: a, offset: wal}\n")
    with pytest.raises(ConfigError, match=r"compare.offset: 'wal' is neither median, none nor a region"):
        load_config(p)


# --- pure functions -------------------------------------------------------------------------

def test_find_changes_blob_found_edge_suppressed():
    diff = np.zeros((40, 40))
    yy, xx = np.mgrid[:40, :40]
    diff -= 3.0 * np.exp(-((yy - 10) ** 2 + (xx - 12) ** 2) / (2 * 2.0 ** 2))     # a change
    diff[25:27, 5:35] = 2.0                                                       # an edge residual
    edge = np.zeros_like(diff)
    edge[24:28, 5:35] = 2.5           # expected residual there (as from a 6 K step)
    u = 0.1 + edge
    found, suppressed = cmp.find_changes(diff, u, edge, below_k=1.5, above_k=1.5, min_area_px=6)
    assert len(found) == 1 and found[0]["kind"] == "colder"
    assert (found[0]["row"], found[0]["col"]) == (10, 12) and found[0]["delta_k"] == pytest.approx(-3.0)
    assert found[0]["bbox"][0] <= 10 < found[0]["bbox"][2]
    assert len(suppressed) == 1 and suppressed[0]["kind"] == "warmer" and "edge residual" in suppressed[0]["suppressed"]


def test_noise_from_frame_differences_not_sqrt_n():
    rng = np.random.default_rng(1)
    n, shape = 20, (60, 80)
    fixed = rng.normal(0, 0.5, shape)                 # fixed pattern: cancels in frame differences
    drift = np.linspace(0, 0.2, n)                    # slow drift: in the mean, not in sqrt(N)
    acc = cmp.TemporalAccumulator(shape)
    frames = 5.0 + fixed[None] + drift[:, None, None] + rng.normal(0, 0.1, (n,) + shape)
    acc.add(frames[:7], 0)
    acc.add(frames[7:], 7)
    noise = cmp.temporal_noise(acc, flat=np.ones(shape, bool))
    # white noise 0.1 K; successive differences also carry the drift step (0.2/19 K)
    assert noise["frame_noise_k"] == pytest.approx(np.hypot(0.1, 0.2 / 19 / np.sqrt(2)), rel=0.03)
    assert noise["mean_noise_k"] == pytest.approx(0.1 / np.sqrt(n), rel=0.1)
    mean, std = acc.products()
    assert np.allclose(mean, frames.mean(0), atol=1e-5)
    assert np.allclose(std, frames.std(0, ddof=1), atol=1e-5)


def test_temperature_factor_difference_iso13788():
    # f = (T_si - T_e) / (T_i - T_e), ISO 13788:2012 3.1.1
    d = cmp.temperature_factor_difference(np.array([15.0]), np.array([12.0]), 20.0, 0.0, 20.0, -5.0)
    assert d[0] == pytest.approx(0.75 - 0.68)


def test_offset_removal_modes():
    diff = np.array([[0.5, 0.5, 0.5], [0.5, -3.0, 0.6]])
    out, off = cmp.remove_offset(diff, "median")
    assert off == pytest.approx(0.5) and out[1, 1] == pytest.approx(-3.5)
    region = np.array([[False, False, False], [False, False, True]])
    assert cmp.remove_offset(diff, "region", region)[1] == pytest.approx(0.6)
    assert cmp.remove_offset(diff, "none")[1] == 0.0
