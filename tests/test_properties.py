"""Property-based tests (hypothesis): random documents and bytes give clean errors, never
crashes; physics invariants of the measurement equation."""
import json

import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from irpipe.config import json_schema, load_config, load_yaml
from irpipe.correction import CameraModel, MeasurementModel
from irpipe.errors import ConfigError, StackError
from irpipe.io import StackReader
from irpipe.radiometry import SpectralResponse

_scalars = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
                     st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12))
_keys = st.sampled_from(["camera", "stacks", "conditions", "survey", "output", "emissivity", "name", "path",
                         "regions", "rect", "distance_m", "calibration", "model", "gain", "input", "x"])
_docs = st.recursive(_scalars, lambda ch: st.one_of(st.lists(ch, max_size=4),
                                                    st.dictionaries(_keys, ch, max_size=5)), max_leaves=25)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(doc=_docs)
def test_random_documents_give_config_errors(tmp_path, doc):
    p = tmp_path / "c.yaml"
    try:
        text = yaml.safe_dump(doc)
    except yaml.YAMLError:
        return
    p.write_text(text)
    try:
        load_config(p)
    except ConfigError as exc:
        msg = str(exc)
        assert "c.yaml" in msg and "\n" not in msg


@settings(max_examples=300, deadline=None)
@given(text=st.text(max_size=200))
def test_random_text_gives_clean_yaml_errors(text):
    try:
        load_yaml(text, "t.yaml")
    except ConfigError as exc:
        assert str(exc).startswith("t.yaml")


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=600), tiff_head=st.booleans())
def test_random_bytes_give_stack_errors(tmp_path, data, tiff_head):
    p = tmp_path / "s.tif"
    p.write_bytes((b"II*\x00" if tiff_head else b"") + data)
    try:
        with StackReader(p) as r:
            r.read(0, r.frames)
    except StackError as exc:
        assert "s.tif" in str(exc) and "\n" not in str(exc)


def test_schema_is_json():
    s = json_schema()
    json.dumps(s)
    assert s["properties"]["camera"]["properties"]["input"]["enum"] == ["counts", "apparent_temperature"]
    assert s["additionalProperties"] is False


@pytest.fixture(scope="module")
def model():
    return MeasurementModel(CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6)), 0.98)


@settings(max_examples=200, deadline=None)
@given(t=st.floats(230.0, 700.0))
def test_emissivity_one_no_path_is_apparent(t):
    # invariant: eps = 1, tau = 1 -> corrected temperature equals the apparent temperature
    m = _unit_model()
    s = m.camera.signal(np.array([t]))
    assert abs(m.object_temperature(s, 1.0, 280.0, 290.0)[0] - m.apparent_temperature(s)[0]) < 1e-6
    assert abs(m.apparent_temperature(s)[0] - t) < 1e-3


_UNIT = {}


def _unit_model():
    if "m" not in _UNIT:
        _UNIT["m"] = MeasurementModel(CameraModel(SpectralResponse.rectangular(8e-6, 14e-6)), 1.0)
    return _UNIT["m"]


@settings(max_examples=100, deadline=None)
@given(eps=st.floats(0.05, 1.0), tr=st.floats(220.0, 320.0), ta=st.floats(250.0, 310.0))
def test_corrected_temperature_monotonic_in_signal(model, eps, tr, ta):
    s_lo = model.received_signal(250.0, eps, tr, ta)
    s_hi = model.received_signal(500.0, eps, tr, ta)
    s = np.linspace(s_lo, s_hi, 2000)
    t = model.object_temperature(s, eps, tr, ta)
    assert np.all(np.diff(t) > 0)
