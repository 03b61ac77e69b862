"""Emissivity by region (conditions.emissivity: {regions: {...}, default: ...}).

Truth: scenes from the independent forward model (tests/forward_model.py), where each
region's pixels are generated with the emissivity written in the test; the inversion must
return the scene temperature. Overlap rule: a later region in the list wins (the config's
stated rule; common practice, no source).
"""
import json

import numpy as np
import pytest
import tifffile

from forward_model import Camera
from irpipe.config import load_config
from irpipe.emissivity import EmissivityField, emissivity_by_region
from irpipe.errors import ConfigError
from irpipe.pipeline import run

K0 = 273.15
LIB = {"brick-common": {"emissivity": 0.93, "uncertainty": 0.02}, "glass-uncoated": {"emissivity": 0.84}}


def test_later_region_wins_and_labels_stay_few():
    a = np.zeros((6, 8), bool)
    a[0:4, 0:5] = True
    b = np.zeros((6, 8), bool)
    b[2:6, 3:8] = True
    base = EmissivityField(value=0.95, description="0.95")
    f = emissivity_by_region(base, {"a": a, "b": b}, {"b": 0.5, "a": "brick-common"}, LIB, typed_uncertainty=0.03)
    want = np.full((6, 8), 0.95)
    want[a] = 0.93
    want[b] = 0.5                      # b is later in the regions list: it wins
    np.testing.assert_array_equal(f.as_array((6, 8)), want.astype(np.float32))
    assert f.distinct() == 3
    u = f.uncertainty_array((6, 8))
    assert u[0, 0] == 0.02 and u[5, 7] == 0.03 and u[5, 0] == 0.0   # library, typed, default number


def test_default_label_image_and_map_take_overrides():
    lab = np.array([[1, 1, 2], [2, 2, 1]])
    base = EmissivityField(index=lab - 1, values=np.array([0.9, 0.8]), description="labels",
                           uncertainty=np.where(lab == 1, 0.01, 0.02))
    m = np.array([[False, True, True], [False, False, False]])
    f = emissivity_by_region(base, {"r": m}, {"r": 0.7}, LIB)
    np.testing.assert_array_equal(f.as_array((2, 3)), np.float32([[0.9, 0.7, 0.7], [0.8, 0.8, 0.9]]))
    np.testing.assert_array_equal(f.uncertainty_array((2, 3)), [[0.01, 0, 0], [0.02, 0.02, 0.01]])
    fm = emissivity_by_region(EmissivityField(map=np.full((2, 3), 0.6)), {"r": m}, {"r": "glass-uncoated"}, LIB)
    assert fm.map is not None and fm.map[0, 2] == 0.84 and fm.map[1, 2] == 0.6
    with pytest.raises(KeyError, match="did you mean 'brick-common'"):
        emissivity_by_region(base, {"r": m}, {"r": "brick-comon"}, LIB)


def brick_emissivity():
    """brick-common from the packaged library file, read here with plain YAML."""
    import yaml
    from pathlib import Path
    return yaml.safe_load((Path(__file__).parents[1] / "configs" / "materials.yaml").read_text())["brick-common"]["emissivity"]


def scene(tmp_path, nuc=False):
    """A wall at 5 C with glazing (eps 0.84) and a brick panel (library brick-common) over a default of
    0.95; glazing drawn after brick, overlapping it, so the glazing value wins there."""
    cam = Camera(7.5, 14.0)
    rows, cols = 40, 60
    t = np.full((rows, cols), 5.0)
    t[10:30, 30:55] = 9.0
    e = np.full((rows, cols), 0.95)
    e[5:25, 5:40] = brick_emissivity()
    e[10:30, 30:55] = 0.84
    rad = cam.received(t + K0, e, -10 + K0, 2 + K0)
    rng = np.random.default_rng(3)
    raw = (np.rint(250.0 * rad + 2000.0)[None] + rng.integers(-1, 2, (3, rows, cols))).astype(np.uint16)
    tifffile.imwrite(tmp_path / "wall.tif", raw, photometric="minisblack")
    cam_yaml = "  spectral_band_um: [7.5, 14.0]\n  calibration: {model: linear, gain: 250.0, offset_counts: 2000.0}"
    if nuc:
        tifffile.imwrite(tmp_path / "gain.tif", np.ones((rows, cols), np.float32))
        tifffile.imwrite(tmp_path / "offset.tif", np.zeros((rows, cols), np.float32))
        cam_yaml += "\n  gain_map: gain.tif\n  offset_map: offset.tif"
    text = f"""# a comment
camera:
{cam_yaml}
conditions:
  reflected_temperature_c: -10
  air_temperature_c: 2
  distance_m: 0
uncertainty: {{emissivity: 0.02, reflected_temperature_k: 2.0}}
stacks:
  - name: wall
    path: wall.tif
    conditions:
      emissivity: {{regions: {{brick: brick-common, glazing: 0.84}}, default: 0.95}}
    regions:
      - {{name: brick, rect: [5, 5, 25, 40]}}
      - {{name: glazing, rect: [10, 30, 30, 55]}}
      - {{name: plain, rect: [32, 0, 40, 60]}}
"""
    (tmp_path / "survey.yaml").write_text(text)
    return t, e


