"""Frames that line up: registration and resampling against scenes shifted by known
sub-pixel amounts, each frame made by integrating a 32x finer grid over each pixel
(tests/shifted_scenes.py; no interpolator shared with irpipe.alignment), and the align
stage end to end through `irpipe run`.

Tolerances are the issue's (shifts within 0.1 px; region means on sharp edges within
0.1 K where the unaligned result is off by more than 0.3 K), not a published source:
# common practice, no source
"""
import json

import numpy as np
import pytest
import tifffile

from irpipe import alignment as al
from irpipe.config import load_config
from irpipe.errors import ConfigError, InputDataError
from irpipe.pipeline import run
from shifted_scenes import CAMERA_YAML, Radiance, counts, pixel_radiance

SHAPE = (100, 120)
#: content displacement of each frame, positive down/right (up to 3 px)
DRIFT = [(0.0, 0.0), (0.4, -0.3), (1.1, 0.6), (1.7, -1.2), (2.2, 1.9), (2.9, -2.6), (-0.8, 2.95),
         (-1.6, -0.45), (-2.35, 1.15), (-3.0, -2.2)]
#: regions on sharp edges [row0, col0, row1, col1) (window pane top edge at row 14.3,
#: warm strip rows 48.6-51.9, door left edge at col 44.5) and a flat one
REGIONS = {"pane_top": [12, 14, 18, 36], "strip": [47, 30, 53, 90], "door_left": [62, 42, 82, 48],
           "flat": [88, 90, 98, 118]}


@pytest.fixture(scope="module")
def rad():
    return Radiance()


@pytest.fixture(scope="module")
def drift_frames(rad):
    return [pixel_radiance(rad, SHAPE, s) for s in DRIFT]


def test_translation_within_a_tenth_of_a_pixel_and_sign(rad, drift_frames):
    ref = drift_frames[0]
    rng = np.random.default_rng(11)
    for s, f in zip(DRIFT[1:], drift_frames[1:]):
        reg = al.register_translation(ref + rng.normal(0, 1e-4, SHAPE), f + rng.normal(0, 1e-4, SHAPE))
        # displacement of the content, positive down/right (not the skimage correction)
        assert abs(reg.row_shift_px - s[0]) <= 0.1, (s, reg)
        assert abs(reg.col_shift_px - s[1]) <= 0.1, (s, reg)
        assert reg.peak_ratio > 3.0


def test_featureless_frame_has_low_peak_ratio(drift_frames):
    rng = np.random.default_rng(2)
    flat = np.full(SHAPE, drift_frames[0].mean()) + rng.normal(0, 0.01, SHAPE)
    assert al.register_translation(drift_frames[0], flat).peak_ratio < 2.0


def test_similarity_from_point_pairs_exact():
    # p_frame = s R(theta) p_ref + t written out in (row, col)
    th, s, t = np.deg2rad(2.5), 1.04, np.array([1.2, -3.4])
    m = s * np.array([[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]])
    ref = np.array([[10.0, 12.0], [80.0, 20.0], [50.0, 100.0], [90.0, 110.0]])
    frame = ref @ m.T + t
    sim = al.similarity_from_points(np.stack([ref, frame], 1))
    assert sim.rotation_deg == pytest.approx(2.5, abs=1e-9)
    assert sim.scale == pytest.approx(1.04, abs=1e-12)
    assert (sim.row_shift_px, sim.col_shift_px) == pytest.approx((1.2, -3.4), abs=1e-9)
    with pytest.raises(ValueError, match="at least two pairs"):
        al.similarity_from_points([[[1, 2], [3, 4]]])


def test_similarity_registration_rotated_scaled_frame(rad):
    th, s, t = np.deg2rad(2.0), 1.03, np.array([1.5, -2.0])
    m = s * np.array([[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]])
    mi = np.linalg.inv(m)

    def scene_of_frame(yy, xx):        # frame pixel q shows the scene at m^-1 (q - t)
        q = np.stack([yy - t[0], xx - t[1]])
        return mi[0, 0] * q[0] + mi[0, 1] * q[1], mi[1, 0] * q[0] + mi[1, 1] * q[1]

    ref = pixel_radiance(rad, SHAPE, k=16)
    frame = pixel_radiance(rad, SHAPE, k=16, mapping=scene_of_frame)
    reg = al.register_similarity(ref, frame)
    tr = reg.transform
    assert tr.rotation_deg == pytest.approx(2.0, abs=0.1)
    assert tr.scale == pytest.approx(1.03, abs=0.005)
    assert (tr.row_shift_px, tr.col_shift_px) == pytest.approx((1.5, -2.0), abs=0.2)


