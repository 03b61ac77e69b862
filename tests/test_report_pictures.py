"""Light report pictures (irpipe/report/pictures.py, png.py) and the two report forms:
one page for a small survey, an index page plus one page per stack for a large one."""
from __future__ import annotations

import io
import json
import re
from pathlib import Path

import numpy as np
import pytest

from irpipe import colourtable as ct
from irpipe import report as rp
from irpipe.report import pictures as pics
from irpipe.report.png import encode_indexed

ROWS, COLS = 512, 640


def decode(png):
    """(indices, palette) through Pillow, a decoder that shares nothing with ours."""
    from PIL import Image

    im = Image.open(io.BytesIO(png))
    im.load()                          # verifies every chunk CRC and the zlib stream
    assert im.mode == "P"
    pal = np.frombuffer(bytes(im.getpalette()), np.uint8).reshape(-1, 3)
    return np.asarray(im), pal


def scene(noise_k, seed=3):
    """Smooth wall (gradient, a warm patch, a cold corner) plus white noise [C]."""
    r, c = np.mgrid[0:ROWS, 0:COLS]
    t = 17.0 + 2.5 * r / ROWS + 0.8 * np.sin(np.pi * c / COLS)
    t += 6.0 * np.exp(-(((r - 220) / 25.0) ** 2 + ((c - 260) / 40.0) ** 2))
    t -= 4.0 * np.exp(-((r / 90.0) ** 2 + ((COLS - 1 - c) / 90.0) ** 2))
    return (t + np.random.default_rng(seed).normal(0.0, noise_k, t.shape)).astype(np.float32)


def rect_mask(shape, r0, c0, r1, c1):
    m = np.zeros(shape, bool)
    m[r0:r1, c0:c1] = True
    return m


# --- PNG encoder -------------------------------------------------------------------------

def test_png_round_trips_through_an_independent_decoder():
    rng = np.random.default_rng(0)
    idx = rng.integers(0, 200, (37, 53)).astype(np.uint8)
    idx[5] = 0                                  # a row of zeros and wrap-around differences
    idx[:, 7] = 199
    pal = rng.integers(0, 256, (256, 3)).astype(np.uint8)
    got, gpal = decode(encode_indexed(idx, pal))
    assert np.array_equal(got, idx)
    assert np.array_equal(gpal[:200], pal[:200])     # only the entries used are written
    with pytest.raises(ValueError, match="outside the palette"):
        encode_indexed(idx, pal[:100])
    with pytest.raises(ValueError, match="non-empty 2-D"):
        encode_indexed(np.zeros((0, 3), np.uint8), pal)


# --- the thermogram ------------------------------------------------------------------------

def _picture(img):
    return {"mean_c": img, "hist_edges_c": np.linspace(10.0, 30.0, 401), "hist_counts": np.arange(400) % 7}


def test_thermogram_colours_outlines_and_invalid_pixels():
    img = scene(0.0)
    img[100:104, 400:404] = np.nan
    m = rect_mask(img.shape, 40, 40, 470, 300)
    enc = pics.render_stack_pictures(_picture(img), {"wall": m})
    assert enc["png_scale"] == 1 and (enc["rows"], enc["cols"]) == (ROWS, COLS)
    idx, pal = decode(enc["thermogram_png"])
    lo, hi = float(np.nanmin(img)), float(np.nanmax(img))
    assert enc["scale_c"] == pytest.approx([lo, hi])
    # outline: the region's own boundary pixels white, the ring just outside black
    assert np.all(idx[40, 40:300] == ct.WHITE) and np.all(idx[469, 40:300] == ct.WHITE)
    assert np.all(idx[40:470, 40] == ct.WHITE) and np.all(idx[40:470, 299] == ct.WHITE)
    assert np.all(idx[39, 40:300] == ct.BLACK) and np.all(idx[470, 40:300] == ct.BLACK)
    assert np.all(idx[40:470, 39] == ct.BLACK) and np.all(idx[40:470, 300] == ct.BLACK)
    assert tuple(pal[ct.WHITE]) == (255, 255, 255) and tuple(pal[ct.BLACK]) == (0, 0, 0)
    # invalid pixels grey, counted
    assert np.all(idx[100:104, 400:404] == ct.INVALID) and enc["invalid_px"] == 16
    # elsewhere the colour of the value: equal steps over [lo, hi], written independently here
    inner = (slice(41, 469), slice(41, 299))
    levels = enc["levels"]
    want = np.clip(np.floor((img[inner].astype(np.float64) - lo) / (hi - lo) * levels), 0, levels - 1)
    assert np.mean(idx[inner] == want) > 0.999          # float32 rounding at step edges only
    assert np.array_equal(pal[:levels], ct.palette(levels=levels)[:levels])
    # coldest and warmest pixel at the ends of the table
    rc = np.unravel_index(np.nanargmax(img), img.shape)
    assert tuple(pal[idx[rc]]) == tuple(ct.SEQUENTIAL[255])


