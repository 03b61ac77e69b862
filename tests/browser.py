"""One selenium harness for the browser tests: Debian's chromium driven by its
chromedriver (packages ``chromium`` and ``chromium-driver``, installed by ``.ci/run``).

``browser()`` gives a headless Chrome WebDriver; without chromium/chromedriver or selenium
the tests are skipped, except when the environment variable CI is set: there they fail,
so that a CI image without the browser cannot pass silently.
"""
from __future__ import annotations

import os
import shutil

import pytest

CHROMIUM = ("/usr/bin/chromium", "chromium")
CHROMEDRIVER = ("/usr/bin/chromedriver", "chromedriver")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--disable-dev-shm-usage"]


def _find(cands):
    for c in cands:
        p = c if os.path.isabs(c) else shutil.which(c)
        if p and os.path.isfile(p) and os.access(p, os.X_OK):
            return p
    return None


def _missing(msg):
    if os.environ.get("CI"):
        pytest.fail(msg + " -- required when CI is set")
    pytest.skip(msg)


def chromium():
    """Path of the Chromium executable; skips the test (fails it under CI) without one."""
    exe = _find(CHROMIUM)
    if not exe:
        _missing("headless Chromium not found (/usr/bin/chromium or 'chromium' on PATH); install the chromium package")
    return exe


def browser(width=1200, height=900):
    """A headless Chromium WebDriver with a fixed window (the caller quits it)."""
    exe = chromium()
    driver_exe = _find(CHROMEDRIVER)
    if not driver_exe:
        _missing("chromedriver not found; install the chromium-driver package")
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        _missing("selenium is not installed; pip install -e '.[test]'")
    opts = webdriver.ChromeOptions()
    opts.binary_location = exe
    for f in FLAGS + [f"--window-size={width},{height}"]:
        opts.add_argument(f)
    return webdriver.Chrome(service=Service(driver_exe), options=opts)


@pytest.fixture
def driver():
    d = browser()
    try:
        yield d
    finally:
        d.quit()


def wait_ready(driver, timeout=60):
    """Wait for ``window.irpipe.ready``; returns the page's own time from navigation start
    to ready [ms] (performance.now())."""
    driver.set_script_timeout(timeout)
    return driver.execute_async_script(
        "var done = arguments[arguments.length - 1];"
        "window.irpipe.ready.then(function () { done(performance.now()); }, function (e) { done('error: ' + e.message); });")
