"""Float32 fast paths stay within 0.01 K of float64 references (the tolerance is this
project's: a tenth of a typical camera's 0.1 K resolution, common practice)."""
import numpy as np
import pytest

from irpipe import findings
from irpipe.constants import ZERO_CELSIUS
from irpipe.correction import CameraModel, MeasurementModel
from irpipe.radiometry import SpectralResponse
from irpipe.regions import RegionAccumulator

TOL_K = 0.01


@pytest.fixture(scope="module")
def model():
    return MeasurementModel(CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6)), 0.93)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_per_pixel_float32_matches_float64_model(model, seed):
    rng = np.random.default_rng(seed)
    n = 20000
    t_obj = rng.uniform(-40.0, 300.0, n) + ZERO_CELSIUS
    eps = rng.uniform(0.1, 1.0, n)
    t_refl, t_air = -10.0 + ZERO_CELSIUS, 5.0 + ZERO_CELSIUS
    s = model.received_signal(t_obj, eps, t_refl, t_air)
    ref = model.object_temperature(s, eps, t_refl, t_air, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        got = model.object_temperature(s.astype(np.float32), eps.astype(np.float32), t_refl, t_air,
                                       dtype=np.float32)
    assert got.dtype == np.float32
    ok = np.isfinite(ref)
    assert ok.mean() > 0.99
    assert np.isfinite(got[ok]).all()
    assert np.max(np.abs(got[ok] - ref[ok])) < TOL_K
    # and the float64 reference recovers the truth (the model is not the error source)
    assert np.max(np.abs(ref[ok] - t_obj[ok])) < TOL_K


def test_region_stats_float32_fast_path_matches_float64(tmp_path):
    rng = np.random.default_rng(4)
    f, m, n = 45, 60, 80
    data64 = 20.0 + 3.0 * rng.standard_normal((f, m, n))
    data32 = data64.astype(np.float32)
    ref_vals = data32.astype(np.float64)                 # what the fast path sees
    masks = {"rect": np.zeros((m, n), bool), "blob": np.zeros((m, n), bool)}
    masks["rect"][10:40, 5:50] = True
    rr, cc = np.mgrid[0:m, 0:n]
    masks["blob"][((rr - 30) / 15.0) ** 2 + ((cc - 55) / 20.0) ** 2 <= 1] = True
    for name, mask in masks.items():
        acc = RegionAccumulator(name, mask)
        for s in range(0, f, 16):
            acc.update(data32[s:s + 16], s)
        r = acc.result()
        v = ref_vals[:, mask]
        assert r["valid_values"] == v.size
        assert r["mean_c"] == pytest.approx(v.mean(), abs=1e-6)
        assert r["std_c"] == pytest.approx(v.std(), abs=1e-5)
        assert r["min_c"] == v.min() and r["max_c"] == v.max()
        # percentiles: 0.01 K bins, so within one bin of numpy's
        assert abs(r["p05_c"] - np.percentile(v, 5)) <= TOL_K
        assert abs(r["p95_c"] - np.percentile(v, 95)) <= TOL_K
        fr = r["frames"][7]
        assert fr["mean_c"] == pytest.approx(v[7].mean(), abs=1e-6)
        assert fr["min_c"] == v[7].min() and fr["max_c"] == v[7].max()
        k = int(np.argmax(v.max(axis=1)))
        assert r["max_at"]["frame"] == k and mask[r["max_at"]["row"], r["max_at"]["col"]]
        assert data32[k, r["max_at"]["row"], r["max_at"]["col"]] == v.max()


def test_region_stats_fast_and_general_paths_agree():
    rng = np.random.default_rng(5)
    data = (5.0 + rng.standard_normal((30, 20, 30))).astype(np.float32)
    mask = np.zeros((20, 30), bool)
    mask[3:17, 4:26] = True
    fast, general = RegionAccumulator("a", mask), RegionAccumulator("a", mask)
    for s in range(0, 30, 7):
        fast.update(data[s:s + 7], s)
        general._update_general(data[s:s + 7], s)
    a, b = fast.result(), general.result()
    for key in ("valid_values", "min_c", "max_c", "min_at", "max_at"):
        assert a[key] == b[key]
    for key in ("mean_c", "std_c"):
        assert a[key] == pytest.approx(b[key], abs=1e-6)
    for key in ("p05_c", "p95_c"):
        assert abs(a[key] - b[key]) <= TOL_K + 1e-9
    for fa, fb in zip(a["frames"], b["frames"]):
        assert fa["min_c"] == fb["min_c"] and fa["max_c"] == fb["max_c"]
        assert fa["mean_c"] == pytest.approx(fb["mean_c"], abs=1e-6)


def test_region_stats_chunk_with_nan_takes_the_general_path():
    data = np.full((4, 6, 6), 10.0, np.float32)
    data[1, 2, 2] = np.nan
    data[2, 3, 3] = 12.5
    acc = RegionAccumulator("r", np.ones((6, 6), bool))
    acc.update(data, 0)
    r = acc.result()
    assert r["valid_values"] == 4 * 36 - 1
    assert r["frames"][1]["valid_pixels"] == 35
    assert r["max_c"] == 12.5 and r["max_at"] == {"frame": 2, "row": 3, "col": 3}


def test_update_extremes_float32_equals_float64():
    rng = np.random.default_rng(6)
    stack = np.round(rng.normal(20, 2, (40, 16, 24)), 2).astype(np.float32)   # ties on purpose
    a = b = None
    for s in range(0, 40, 9):
        a = findings.update_extremes(a, stack[s:s + 9], s)
        b = findings.update_extremes(b, stack[s:s + 9].astype(np.float64), s)
    for key in ("max_c", "min_c", "max_frame", "min_frame", "n_valid"):
        np.testing.assert_array_equal(getattr(a, key), getattr(b, key))
    assert a.max_c.dtype == np.float64
