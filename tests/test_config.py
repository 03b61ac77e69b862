"""Tests for irpipe.config: YAML with line numbers, the schema's defaults and errors, the
cross-checks and the per-stack merges. Messages are the project's own contract (one line:
file, YAML line and column, dotted key, what was expected and the fix; DEVELOPERS.md,
"Errors"), so these checks have no outside source."""
import json

import numpy as np
import pytest

from irpipe.config import (dotted_key, json_schema, load_config, load_yaml, merged_camera,
                           merged_conditions)
from irpipe.errors import ConfigError

COND = "conditions: {emissivity: 0.93, reflected_temperature_c: 5, air_temperature_c: 5}\n"


@pytest.fixture
def survey(tmp_path, write_config, write_stack, camera_yaml):
    """``survey(body, camera=None)``: a config with the test camera on line 1, beside two
    small stacks a.tif and b.tif."""
    for name in ("a.tif", "b.tif"):
        write_stack(tmp_path / name, np.full((1, 8, 8), 20000, np.uint16))

    def make(body, camera=None):
        return write_config(f"camera: {camera or camera_yaml}\n" + body, name="survey.yaml")
    return make


def test_load_yaml_marks_lines_and_columns():
    data, marks = load_yaml("a: 1\nb:\n  c: [1, 2]\n  d: {e: x}\n")
    assert data == {"a": 1, "b": {"c": [1, 2], "d": {"e": "x"}}}
    assert marks[("a",)] == (1, 1)
    assert marks[("b", "c")] == (3, 3)
    assert marks[("b", "d", "e")] == (4, 7)
    # an unknown path falls back to its nearest marked parent
    assert marks.at(("b", "d", "e", "f")) == (4, 7)


def test_duplicate_key_names_its_line():
    with pytest.raises(ConfigError, match=r"^s\.yaml line 4, b\.c: key given twice; keep one$"):
        load_yaml("a: 1\nb:\n  c: 1\n  c: 2\n", "s.yaml")


def test_yaml_syntax_error_names_line_and_column():
    with pytest.raises(ConfigError, match=r"^s\.yaml line \d+ column \d+: YAML syntax error: .*check indentation"):
        load_yaml("a: {b: 1\nc: [\n", "s.yaml")


def test_dotted_key():
    assert dotted_key(["stacks", 2, "regions", 0, "rect"]) == "stacks[2].regions[0].rect"
    assert dotted_key([]) == ""


def test_defaults_are_filled(survey, tmp_path):
    cfg = load_config(survey(COND + "stacks: [{name: a, path: a.tif}]\n"))
    assert cfg.data["camera"]["input"] == "counts"
    assert cfg.data["camera"]["calibration"]["offset_counts"] == 1000
    assert cfg.path == (tmp_path / "survey.yaml").resolve()


@pytest.mark.parametrize("body, pattern", [
    # value out of range: line, column, dotted key, the allowed interval, a likely fix
    ("conditions: {emissivity: 93, reflected_temperature_c: 5, air_temperature_c: 5}\n",
     r"^survey\.yaml line 2 column \d+, conditions\.emissivity: .*93.*did you mean 0\.93\?"),
    # unknown key: the close valid one is suggested
    ("conditions: {emisivity: 0.9, reflected_temperature_c: 5, air_temperature_c: 5}\n",
     r"^survey\.yaml line 2 column \d+, conditions\.emisivity: unknown key.*did you mean 'emissivity'\?"),
    # cross-check: a missing per-stack condition names the stack and where to set it
    ("conditions: {emissivity: 0.9, air_temperature_c: 5}\n",
     r"^survey\.yaml line 3 column \d+, stacks\[0\]: no reflected_temperature_c for this stack"),
    # cross-check: a path without humidity
    ("conditions: {emissivity: 0.9, reflected_temperature_c: 5, air_temperature_c: 5, distance_m: 4}\n",
     r"stacks\[0\]: distance_m > 0 needs relative_humidity_pct"),
])
def test_errors_name_file_line_key_and_fix(survey, body, pattern):
    with pytest.raises(ConfigError, match=pattern):
        load_config(survey(body + "stacks: [{name: a, path: a.tif}]\n"))


