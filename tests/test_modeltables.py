"""Shared tables of the measurement model (irpipe.modeltables).

The requirement is exactness: a model built from the kept tables must equal, bit for bit,
the one built by evaluating Planck's law afresh (``modeltables.disabled()``, the
arithmetic before the caches existed). Equality here is array_equal, no tolerance
(common practice for a cache, no source).
"""
import numpy as np
import pytest

from irpipe import modeltables, radiometry
from irpipe.atmosphere import spectral_transmittance
from irpipe.correction import CameraModel, MeasurementModel
from irpipe.radiometry import SpectralResponse

T_RANGE = (213.15, 923.15)
TABLE_ARRAYS = ("_t_nodes", "_y_nodes", "_x", "_dx", "_x32", "_dx32")


@pytest.fixture(autouse=True)
def fresh_cache():
    modeltables.clear()
    yield
    modeltables.clear()


def _same_tables(a, b):
    for table in ("signal_table", "path_table"):
        ta, tb = getattr(a, table), getattr(b, table)
        for name in TABLE_ARRAYS:
            assert np.array_equal(getattr(ta, name), getattr(tb, name)), (table, name)
        assert (ta.y0, ta.y1, ta.dy, ta.s_min, ta.s_max) == (tb.y0, tb.y1, tb.dy, tb.s_min, tb.s_max)


def _cameras():
    band = SpectralResponse.rectangular(7.5e-6, 14e-6)
    wl = np.linspace(7.6e-6, 13.8e-6, 40)
    tab = SpectralResponse.tabulated(wl, np.exp(-((wl - 10e-6) / 2.5e-6) ** 2), description="gaussian")
    # Sakuma-Hattori coefficients of an 8-14 um camera (invented, plausible magnitudes)
    return {"band": CameraModel(band), "tabulated": CameraModel(tab),
            "sakuma-hattori": CameraModel(band, "sakuma-hattori", (10.2e-6, 60e-6, 2.0e6))}


@pytest.mark.parametrize("which", ["band", "tabulated", "sakuma-hattori"])
def test_cached_models_equal_uncached_bit_for_bit(which):
    cam = _cameras()[which]
    lam = cam.response.wavelength
    paths = [spectral_transmittance(lam, d, 288.15, 0.7) for d in (3.0, 25.0, 3.0)] + [1.0, 0.93]
    rng = np.random.default_rng(7)
    for tau in paths:
        cached = MeasurementModel(cam, tau, T_RANGE)
        with modeltables.disabled():
            fresh = MeasurementModel(cam, tau, T_RANGE)
        _same_tables(cached, fresh)
        s = cached.received_signal(rng.uniform(250.0, 400.0, 500), 0.9, 280.0, 288.15)
        assert np.array_equal(cached.object_temperature(s, 0.9, 280.0, 288.15),
                              fresh.object_temperature(s, 0.9, 280.0, 288.15))
        assert np.array_equal(cached.object_temperature(s, 0.9, 280.0, 288.15, dtype=np.float32),
                              fresh.object_temperature(s, 0.9, 280.0, 288.15, dtype=np.float32))


def test_equal_conditions_share_tables_and_new_path_needs_no_planck(monkeypatch):
    cam = _cameras()["band"]
    lam = cam.response.wavelength
    first = MeasurementModel(cam, spectral_transmittance(lam, 10.0, 290.0, 0.5), T_RANGE)
    calls = []
    planck = radiometry.planck_radiance
    monkeypatch.setattr(radiometry, "planck_radiance", lambda *a: calls.append(a) or planck(*a))
    again = MeasurementModel(cam, spectral_transmittance(lam, 10.0, 290.0, 0.5), T_RANGE)
    assert again.path_table is first.path_table and again.signal_table is first.signal_table
    other = MeasurementModel(cam, spectral_transmittance(lam, 40.0, 290.0, 0.5), T_RANGE)
    assert calls == []                       # a new path is a weighted sum, no Planck evaluation
    assert other.path_table is not first.path_table
    assert other.signal_table is first.signal_table    # S(T) does not depend on the path
    # a response object of equal content hits the same tables (keys are contents)
    twin = CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6))
    assert MeasurementModel(twin, other.tau, T_RANGE).path_table is other.path_table
    info = modeltables.cache_info()
    assert info["planck_tables"] == 1 and info["planck_misses"] == 1 and info["path_hits"] == 2


