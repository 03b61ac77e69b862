"""Tests for irpipe.correction, the measurement equation: the dossier's four cases
(docs/references.md §3), its invariants, and a spectral path against the flat form."""
import numpy as np
import pytest

from forward_model import Camera
from irpipe.correction import CameraModel, MeasurementModel
from irpipe.radiometry import SpectralResponse

K0 = 273.15

# docs/references.md §3 [C]: S = ideal 8-14 um band radiance; T_app = reading with eps = tau = 1
CASES = {
    #            T_obj  eps   T_refl T_atm  tau    S_meas      T_app  [degC, -, degC, degC, -, W m-2 sr-1, degC]
    "A indoor wall": (18.0, 0.93, 21.0, 21.0, 1.000, 47.980668, 18.2129),
    "B facade at night": (2.0, 0.93, -25.0, 0.0, 0.985, 35.386362, 0.3670),
    "C painted busbar": (65.0, 0.90, 25.0, 25.0, 0.990, 88.232643, 61.1848),
    "D bright aluminium": (65.0, 0.10, 25.0, 25.0, 0.990, 57.267217, 29.6010),
}


@pytest.fixture(scope="module")
def camera_8_14():
    return CameraModel(SpectralResponse.rectangular(8e-6, 14e-6))


@pytest.mark.parametrize("case", list(CASES))
def test_dossier_cases(camera_8_14, case):
    t_obj, eps, t_refl, t_atm, tau, s_meas, t_app = CASES[case]
    m = MeasurementModel(camera_8_14, tau)
    # forward: the dossier prints S to 6 decimals; irpipe's band quadrature and the dossier's
    # differ by about 4e-6 W m-2 sr-1 (1e-7 relative)
    s = float(m.received_signal(t_obj + K0, eps, t_refl + K0, t_atm + K0))
    assert s == pytest.approx(s_meas, abs=1e-5)
    printed = np.array([s_meas])
    # apparent temperature of the printed signal, to the printed 4 decimals
    assert float(m.apparent_temperature(printed)[0]) - K0 == pytest.approx(t_app, abs=5e-5)
    # inversion of the printed signal: T_obj within the rounding of S (x 1/eps: 4e-5 K for D)
    got = float(m.object_temperature(printed, eps, t_refl + K0, t_atm + K0)[0]) - K0
    assert got == pytest.approx(t_obj, abs=5e-5)
    # round trip of irpipe's own forward signal: within 1e-6 K, as the dossier's inversion
    back = float(m.object_temperature(np.array([s]), eps, t_refl + K0, t_atm + K0)[0]) - K0
    assert back == pytest.approx(t_obj, abs=1e-6)


def test_emissivity_one_no_path_returns_apparent_temperature(camera_8_14):
    # invariant of the measurement equation (docs/references.md §3): eps = 1, tau = 1 leaves
    # S_meas = S(T_obj), whatever the reflected and air temperatures
    m = MeasurementModel(camera_8_14, 1.0)
    s = camera_8_14.signal(np.linspace(230.0, 600.0, 200))
    want = m.apparent_temperature(s)
    for t_refl, t_air in ((250.0, 300.0), (320.0, 260.0)):
        np.testing.assert_allclose(m.object_temperature(s, 1.0, t_refl, t_air), want, rtol=0, atol=1e-9)
    np.testing.assert_allclose(want, np.linspace(230.0, 600.0, 200), atol=1e-6)


def test_monotone_in_signal(camera_8_14):
    # a larger received signal means a warmer object (common practice, no source)
    m = MeasurementModel(camera_8_14, 0.97)
    s = np.linspace(20.0, 150.0, 2001)
    t = m.object_temperature(s, 0.9, 270.0, 275.0)
    assert np.all(np.isfinite(t)) and np.all(np.diff(t) > 0)


def test_flat_spectral_path_equals_flat_scalar(camera_8_14):
    # tau the same at every wavelength is the textbook flat form (docs/references.md §3)
    lam = camera_8_14.response.wavelength
    flat = MeasurementModel(camera_8_14, 0.95)
    spec = MeasurementModel(camera_8_14, np.full(lam.shape, 0.95))
    t = np.array([260.0, 300.0, 350.0])
    np.testing.assert_allclose(spec.received_signal(t, 0.9, 270.0, 280.0),
                               flat.received_signal(t, 0.9, 270.0, 280.0), rtol=1e-9)


def test_spectral_path_against_the_forward_model():
    # a grey surface behind a spectral path: irpipe's forward signal equals the spectral
    # measurement equation integrated by tests/forward_model.py (its own Planck function,
    # 1 nm grid, Simpson's rule)
    fwd = Camera(7.5, 14.0)
    tau = 0.9 + 0.08 * np.cos(fwd.lam * 1e6)                       # any smooth spectral path
    cam = CameraModel(SpectralResponse.rectangular(7.5e-6, 14e-6))
    m = MeasurementModel(cam, np.interp(cam.response.wavelength, fwd.lam, tau))
    t = np.array([265.0, 290.0, 330.0])
    want = fwd.received(t, 0.85, 262.0, 281.0, tau=tau)
    got = m.received_signal(t, 0.85, 262.0, 281.0)
    # (the two quadratures, 5 nm and 1 nm grids, differ by about 1e-7 relative)
    np.testing.assert_allclose(got, want, rtol=1e-6)
    # and the inversion recovers the object temperature from the forward model's signal
    np.testing.assert_allclose(m.object_temperature(want, 0.85, 262.0, 281.0), t, atol=1e-4)
