"""The colour tables and the float-to-index mapping (irpipe/colourtable.py)."""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from irpipe import colourtable as ct


def test_sequential_table_is_matplotlibs_inferno():
    # independent source: matplotlib's own inferno data (van der Walt & Smith, SciPy 2015), rounded to 8 bits
    import matplotlib

    want = matplotlib.colormaps["inferno"](np.linspace(0, 1, 256))[:, :3] * 255
    assert np.abs(ct.SEQUENTIAL.astype(float) - want).max() <= 0.5 + 1e-9
    assert tuple(ct.SEQUENTIAL[0]) == (0, 0, 4) and tuple(ct.SEQUENTIAL[-1]) == (252, 255, 164)   # from memory


def test_diverging_table_is_morelands_cool_warm():
    # Moreland (ISVC 2009), Table/Fig. of the cool-warm map: ends (59, 76, 192) and (180, 4, 38), from memory
    assert tuple(ct.DIVERGING[0]) == (59, 76, 192) and tuple(ct.DIVERGING[-1]) == (180, 4, 38)
    # the middle is a light neutral grey (about 221, 221, 221 in the paper, from memory)
    mid = ct.DIVERGING[127:129].astype(int)
    assert np.all(np.abs(mid - 221) <= 4)
    # blue side has more blue than red, red side the reverse
    assert np.all(ct.DIVERGING[:120, 2] > ct.DIVERGING[:120, 0])
    assert np.all(ct.DIVERGING[136:, 0] > ct.DIVERGING[136:, 2])
    lo, hi = ct.symmetric_range(np.array([-1.0, 3.0, np.nan]))
    assert (lo, hi) == (-3.0, 3.0)


def test_indices_equal_steps_and_nan_has_its_own_index():
    lo, hi, levels = -2.0, 6.0, 64
    k = np.arange(levels)
    centres = lo + (k + 0.5) * (hi - lo) / levels          # the middle of each equal step
    assert np.array_equal(ct.to_indices(centres, lo, hi, levels), k)
    idx = ct.to_indices(np.array([np.nan, np.inf, -50.0, 50.0, lo, hi]), lo, hi, levels)
    assert idx.tolist() == [ct.INVALID, ct.INVALID, 0, levels - 1, 0, levels - 1]
    pal = ct.palette(levels=levels)
    assert tuple(pal[ct.INVALID]) == ct.INVALID_RGB and tuple(pal[ct.WHITE]) == (255,) * 3
    assert tuple(pal[ct.BLACK]) == (0, 0, 0)
    assert np.array_equal(pal[0], ct.SEQUENTIAL[0]) and np.array_equal(pal[levels - 1], ct.SEQUENTIAL[255])
    with pytest.raises(ValueError, match="needs lo < hi"):
        ct.to_indices(centres, 1.0, 1.0)
    with pytest.raises(ValueError, match="levels must be in"):
        ct.palette(levels=255)
    with pytest.raises(ValueError, match="expected 'sequential' or 'diverging'"):
        ct.table("rainbow")


def test_css_gradient_runs_through_the_table():
    mid = "#%02x%02x%02x" % tuple(ct.SEQUENTIAL[128])     # entry round(255 / 2)
    assert ct.css_gradient(stops=3) == f"linear-gradient(to top, #000004 0%, {mid} 50%, #fcffa4 100%)"
    assert ct.hex_colour(5.0, 0.0, 10.0) == mid
    assert ct.hex_colour(-1.0, 0.0, 10.0) == "#000004"      # clipped to the scale


def test_no_matplotlib_at_run_time():
    code = ("import sys, irpipe.colourtable, irpipe.report.pictures, irpipe.report.png, irpipe.report.html; "
            "sys.exit(1 if 'matplotlib' in sys.modules else 0)")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0
