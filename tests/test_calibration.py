"""Sakuma-Hattori equation, linear calibration fits, NUC and bad-pixel filling."""
import numpy as np
import pytest

from irpipe.calibration import (BadPixelFiller, fit_linear, fit_sakuma_hattori, sakuma_hattori_derivative,
                                sakuma_hattori_signal, sakuma_hattori_temperature, two_point_nuc)
from irpipe.radiometry import SpectralResponse


def test_sakuma_hattori_round_trip():
    # docs/references.md §2 [C]: A = 9 um, B = 600 um K, C = 1e7: S(300 K) = 1.29447071e5
    a, b, c = 9e-6, 600e-6, 1e7
    assert sakuma_hattori_signal(300.0, a, b, c) == pytest.approx(1.29447071e5, rel=1e-8)
    assert sakuma_hattori_signal(273.15, a, b, c) == pytest.approx(9.13789228e4, rel=1e-8)
    t = np.linspace(220.0, 900.0, 1000)
    assert np.max(np.abs(sakuma_hattori_temperature(sakuma_hattori_signal(t, a, b, c), a, b, c) - t)) < 1e-9


def test_scene_side_sakuma_hattori_matches_the_dossier():
    # the equation the end-to-end scenes use (tests/forward_model.py, written apart from irpipe)
    # reproduces docs/references.md §2 [C]: A = 9 um, B = 600 um K, C = 1e7 -> S(300 K) = 1.29447071e5
    from forward_model import sakuma_hattori
    assert sakuma_hattori(300.0, 9e-6, 600e-6, 1e7) == pytest.approx(1.29447071e5, rel=1e-8)


def test_sakuma_hattori_derivative():
    # closed-form dS/dT (CCT-WG5 2008 / Wikipedia "Sakuma-Hattori equation") vs central difference
    a, b, c = 9.3e-6, 180e-6, 7e3
    t = np.array([250.0, 300.0, 500.0])
    h = 1e-3
    num = (sakuma_hattori_signal(t + h, a, b, c) - sakuma_hattori_signal(t - h, a, b, c)) / (2 * h)
    assert sakuma_hattori_derivative(t, a, b, c) == pytest.approx(num, rel=1e-7)


def test_sakuma_hattori_fit_to_band_model():
    # docs/references.md §2 [C]: rectangular 8-14 um band radiance fitted over 253-423 K gives
    # A = 9.33470 um, B = 178.930 um K, C = 6818.648 W m-2 sr-1, max |T_fit - T| = 2.0 mK
    r = SpectralResponse.rectangular(8e-6, 14e-6)
    t = np.linspace(253.0, 423.0, 35)
    a, b, c = fit_sakuma_hattori(t, r.band_radiance(t), a0=9e-6, b0=100e-6)
    assert a * 1e6 == pytest.approx(9.33470, abs=2e-3)
    assert b * 1e6 == pytest.approx(178.930, rel=5e-3)
    assert c == pytest.approx(6818.648, rel=5e-3)
    err = sakuma_hattori_temperature(r.band_radiance(t), a, b, c) - t
    assert np.max(np.abs(err)) < 3e-3    # our fit weights residuals in kelvin, not signal: 2.5 mK


def test_linear_fit_recovers_gain():
    l = np.array([20.0, 40.0, 80.0])
    g, o = fit_linear(l, 300.0 * l + 1000.0)
    assert (g, o) == pytest.approx((300.0, 1000.0))


def test_two_point_nuc_equalises():
    rng = np.random.default_rng(3)
    gain = rng.normal(1, 0.05, (8, 9))
    off = rng.normal(0, 30, (8, 9))
    lo, hi = 5000 * gain + off, 9000 * gain + off
    g, o = two_point_nuc(lo, hi, 5000, 9000)
    scene = 7000 * gain + off
    assert np.allclose(g * scene + o, 7000)


def test_bad_pixel_filler_clusters():
    mask = np.zeros((10, 10), bool)
    mask[4:7, 4:7] = True          # 3x3 cluster needs the second ring
    mask[0, 0] = True
    f = np.tile(np.arange(100, dtype=np.uint16).reshape(10, 10), (2, 1, 1))
    f[:, mask] = 65535
    out = BadPixelFiller(mask).fill(f.copy())
    assert out.max() < 100
    # a linear ramp is reproduced at the centre by symmetric neighbours
    assert out[0, 5, 5] == 55