def test_small_picture_is_enlarged_and_outlined_thinly():
    img = scene(0.0)[::8, ::8]                        # 64 x 80
    m = rect_mask(img.shape, 10, 20, 30, 50)
    enc = pics.render_stack_pictures(_picture(img), {"r": m})
    up = enc["png_scale"]
    assert up == 480 // 80
    idx, _ = decode(enc["thermogram_png"])
    assert idx.shape == (64 * up, 80 * up)
    # the outline is one enlarged pixel thick: the outermost row of the region's first
    # image row is white, the next one is a colour
    assert np.all(idx[10 * up, 20 * up:50 * up] == ct.WHITE)
    assert np.all(idx[10 * up + 1, 20 * up + 1:50 * up - 1] < ct.LEVELS)
    assert np.all(idx[10 * up - 1, 20 * up:50 * up] == ct.BLACK)


def test_markers_and_region_names_in_the_overlay():
    img = scene(0.0)
    enc = pics.render_stack_pictures(_picture(img), {"wall <a>": rect_mask(img.shape, 40, 40, 470, 300)})
    findings = [{"number": 3, "row": 220, "col": 260}, {"number": 4, "row": 221, "col": 261},
                {"number": 12, "row": 10, "col": 600}, {"number": 13, "row": None, "col": None}]
    svg = pics.overlay_svg(enc, findings)
    assert 'viewBox="0 0 640 512"' in svg
    marks = re.findall(r'id="marker-(\d+)"><circle cx="([\d.]+)" cy="([\d.]+)"', svg)
    assert [m[0] for m in marks] == ["3", "4", "12"]           # no marker without a pixel
    assert (float(marks[0][1]), float(marks[0][2])) == (260.5, 220.5)     # pixel centre
    assert float(marks[1][2]) == 221.5 and float(marks[1][1]) > 261.5 + 8   # set beside, with a leader
    assert svg.count("<line") == 1
    assert (float(marks[2][1]), float(marks[2][2])) == (600.5, 10.5)
    assert re.findall(r">(\d+)</text>", svg) == ["3", "4", "12"]
    assert "wall &lt;a&gt;</text>" in svg                     # names are text, escaped


def test_histogram_bars_follow_log_counts():
    edges = np.arange(0.0, 10.5, 1.0)
    counts = np.array([1, 10, 100, 1000, 0, 0, 5, 50, 500, 2])
    svg = pics.histogram_svg(edges, counts, (0.0, 10.0))
    bars = re.findall(r'<rect x="[\d.]+" y="[\d.]+" width="[\d.]+" height="([\d.]+)" fill="(#[0-9a-f]{6})"/>', svg)
    assert len(bars) == 8                                     # one per non-empty bin
    h = np.array([float(b[0]) for b in bars])
    logs = np.log10(counts[counts > 0])
    per_decade = (h[3] - h[1]) / 2.0                          # 10 -> 1000
    assert per_decade > 0
    np.testing.assert_allclose(h[1:], h[1] + (logs[1:] - 1.0) * per_decade, atol=0.15)   # 0.1 px rounding
    assert bars[-1][1] == ct.hex_colour(9.5, 0.0, 10.0)       # colour of the bin centre


def test_nice_ticks():
    # common practice, no source: the smallest step of 1, 2, 2.5 or 5 times a power of ten
    # that cuts the range into at most n steps
    assert pics.nice_ticks(1.2, 5.6, 5) == [2.0, 3.0, 4.0, 5.0]
    assert pics.nice_ticks(-0.23, 0.31, 5) == [-0.2, 0.0, 0.2]
    assert pics.nice_ticks(-0.23, 0.31, 6) == [-0.2, -0.1, 0.0, 0.1, 0.2, 0.3]
    assert pics.nice_ticks(17.0, 27.0, 4) == [17.5, 20.0, 22.5, 25.0]