def test_resampling_validity_does_not_spread():
    img = np.arange(400.0).reshape(20, 20)
    img[10, 10] = np.nan
    out, covered = al.resample(img, al.Similarity(0.3, 0.4))
    inner = ~np.isfinite(out[2:-2, 2:-2])
    assert inner.sum() == 4             # bilinear footprint of one pixel: 2 x 2
    assert not covered[-1].any() and not covered[:, -1].any()   # beyond the frame's edge
    # an exactly linear ramp is reproduced where covered (bilinear is exact on a plane)
    assert np.allclose(out[covered], (np.arange(400.0).reshape(20, 20) + 0.3 * 20 + 0.4)[covered])


def _config(tmp_path, align, products="", extra=""):
    regs = "\n".join(f"      - {{name: {n}, rect: {r}}}" for n, r in REGIONS.items())
    text = CAMERA_YAML + (f"stacks:\n  - name: wall\n    path: wall.tif\n    align: {align}\n{extra}"
                          f"    regions:\n{regs}\noutput: {{dir: out_{'a' if align != 'false' else 'u'}{products}"
                          + (", products: [mean, std]" if products else "") + "}\n")
    p = tmp_path / "survey.yaml"
    p.write_text(text)
    return p


@pytest.fixture(scope="module")
def drift_run(tmp_path_factory, rad, drift_frames):
    tmp = tmp_path_factory.mktemp("drift")
    rng = np.random.default_rng(3)
    tifffile.imwrite(tmp / "wall.tif", np.stack([counts(f, rng, 1.0) for f in drift_frames]), photometric="minisblack")
    aligned = run(_config(tmp, "true")).report["stacks"][0]
    plain = run(_config(tmp, "false")).report["stacks"][0]
    truth = rad.apparent_c(drift_frames[0])      # emissivity 1, no path: apparent = surface
    return tmp, aligned, plain, truth


def test_stack_shifts_reported_within_a_tenth(drift_run):
    _, aligned, _, _ = drift_run
    al_rep = aligned["alignment"]
    assert al_rep["reference_frame"] == 0 and al_rep["rejected_frames"] == []
    for row, s in zip(al_rep["frames"], DRIFT):
        assert abs(row["row_shift_px"] - s[0]) <= 0.1 and abs(row["col_shift_px"] - s[1]) <= 0.1, row


def test_region_means_on_edges_recovered(drift_run):
    _, aligned, plain, truth = drift_run
    worst_plain = 0.0
    for ra, rp in zip(aligned["regions"], plain["regions"]):
        r0, c0, r1, c1 = REGIONS[ra["name"]]
        want = truth[r0:r1, c0:c1].mean()
        assert abs(ra["mean_c"] - want) <= 0.1, (ra["name"], ra["mean_c"], want)
        worst_plain = max(worst_plain, abs(rp["mean_c"] - want))
    assert worst_plain > 0.3           # the scene is one where alignment matters


def test_border_pixels_get_their_own_reason(drift_run):
    tmp, aligned, plain, _ = drift_run
    inv = aligned["invalid_pixels"]
    assert inv["not_covered_after_alignment"] > 0 and inv["frame_rejected_by_alignment"] == 0
    assert "not_covered_after_alignment" not in plain["invalid_pixels"]     # unchanged without align
    t = tifffile.imread(tmp / "out_a" / "wall.temperature.tif")
    assert int(np.isnan(t).sum()) == sum(inv.values())
    assert np.isfinite(t[0]).all()       # the reference frame is not resampled


