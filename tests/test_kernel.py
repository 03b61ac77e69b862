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


def _region_masks(shape):
    r, c = np.mgrid[0:shape[0], 0:shape[1]]
    return [(r >= 3) & (r < 9) & (c >= 2) & (c < 12),            # cuts across all three labels
            (r - 6) ** 2 + (c - 8) ** 2 <= 16,                     # overlaps the first
            c >= 14]


def test_tally_groups_split_labels_and_regions(scene):
    """Every tally group has one label and one region membership, and every region is a
    union of whole groups (what the exact region histograms rest on)."""
    from irpipe.kernel import tally_groups

    raw, truth, labels, eps_values, model = scene
    masks = _region_masks(labels.shape)
    g = tally_groups(labels, masks, labels.shape, 3, 65536)
    gi, gl = g["group_index"], g["group_label"]
    assert g["groups_split_regions"] and gi.shape == labels.shape
    for k in range(gl.size):
        sel = gi == k
        assert sel.any() and np.all(labels[sel] == gl[k])
        for m in masks:
            assert m[sel].all() or not m[sel].any()
    # as many groups as distinct (label, membership) combinations
    combos = {(int(labels[i, j]),) + tuple(bool(m[i, j]) for m in masks) for i in range(12) for j in range(16)}
    assert gl.size == len(combos)
    # the sorted-key path (more regions) and the packed-row path (many regions) give the
    # same partition and the same labels
    for extra in (25, 70):
        many = masks + [np.zeros(labels.shape, bool)] * extra
        g2 = tally_groups(labels, many, labels.shape, 3, 65536)
        assert g2["group_label"].size == gl.size
        pairs = set(zip(gi.ravel().tolist(), g2["group_index"].ravel().tolist()))
        assert len(pairs) == gl.size                               # one-to-one
        for a, b in pairs:
            assert gl[a] == g2["group_label"][b]
    # too many counters: the groups stay the labels
    assert tally_groups(labels, masks, labels.shape, 3, 1 << 22)["group_index"] is None


def test_group_counts_give_each_region_its_exact_values(scene):
    """Folding a region's (group, raw) counts through the table gives exactly the
    multiset of the region's corrected temperatures (numpy over the kernel's output)."""
    from irpipe.kernel import count_values
    from irpipe.regions import counted_statistics

    raw, truth, labels, eps_values, model = scene
    field = EmissivityField(index=labels, values=eps_values, description="labels")
    masks = _region_masks(labels.shape)
    t = build_tables(input="counts", calibration={"offset_counts": OFFSET, "gain": GAIN}, model=model,
                     air_temperature_k=T_AIR, reflected_temperature_k=T_REFL, dtype=raw.dtype,
                     emissivity_field=field, shape=raw.shape[1:], regions=masks)
    res = correct(raw, t, count=True)
    # grouping changes no temperature
    np.testing.assert_array_equal(res.temperature_c, correct(raw, _tables(scene, False)).temperature_c)
    a, h = res.value_counts
    a2, h2 = count_values(raw, t)                                  # the cluster workers' count
    assert a2 == a
    np.testing.assert_array_equal(h2, h)
    values = t.group_rows(t.lut_c)[:, a:a + h.shape[1]]
    for m in masks:
        groups = np.unique(t.group_index[m])
        c, v = h[groups], values[groups]
        use = (c > 0) & np.isfinite(v)
        want = res.temperature_c[:, m]
        want = want[np.isfinite(want)].astype(np.float64)
        std, (p05, p95) = counted_statistics(v[use], c[use], (5, 95))
        assert int(c[use].sum()) == want.size
        # numpy.percentile (linear) and numpy.std: equal to the last bit or nearly
        assert p05 == np.percentile(want, 5) and p95 == np.percentile(want, 95)
        assert std == pytest.approx(want.std(), rel=1e-12)