@pytest.mark.parametrize("noise_k, budget", [(0.015, 100_000), (0.25, 200_000)])
def test_report_bytes_per_stack_within_budget(tmp_path, noise_k, budget):
    """Issue 10: report.html at most 200 KB per stack, goal 100 KB: 640 x 512 smooth scenes
    (noise of a few counts, ~0.015 K) meet the goal, noisy ones (0.25 K) the limit."""
    n = 3
    report = _report(n)
    pictures = {}
    for k in range(n):
        img = scene(noise_k, seed=k)
        pictures[f"s{k}"] = {**_picture(img), "masks": {"a": rect_mask(img.shape, 40, 40, 470, 300)}}
    rp.write_all(tmp_path, report, pictures)
    size = (tmp_path / "report.html").stat().st_size / n
    assert size < budget, size


# --- the two forms of report.html ----------------------------------------------------------

def _report(n, names=None):
    names = names or [f"s{k}" for k in range(n)]
    stacks = [{"name": nm, "status": "done", "frames": 2, "rows": ROWS, "cols": COLS, "conditions": {},
               "invalid_pixels": {}, "outputs": {},
               "regions": [{"name": "a", "pixels": 100, "mean_c": 20.0, "min_c": 18.0, "max_c": 25.0,
                            "frames": [{"frame": 0, "mean_c": 20.0, "min_c": 18.0, "max_c": 25.0},
                                       {"frame": 1, "mean_c": 20.1, "min_c": 18.1, "max_c": 25.1}]}],
               "findings": [{"kind": "hot", "frame": 0, "row": 220, "col": 260, "peak_c": 25.0, "mean_c": 24.0,
                             "area_px": 40, "delta_k": 5.0, "reference": "a", "threshold_c": 22.0}]}
              for nm in names]
    return {"schema": "irpipe.report/1", "software": {"name": "irpipe", "version": "0"}, "created_utc": "t",
            "config": "s.yaml", "survey": {"title": "Survey"}, "warnings": [], "cautions": ["Caution A."],
            "stacks": stacks}


def _small_pictures(names):
    img = scene(0.0)[::16, ::16]
    return {nm: {**_picture(img), "masks": {"a": rect_mask(img.shape, 2, 2, 20, 20)}} for nm in names}


def test_page_file_names_are_safe_and_unique():
    names = ["room 1/view 2", "room-1-view-2", "ROOM 1 VIEW 2", "..hidden", "", "ä ö", "x" * 90]
    got = rp.page_file_names(names)
    files = [got[n] for n in names]
    assert files[:3] == ["report_pages/room-1-view-2.html", "report_pages/room-1-view-2-2.html",
                         "report_pages/ROOM-1-VIEW-2-3.html"]
    assert files[3] == "report_pages/hidden.html" and files[4] == "report_pages/stack.html"
    assert files[5] == "report_pages/stack-2.html" and len(Path(files[6]).stem) == 60
    assert len({f.lower() for f in files}) == len(files)
    for f in files:
        assert re.fullmatch(r"report_pages/[A-Za-z0-9_-][A-Za-z0-9._-]*\.html", f)


def _links(text):
    return re.findall(r'href="([^"#]*)(?:#[^"]*)?"', text)


def test_large_survey_gets_an_index_and_linked_self_contained_pages(tmp_path):
    n = rp.PAGED_ABOVE_STACKS + 2
    names = [f"room {k // 3}/view {k % 3}" for k in range(n - 1)] + ["room 0 view 0"]   # a collision
    report = _report(n, names)
    written = rp.write_all(tmp_path, report, _small_pictures(names))
    index = (tmp_path / "report.html").read_text(encoding="utf-8")
    pages = sorted((tmp_path / "report_pages").glob("*.html"))
    assert len(pages) == n and sorted(written[3:]) == sorted(f"report_pages/{p.name}" for p in pages)
    # index: one row per stack with a thumbnail, findings numbered and linked to their page
    thumbs = re.findall(r'<td class="thumb"><img src="data:image/png;base64,', index)
    assert len(thumbs) == n
    assert "Stacks" in index and "Numbered findings" in index and "Caution A." in index
    for h in _links(index):
        assert (tmp_path / h).is_file(), h
    assert re.search(r'href="report_pages/room-0-view-0\.html#finding-1"', index)
    assert re.search(r'href="report_pages/room-0-view-0-2\.html#finding-' + str(n), index)
    # each stack page: self-contained, its own picture, plots and findings; links back
    for p in pages:
        text = p.read_text(encoding="utf-8")
        assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//|file:)""", text, re.I)
        assert "<script" not in text.lower() and "<link" not in text.lower()
        assert text.count("<img") == 1 and text.count('<svg class="plot"') == 2
        assert 'id="finding-' in text and "Caution A." in text
        for h in _links(text):
            assert (p.parent / h).resolve().is_file(), (p.name, h)
    assert (tmp_path / "report_pages" / "room-0-view-0-2.html").read_text(encoding="utf-8").count(
        "room 0 view 0") >= 1