def test_rejected_frame_kept_as_nan_and_left_out(tmp_path, rad, drift_frames):
    rng = np.random.default_rng(5)
    frames = [counts(f, rng, 1.0) for f in drift_frames[:4]]
    frames[2] = counts(np.full(SHAPE, drift_frames[0].mean()), rng, 30.0)   # a featureless frame
    tifffile.imwrite(tmp_path / "wall.tif", np.stack(frames), photometric="minisblack")
    st = run(_config(tmp_path, "{max_shift_px: 5}", products="p")).report["stacks"][0]
    rows = st["alignment"]["frames"]
    assert st["alignment"]["rejected_frames"] == [2] and "peak ratio" in rows[2]["rejected"]
    t = tifffile.imread(tmp_path / "out_ap" / "wall.temperature.tif")
    assert t.shape[0] == 4 and np.isnan(t[2]).all() and np.isfinite(t[0]).all()
    assert st["invalid_pixels"]["frame_rejected_by_alignment"] == SHAPE[0] * SHAPE[1]
    flat = next(r for r in st["regions"] if r["name"] == "flat")
    assert abs(flat["mean_c"] - 5.0) < 0.05        # the wall is at 5 C; the noise frame is not in it
    assert st["temporal"]["frames_used"] == 3


def test_reference_frame_out_of_range_is_an_input_error(tmp_path, drift_frames):
    rng = np.random.default_rng(5)
    tifffile.imwrite(tmp_path / "wall.tif", np.stack([counts(f, rng) for f in drift_frames[:2]]), photometric="minisblack")
    with pytest.raises(InputDataError, match=r"wall.tif: stack 'wall' has 2 frame\(s\) \(0 to 1\); "
                                             r"align.reference_frame 7 does not exist"):
        run(_config(tmp_path, "{reference_frame: 7}"))


def test_points_with_similarity_is_a_config_error(tmp_path):
    (tmp_path / "wall.tif").write_bytes(b"")
    with pytest.raises(ConfigError, match=r"stacks\[0\].align: give either points .* not both"):
        load_config(_config(tmp_path, "{transform: similarity, points: [[[1, 2], [3, 4]], [[5, 6], [7, 8]]]}"))


def test_align_false_equals_no_align(tmp_path, drift_frames):
    rng = np.random.default_rng(6)
    tifffile.imwrite(tmp_path / "wall.tif", np.stack([counts(f, rng) for f in drift_frames[:3]]), photometric="minisblack")
    a = run(_config(tmp_path, "false"))
    p = tmp_path / "survey.yaml"
    p.write_text(p.read_text().replace("    align: false\n", "").replace("out_u", "out_n"))
    b = run(p)
    assert (tmp_path / "out_u" / "wall.temperature.tif").read_bytes() == \
        (tmp_path / "out_n" / "wall.temperature.tif").read_bytes()
    ra, rb = a.report["stacks"][0], b.report["stacks"][0]
    ra.pop("seconds", None), rb.pop("seconds", None)
    assert json.dumps(ra, sort_keys=True) == json.dumps(rb, sort_keys=True)
    assert "alignment" not in ra and ra["plan"] == "lookup"


def test_cluster_run_equals_plain_run(tmp_path, drift_frames):
    distributed = pytest.importorskip("distributed")
    rng = np.random.default_rng(8)
    frames = [counts(f, rng) for f in drift_frames[:5]]
    frames[3] = counts(np.full(SHAPE, drift_frames[0].mean()), rng, 30.0)     # rejected
    tifffile.imwrite(tmp_path / "wall.tif", np.stack(frames), photometric="minisblack")
    cfg = _config(tmp_path, "true", products="c", extra="    time: evening\n")
    plain = run(cfg, tmp_path / "plain", frame_chunk=2)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        dist = run(cfg, tmp_path / "dist", scheduler=cluster.scheduler_address, frame_chunk=2)
    a, b = dist.report["stacks"][0], plain.report["stacks"][0]
    assert a["alignment"] == b["alignment"] and a["alignment"]["rejected_frames"] == [3]
    assert a["invalid_pixels"] == b["invalid_pixels"]
    for f in ("wall.temperature.tif", "wall.mean.tif"):
        np.testing.assert_array_equal(tifffile.imread(tmp_path / "dist" / f), tifffile.imread(tmp_path / "plain" / f))
