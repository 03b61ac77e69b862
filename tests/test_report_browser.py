"""The demo survey's report.html as a browser shows it: rendered by headless Chromium to a
PNG screenshot, which must not be blank, and a checker that notices a missing picture.

The browser comes from the selenium harness ``tests/browser.py`` (Debian ``chromium`` and
``chromium-driver``). Without it the tests are skipped, except when the environment variable
CI is set: there they fail, so that a CI image without the browser cannot pass silently.

Thresholds on the screenshot are from looking at the rendered demo (1200 x 3000 window):
the page is mostly white with dark text, and the temperature picture (colour map
inferno) is the large saturated area; text and table rules are grey (common practice for
screenshot smoke tests: compare coverage, not pixels).
"""
from __future__ import annotations

import base64
import io
import re

import numpy as np
import pytest

from test_report import PNG_SIGNATURE, demo_run

from browser import browser, chromium  # noqa: F401  (the one selenium harness; chromium() skips/fails)

WINDOW = (1200, 3000)


def screenshot(exe, html_path, work):
    """Render ``html_path`` at 1200 x 3000 CSS pixels into a PNG; returns (H, W, 3) floats in [0, 1]."""
    import matplotlib.image as mpimg

    work.mkdir(parents=True, exist_ok=True)
    png = work / "shot.png"
    drv = browser(*WINDOW)
    try:
        drv.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                            {"width": WINDOW[0], "height": WINDOW[1], "deviceScaleFactor": 1, "mobile": False})
        drv.get(html_path.as_uri())
        drv.save_screenshot(str(png))
    finally:
        drv.quit()
    a = mpimg.imread(png)
    assert a.shape[:2] == (3000, 1200)
    return a[..., :3]


def coverage(a):
    """(distinct colours, fraction of non-white pixels, fraction of saturated pixels)."""
    u8 = np.round(a * 255).astype(np.uint8)
    flat = u8.reshape(-1, 3).astype(np.int64)
    distinct = np.unique(flat[:, 0] << 16 | flat[:, 1] << 8 | flat[:, 2]).size
    nonwhite = float(np.mean((u8 < 245).any(axis=-1)))
    saturated = float(np.mean((u8.max(-1).astype(int) - u8.min(-1)) > 60))
    return distinct, nonwhite, saturated


def image_problems(html_text):
    """Why any <img> of the page would not show: list of texts, empty when all decode as PNG."""
    import matplotlib.image as mpimg

    problems = []
    tags = re.findall(r"<img\b[^>]*>", html_text)
    for k, tag in enumerate(tags):
        m = re.search(r'\bsrc="([^"]*)"', tag)
        src = m.group(1) if m else ""
        if not src.startswith("data:image/png;base64,"):
            problems.append(f"img {k}: src is not an embedded PNG ({src[:40]!r})")
            continue
        try:
            data = base64.b64decode(src.split(",", 1)[1], validate=True)
            if not data.startswith(PNG_SIGNATURE):
                raise ValueError("no PNG signature")
            shape = mpimg.imread(io.BytesIO(data), format="png").shape
            if min(shape[:2]) < 50:
                raise ValueError(f"only {shape[1]}x{shape[0]} pixels")
        except Exception as exc:          # any decoding failure is a missing picture
            problems.append(f"img {k}: {exc}")
    return problems, len(tags)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return demo_run(tmp_path_factory.mktemp("demo"))


def first_stack_page(text):
    """A copy of the page with only its first stack section (its picture then lies within
    the 3000-pixel window whatever the length of the summary)."""
    head = text[:text.index("<main>") + len("<main>")]
    m = re.search(r'<section class="stack" id="stack-1">.*?</section>', text, re.S)
    assert m, "no first stack section"
    return head + m.group(0) + "</main></body></html>\n"


def test_demo_report_renders_and_is_not_blank(demo, tmp_path):
    exe = chromium()
    _, _, out = demo
    text = (out / "report.html").read_text(encoding="utf-8")
    problems, n = image_problems(text)
    assert n >= 4 and problems == []
    distinct, nonwhite, saturated = coverage(screenshot(exe, out / "report.html", tmp_path / "full"))
    # a blank or unstyled page has a handful of colours; the report has text, tables and
    # the first stack's picture in the window
    assert distinct > 500, distinct
    assert 0.05 < nonwhite < 0.9, nonwhite
    assert saturated > 0.02, saturated


@pytest.mark.parametrize("damage", ["corrupt", "remove"])
def test_a_missing_picture_is_detected(demo, tmp_path, damage):
    exe = chromium()
    _, _, out = demo
    page = first_stack_page((out / "report.html").read_text(encoding="utf-8"))
    good = tmp_path / "good.html"
    good.write_text(page, encoding="utf-8")
    first = re.search(r"<img\b[^>]*>", page)
    if damage == "corrupt":
        tag = re.sub(r'src="data:image/png;base64,[^"]*"', 'src="data:image/png;base64,iVBORw0KGgoAAAAN"',
                     first.group(0))
    else:
        tag = ""
    bad = tmp_path / "bad.html"
    bad.write_text(page[:first.start()] + tag + page[first.end():], encoding="utf-8")

    good_problems, n_good = image_problems(page)
    bad_problems, n_bad = image_problems(bad.read_text(encoding="utf-8"))
    assert good_problems == [] and n_good >= 2
    if damage == "corrupt":
        assert len(bad_problems) == 1 and "img 0" in bad_problems[0]
    else:
        assert bad_problems == [] and n_bad == n_good - 1   # the count of pictures shows it

    _, _, sat_good = coverage(screenshot(exe, good, tmp_path / "good"))
    _, _, sat_bad = coverage(screenshot(exe, bad, tmp_path / "bad"))
    # the temperature picture is most of the saturated area; without it at most half remains
    assert sat_good > 0.05, sat_good
    assert sat_bad < 0.5 * sat_good, (sat_good, sat_bad)