def test_stale_stack_pages_are_removed(tmp_path):
    n = rp.PAGED_ABOVE_STACKS + 2
    names = [f"s{k}" for k in range(n)]
    rp.write_all(tmp_path, _report(n, names), _small_pictures(names))
    assert (tmp_path / "report_pages" / f"s{n - 1}.html").is_file()
    (tmp_path / "report_pages" / "notes.txt").write_text("mine")            # not ours: kept
    rp.write_all(tmp_path, _report(n - 1, names[:-1]), _small_pictures(names[:-1]))
    assert not (tmp_path / "report_pages" / f"s{n - 1}.html").exists()
    assert len(list((tmp_path / "report_pages").glob("*.html"))) == n - 1
    rp.write_all(tmp_path, _report(3, names[:3]), _small_pictures(names[:3]))   # back to one page
    assert not list((tmp_path / "report_pages").glob("*.html"))
    assert (tmp_path / "report_pages" / "notes.txt").is_file()
    assert "report_pages/" not in (tmp_path / "report.html").read_text(encoding="utf-8")


def test_small_survey_stays_one_page(tmp_path):
    names = ["a", "b"]
    written = rp.write_all(tmp_path, _report(2, names), _small_pictures(names))
    assert written == list(rp.FILES) and not (tmp_path / "report_pages").exists()
    text = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert text.count('<section class="stack"') == 2 and 'href="#finding-1"' in text


# --- --resume keeps the pictures ----------------------------------------------------------

def test_encoded_pictures_round_trip_as_text():
    enc = pics.render_stack_pictures(_picture(scene(0.0)[::8, ::8]), {})
    back = pics.loads(pics.dumps(enc))
    assert back == enc
    assert pics.loads('{"schema": 999}') is None and pics.loads("not json") is None


def test_resume_reuses_the_pictures_without_reading_the_stacks(tmp_path, monkeypatch):
    import irpipe.pipeline as pipeline
    from irpipe.demo import demo_folder, write_demo

    shipped = demo_folder()
    cfg = shipped / "survey.yaml" if shipped else write_demo(tmp_path / "frames")
    out = tmp_path / "out"
    pipeline.run(cfg, out)
    first = (out / "report.html").read_text(encoding="utf-8")
    n = len(json.loads((out / "report.json").read_text())["stacks"])
    cache = sorted(p.name for p in (out / rp.CACHE_DIR).glob("*.json"))
    assert len(cache) == n
    calls = []

    def no_read(path, chunk=16):
        calls.append(path)
        raise AssertionError("a temperature stack was read back")

    monkeypatch.setattr(rp, "picture_from_tiff", no_read)
    res = pipeline.run(cfg, out, resume=True)
    assert len(res.skipped) == n and calls == []
    again = (out / "report.html").read_text(encoding="utf-8")

    def strip(t):
        return re.sub(r"created[^<]*", "", re.sub(r"<dd>[0-9T:+-]{19,}</dd>", "", t))
    assert strip(again) == strip(first)
    # pictures kept for another report entry are not used: that stack is read back
    f = sorted((out / rp.CACHE_DIR).glob("*.json"))[0]
    f.write_text(f.read_text().replace('"entry_key":"', '"entry_key":"0'))
    name = next(st["name"] for st in res.report["stacks"] if f.name.startswith(st["name"]))
    temperature = next(st["outputs"]["temperature"] for st in res.report["stacks"] if st["name"] == name)

    def read(path, chunk=16):
        calls.append(Path(path).name)
        return _picture_from_tiff(path, chunk)

    monkeypatch.setattr(rp, "picture_from_tiff", read)
    pipeline.run(cfg, out, resume=True)
    assert calls == [Path(temperature).name]
    assert strip((out / "report.html").read_text(encoding="utf-8")) == strip(first)


_picture_from_tiff = rp.picture_from_tiff
