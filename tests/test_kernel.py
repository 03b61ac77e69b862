"""The pure pixel kernel (irpipe.kernel) on its own: truth from the independent forward
model (tests/forward_model.py, which shares no code with the inversion), both plans, the
window cache changing no value, and the frozen tables surviving a pickle (the cluster
path sends them to workers)."""
import pickle

import numpy as np
import pytest

from forward_model import Camera
from irpipe.constants import ZERO_CELSIUS
from irpipe.correction import CameraModel, MeasurementModel, REASONS, SATURATED
from irpipe.emissivity import EmissivityField
from irpipe.kernel import Window, build_tables, correct
from irpipe.radiometry import SpectralResponse

GAIN, OFFSET = 300.0, 1000.0          # counts per W m-2 sr-1, counts at zero radiance (invented camera)
T_REFL, T_AIR = 268.15, 275.15


@pytest.fixture(scope="module")
def scene():
    """Counts of a 3-material wall at known temperatures, no path (tau = 1)."""
    fm = Camera(7.5, 14.0)
    rng = np.random.default_rng(7)
    truth = 275.0 + 10.0 * rng.random((6, 12, 16))
    labels = np.zeros((12, 16), np.int32)
    labels[:, 8:] = 1
    labels[6:, :4] = 2
    eps_values = np.array([0.93, 0.85, 0.6])
    eps = eps_values[labels]
    counts = GAIN * fm.received(truth, eps[None], T_REFL, T_AIR) + OFFSET
    raw = np.rint(counts).astype(np.uint16)
    raw[2, 3, 3] = 65535              # saturated
    model = MeasurementModel(CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6), "band"), 1.0,
                             (ZERO_CELSIUS - 60, ZERO_CELSIUS + 650))
    return raw, truth, labels, eps_values, model


def _tables(scene, per_pixel):
    raw, truth, labels, eps_values, model = scene
    if per_pixel:
        field = EmissivityField(map=eps_values[labels].astype(np.float64), description="map")
    else:
        field = EmissivityField(index=labels, values=eps_values, description="labels")
    return build_tables(input="counts", calibration={"offset_counts": OFFSET, "gain": GAIN}, model=model,
                        air_temperature_k=T_AIR, reflected_temperature_k=T_REFL, dtype=raw.dtype,
                        emissivity_field=field, shape=raw.shape[1:])


@pytest.mark.parametrize("per_pixel", [False, True], ids=["lookup", "per-pixel"])
def test_kernel_recovers_the_forward_model_truth(scene, per_pixel):
    raw, truth, labels, eps_values, model = scene
    t = _tables(scene, per_pixel)
    assert t.plan == ("per-pixel" if per_pixel else "lookup")
    res = correct(raw, t)
    got = res.temperature_c + ZERO_CELSIUS
    ok = np.isfinite(got)
    assert not ok[2, 3, 3] and ok.sum() == raw.size - 1
    assert res.invalid_counts[SATURATED] == 1 and sum(res.invalid_counts.values()) == 1
    assert set(res.invalid_counts) == set(REASONS)
    # rounding the counts to integers is the only loss: 1 count / (dS/dT) at eps 0.6 is ~ 0.03 K
    assert np.abs(got[ok] - truth[ok]).max() < 0.05


def test_window_cache_changes_no_value(scene):
    raw, *_ = scene
    t = _tables(scene, False)
    w = Window()
    full = correct(raw, t, want_index=True).temperature_c
    parts = [correct(raw[k:k + 2], t, window=w, count=True) for k in range(0, raw.shape[0], 2)]
    np.testing.assert_array_equal(np.concatenate([p.temperature_c for p in parts]), full)
    # the (label, raw) counts of the chunks add up to one count per pixel
    assert sum(int(p.value_counts[1].sum()) for p in parts) == raw.size


def test_tables_pickle_and_give_the_same_numbers(scene):
    raw, *_ = scene
    for per_pixel in (False, True):
        t = _tables(scene, per_pixel)
        t2 = pickle.loads(pickle.dumps(t))
        np.testing.assert_array_equal(correct(raw, t).temperature_c, correct(raw, t2).temperature_c)