def test_caches_are_bounded(monkeypatch):
    cam = _cameras()["band"]
    lam = cam.response.wavelength
    monkeypatch.setattr(modeltables, "MAX_PATH_TABLES", 3)
    for d in (1.0, 2.0, 3.0, 4.0, 5.0):
        MeasurementModel(cam, spectral_transmittance(lam, d, 290.0, 0.5), T_RANGE)
    assert modeltables.cache_info()["path_tables"] == 3
    # a Planck table larger than the budget is not kept, and the model is unchanged
    # (the exact reference, coarse_path=False, uses Planck's law on every node)
    table_bytes = modeltables.cache_info()["planck_bytes"]
    assert 0 < table_bytes < 10 * 2**20                  # the coarse nodes only: a few MB
    modeltables.clear()
    MeasurementModel(cam, spectral_transmittance(lam, 6.0, 290.0, 0.5), T_RANGE, coarse_path=False)
    table_bytes = max(t.nbytes for t in modeltables._planck.values())
    modeltables.clear()
    monkeypatch.setattr(modeltables, "PLANCK_CACHE_BYTES", table_bytes - 1)
    tau = spectral_transmittance(lam, 7.0, 290.0, 0.5)
    small = MeasurementModel(cam, tau, T_RANGE, coarse_path=False)
    assert all(t.nbytes < table_bytes for t in modeltables._planck.values())
    with modeltables.disabled():
        _same_tables(small, MeasurementModel(cam, tau, T_RANGE, coarse_path=False))
    # two ranges within the budget of one: the least recently used goes
    monkeypatch.setattr(modeltables, "PLANCK_CACHE_BYTES", table_bytes)
    modeltables.clear()
    MeasurementModel(cam, tau, T_RANGE, coarse_path=False)
    MeasurementModel(cam, tau, (223.15, 773.15), coarse_path=False)
    info = modeltables.cache_info()
    assert info["planck_bytes"] <= table_bytes


def test_planck_table_of_another_response_is_refused():
    a = SpectralResponse.rectangular(8e-6, 12e-6)
    b = SpectralResponse.rectangular(8e-6, 13e-6)
    t = np.linspace(250.0, 350.0, 11)
    pt = a.planck_table(t)
    assert np.array_equal(a.band_radiance(pt), a.band_radiance(t))
    with pytest.raises(ValueError, match="Planck table belongs to another spectral response"):
        b.band_radiance(pt)


@pytest.mark.parametrize("kind", ["band", "tabulated", "sakuma-hattori"])
def test_coarse_path_tables_follow_the_exact_ones(kind):
    """Path tables take the band transmittance on every 16th node, interpolated in 1/T:
    G(T) within 1e-7 relative of the exact table over the whole range even on a 60 m path
    at 80 % RH (within 3e-8 up to 30 m), and the temperature a signal inverts to within
    3 uK (60 m) and 1 uK (up to 30 m) at 0..130 C, far below the 1 mK to which corrected temperatures are
    compared and the camera's NETD (tens of mK; common practice, no source)."""
    cam = _cameras()[kind]
    for d, t_air, rh, rel, dt in ((60.0, 303.15, 0.8, 1e-7, 3e-6), (30.0, 298.15, 0.95, 3e-8, 1e-6),
                                  (3.0, 288.15, 0.5, 3e-8, 1e-6)):
        tau = spectral_transmittance(cam.response.wavelength, d, t_air, rh, 101325.0)
        exact = MeasurementModel(cam, tau, T_RANGE, coarse_path=False)
        coarse = MeasurementModel(cam, tau, T_RANGE)
        t = exact.path_table._t_nodes
        g_exact, g_coarse = exact.path_table.forward_fast(t), coarse.path_table.forward_fast(t)
        assert np.max(np.abs(g_coarse / g_exact - 1.0)) < rel, d
        assert np.array_equal(exact.signal_table._x, coarse.signal_table._x)
        s = exact.path_signal(np.linspace(273.15, 403.15, 31))
        assert np.max(np.abs(coarse.path_table.inverse(s) - exact.path_table.inverse(s))) < dt, d