def test_error_is_one_line(survey):
    with pytest.raises(ConfigError) as exc:
        load_config(survey(COND + "stacks: [{name: a, path: a.tif}, {name: a, path: b.tif}]\n"))
    msg = str(exc.value)
    assert "\n" not in msg
    assert msg.startswith("survey.yaml line 3 column ")
    assert "stacks[1].name: stack name 'a' used twice; names must be unique" in msg


def test_region_names_checked_where_they_are_used(survey):
    body = COND + ("stacks:\n  - name: a\n    path: a.tif\n    regions: [{name: r1, rect: [0, 0, 4, 4]}]\n"
                   "    hotspots: {above_reference_k: 1, reference: r2}\n")
    with pytest.raises(ConfigError, match=r"line 7 column \d+, stacks\[0\]\.hotspots\.reference: 'r2' is not "
                                          r"a region of this stack nor 'median'; regions: r1"):
        load_config(survey(body))


def test_camera_needs_a_band_and_a_calibration(survey):
    with pytest.raises(ConfigError, match=r"line 1 column \d+, camera: input is counts: give calibration"):
        load_config(survey(COND + "stacks: [{name: a, path: a.tif}]\n", camera="{spectral_band_um: [8, 14]}"))


def test_missing_and_non_mapping_files(tmp_path):
    with pytest.raises(ConfigError, match="config file not found"):
        load_config(tmp_path / "nope.yaml")
    (tmp_path / "list.yaml").write_text("- 1\n- 2\n")
    with pytest.raises(ConfigError, match=r"^list\.yaml line 1: expected a mapping"):
        load_config(tmp_path / "list.yaml")


def test_stack_overrides_merge_key_by_key(survey, linear_camera):
    body = ("conditions: {emissivity: 0.93, reflected_temperature_c: 5, air_temperature_c: 5,"
            " atmosphere: {transmittance: 0.9}}\n"
            "stacks:\n"
            "  - {name: a, path: a.tif}\n"
            f"  - {{name: b, path: b.tif, camera: {{spectral_band_um: [8, 12]}},"
            " conditions: {air_temperature_c: 9, atmosphere: {pressure_kpa: 95}}}\n")
    cfg = load_config(survey(body))
    a, b = merged_conditions(cfg.data, 0), merged_conditions(cfg.data, 1)
    assert a["air_temperature_c"] == 5 and b["air_temperature_c"] == 9
    assert b["emissivity"] == 0.93                                   # inherited
    assert b["atmosphere"] == {"transmittance": 0.9, "pressure_kpa": 95}   # merged, not replaced
    assert tuple(merged_camera(cfg.data, 1)["spectral_band_um"]) == (8, 12)
    assert merged_camera(cfg.data, 1)["calibration"]["gain"] == 300   # inherited


def test_json_schema_lists_the_keys():
    s = json_schema()
    assert s["$schema"].endswith("2020-12/schema")
    text = json.dumps(s)
    for key in ("emissivity", "reflected_temperature_c", "spectral_band_um", "frame_chunk"):
        assert key in text


@pytest.mark.parametrize("name", ["north/wall", ".hidden", "a\\b"])
def test_stack_names_that_cannot_name_files_are_rejected(tmp_path, name):
    """Outputs are named after the stack (<name>.temperature.tif): a name with a path
    separator or a leading dot would write elsewhere or hide the file."""
    from irpipe.config import load_config
    from irpipe.errors import ConfigError

    (tmp_path / "a.tif").write_bytes(b"")          # the path check comes first; any file will do
    (tmp_path / "s.yaml").write_text(
        "camera: {spectral_band_um: [7.5, 14.0], calibration: {model: linear, gain: 300.0, offset_counts: 1000.0}}\n"
        "conditions: {emissivity: 0.9, reflected_temperature_c: 5, air_temperature_c: 5}\n"
        f"stacks: [{{name: '{name}', path: a.tif}}]\n")
    with pytest.raises(ConfigError, match="cannot name output files"):
        load_config(tmp_path / "s.yaml")