@pytest.mark.parametrize("nuc", [False, True], ids=["lookup", "per-pixel"])
def test_run_recovers_scene_with_region_emissivity(tmp_path, nuc):
    truth, e = scene(tmp_path, nuc)
    res = run(tmp_path / "survey.yaml", tmp_path / "out")
    st = res.report["stacks"][0]
    assert st["plan"] == ("per-pixel" if nuc else "lookup")
    got = np.nanmean(tifffile.imread(tmp_path / "out" / "wall.temperature.tif"), axis=0)
    # +-1 count of noise is ~0.04 K; mean of 3 frames; the brief's end-to-end tolerance 0.15 K
    assert np.abs(got - truth).max() < 0.15
    u = tifffile.imread(tmp_path / "out" / "wall.uncertainty.tif")
    assert np.isfinite(u).all() and (u > 0).all()
    # lower emissivity -> larger share of reflected radiation -> larger U (GUM sensitivity,
    # common practice, no source)
    assert u[:, 20, 50].mean() > u[:, 35, 10].mean()
    assert "by region" in st["conditions"]["emissivity"]


def test_plans_agree_with_region_emissivity(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    scene(tmp_path / "a", nuc=False)
    scene(tmp_path / "b", nuc=True)
    run(tmp_path / "a" / "survey.yaml", tmp_path / "a" / "out")
    run(tmp_path / "b" / "survey.yaml", tmp_path / "b" / "out")
    ta = tifffile.imread(tmp_path / "a" / "out" / "wall.temperature.tif")
    tb = tifffile.imread(tmp_path / "b" / "out" / "wall.temperature.tif")
    ua = tifffile.imread(tmp_path / "a" / "out" / "wall.uncertainty.tif")
    ub = tifffile.imread(tmp_path / "b" / "out" / "wall.uncertainty.tif")
    # float64 table vs float32 per-pixel arithmetic: a few mK (the plans' documented agreement)
    assert np.abs(ta - tb).max() < 0.01
    assert np.abs(ua - ub).max() < 0.01


def test_unknown_region_name_is_a_config_error(tmp_path):
    scene(tmp_path)
    p = tmp_path / "survey.yaml"
    p.write_text(p.read_text().replace("glazing: 0.84}", "glasing: 0.84}"))
    with pytest.raises(ConfigError, match=r"line 14 .*stacks\[0\]\.conditions\.emissivity\.regions\.glasing: "
                                          r"'glasing' is not a region of stack 'wall'"):
        load_config(p)


def test_default_is_required(tmp_path):
    scene(tmp_path)
    p = tmp_path / "survey.yaml"
    p.write_text(p.read_text().replace(", default: 0.95}", "}"))
    with pytest.raises(ConfigError, match=r"emissivity: missing required key 'default'"):
        load_config(p)


def test_survey_level_block_names_regions_of_every_stack(tmp_path):
    scene(tmp_path)
    p = tmp_path / "survey.yaml"
    text = p.read_text().replace("conditions:\n  reflected_temperature_c: -10",
                                 "conditions:\n  emissivity: {regions: {glazing: 0.84}, default: 0.95}\n"
                                 "  reflected_temperature_c: -10")
    text = text.replace("    conditions:\n      emissivity: {regions: {brick: brick-common, glazing: 0.84}, default: 0.95}\n", "")
    p.write_text(text)
    cfg = load_config(p)
    assert cfg.data["stacks"][0].get("conditions", {}).get("emissivity") is None
    res = run(p, tmp_path / "out", write_report=False)
    got = np.nanmean(tifffile.imread(tmp_path / "out" / "wall.temperature.tif"), axis=0)
    assert abs(got[20, 40] - 9.0) < 0.15            # glazing region: 0.84 from the survey-level block
    p.write_text(text.replace("{name: glazing,", "{name: pane,"))
    with pytest.raises(ConfigError, match=r"conditions\.emissivity\.regions\.glazing: 'glazing' is not a region "
                                          r"of stack 'wall'"):
        load_config(p)
