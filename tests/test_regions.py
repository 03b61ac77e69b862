"""Region masks and streaming statistics (checked against numpy on the full array)."""
import numpy as np
import pytest

from irpipe.regions import (RegionAccumulator, ellipse_mask, geometry_problem, local_linear_smooth,
                            polygon_mask, rect_mask)


def test_rect_half_open_like_numpy():
    m = rect_mask((10, 12), [2, 3, 5, 7])
    ref = np.zeros((10, 12), bool)
    ref[2:5, 3:7] = True
    assert np.array_equal(m, ref)


def test_polygon_and_ellipse_row_col():
    # (row, col) convention of scikit-image: a tall thin triangle and ellipse
    p = polygon_mask((20, 10), [[0, 0], [19, 0], [19, 4]])
    assert p[18, 1] and not p[1, 8]
    e = ellipse_mask((40, 40), (20, 10), (15, 4))
    rows, cols = np.nonzero(e)
    assert rows.max() - rows.min() > 2 * (cols.max() - cols.min())
    assert geometry_problem((40, 40), {"ellipse": {"center": (20, 10), "radii": (25, 4)}})


def test_accumulator_matches_numpy():
    rng = np.random.default_rng(5)
    data = rng.normal(20, 3, (13, 16, 18)).astype(np.float32)
    data[2, 3, 4] = np.nan
    mask = rect_mask((16, 18), [2, 2, 14, 15])
    acc = RegionAccumulator("r", mask)
    for s in range(0, 13, 5):
        acc.update(data[s:s + 5], s)
    res = acc.result()
    v = data[:, mask]
    assert res["mean_c"] == pytest.approx(np.nanmean(v), abs=1e-5)
    assert res["std_c"] == pytest.approx(np.nanstd(v), abs=1e-5)
    assert res["min_c"] == pytest.approx(np.nanmin(v)) and res["max_c"] == pytest.approx(np.nanmax(v))
    f, r, c = np.unravel_index(np.nanargmax(np.where(np.isfinite(data) & mask[None], data, -np.inf)), data.shape)
    assert res["max_at"] == {"frame": f, "row": r, "col": c}
    assert res["p05_c"] == pytest.approx(np.nanpercentile(v, 5), abs=0.02)      # 0.01 K histogram bins
    assert res["p95_c"] == pytest.approx(np.nanpercentile(v, 95), abs=0.02)
    assert [x["frame"] for x in res["frames"]] == list(range(13))
    assert res["frames"][4]["mean_c"] == pytest.approx(np.nanmean(data[4][mask]), abs=1e-4)


def test_local_linear_smooth_keeps_gradients_at_edges():
    r, c = np.mgrid[0:20, 0:30]
    ramp = 3.0 + 0.4 * r - 0.25 * c
    mask = rect_mask((20, 30), [0, 10, 20, 30])
    out = local_linear_smooth(ramp, mask)
    assert np.nanmax(np.abs(out - ramp)[mask]) < 1e-9            # exact for a plane, corners included
    assert np.all(np.isnan(out[~mask]))
    rng = np.random.default_rng(2)
    noisy = ramp + rng.normal(0, 0.1, ramp.shape)
    inner = rect_mask((20, 30), [3, 13, 17, 27])
    assert np.std((local_linear_smooth(noisy, mask) - ramp)[inner]) < 0.05   # ~0.1/sqrt(25)*(1+)


def test_local_linear_smooth_is_the_windowed_least_squares_plane():
    """Definition (Savitzky & Golay 1964, order 1, on a masked domain): per pixel the
    intercept of the least-squares plane over the mask's pixels in its 5 x 5 window,
    solved here pixel by pixel with numpy.linalg.lstsq. The mask has holes, a ragged
    edge, isolated pixels and a collinear line, so every branch (full window, cut window,
    collinear window, fewer than three pixels) is compared."""
    rng = np.random.default_rng(5)
    img = rng.normal(8.0, 1.0, (24, 31)).astype(np.float32)
    mask = np.zeros(img.shape, bool)
    mask[2:20, 3:25] = True
    mask &= rng.random(img.shape) > 0.08
    mask[21, 2:12] = True                        # a line: collinear windows
    mask[23, 29] = True                          # an isolated pixel
    out = local_linear_smooth(img, mask, radius=2)
    want = np.full(img.shape, np.nan)
    for r, c in zip(*np.nonzero(mask)):
        rr, cc = np.nonzero(mask[max(r - 2, 0):r + 3, max(c - 2, 0):c + 3])
        dr, dc = rr + max(r - 2, 0) - r, cc + max(c - 2, 0) - c
        z = img[dr + r, dc + c].astype(np.float64)
        if z.size < 3:
            want[r, c] = img[r, c]
            continue
        a = np.stack([np.ones(z.size), dr, dc], 1)
        sol, _, rank, _ = np.linalg.lstsq(a, z, rcond=None)
        want[r, c] = sol[0] if rank == 3 else z.mean()
    assert np.array_equal(np.isnan(out), ~mask)
    np.testing.assert_allclose(out[mask], want[mask], rtol=0, atol=1e-9)


def test_ellipse_spellings(tmp_path, linear_camera):
    # config edge: {center}, {centre} and [row, col, rr, rc] give the same region (project convention)
    import tifffile
    from irpipe.pipeline import run
    tifffile.imwrite(tmp_path / "s.tif", np.full((1, 30, 40), 20000, np.uint16))
    forms = ["{center: [15, 20], radii: [6, 9]}", "{centre: [15, 20], radii: [6, 9]}", "[15, 20, 6, 9]"]
    regs = "".join(f"      - {{name: e{k}, ellipse: {f}}}\n" for k, f in enumerate(forms))
    (tmp_path / "c.yaml").write_text(
        f"camera: {linear_camera((8, 14))}\n"
        "conditions: {emissivity: 0.9, reflected_temperature_c: 10, air_temperature_c: 10}\n"
        "stacks:\n  - name: s\n    path: s.tif\n    regions:\n" + regs)
    res = run(tmp_path / "c.yaml", tmp_path / "o", write_report=False)
    px = [r["pixels"] for r in res.report["stacks"][0]["regions"]]
    assert px[0] == px[1] == px[2] == int(ellipse_mask((30, 40), (15, 20), (6, 9)).sum())


def test_counted_statistics_equal_numpy_on_the_expanded_values():
    """Percentiles (numpy.percentile, linear method = Hyndman & Fan 1996 definition 7) and
    the population standard deviation (numpy.std) of a multiset given as values and
    counts, against numpy on the expanded array; values unsorted, repeated, with zero
    counts and NaN entries that have no count."""
    from irpipe.regions import counted_statistics

    rng = np.random.default_rng(11)
    values = rng.normal(12.0, 3.0, 400).astype(np.float32)
    values[::7] = values[3]                                     # repeated values
    counts = rng.integers(0, 50, values.size)
    values[5], counts[5] = np.nan, 0                            # invalid entries carry no count
    expanded = np.repeat(values.astype(np.float64), counts)
    qs = (0, 5, 25, 50, 95, 99.9, 100)
    std, got = counted_statistics(values, counts, qs)
    for q, g in zip(qs, got):
        assert g == np.percentile(expanded, q), q
    assert std == pytest.approx(expanded.std(), rel=1e-12)
    assert counted_statistics([1.0], [0]) == (None, [None, None])
