"""Planck's law, band radiance and the inverse tables, against published values."""
import numpy as np
import pytest
from scipy import constants as sc

from irpipe import constants
from irpipe.radiometry import MonotoneTable, SpectralResponse, planck_radiance, wien_peak_wavelength


def test_constants_match_codata():
    # CODATA 2018 exact SI values (Tiesinga et al., Rev. Mod. Phys. 93, 025010, 2021);
    # scipy.constants carries CODATA 2022, identical for these.
    assert constants.H == sc.h and constants.C == sc.c and constants.K_B == sc.k
    assert constants.C2 == pytest.approx(1.438776877e-2, rel=1e-9)        # CODATA 2018 c2
    assert constants.C1L == pytest.approx(1.191042972e-16, rel=1e-9)      # CODATA 2018 c1L
    assert constants.SIGMA == pytest.approx(sc.Stefan_Boltzmann, rel=1e-12)  # CODATA sigma


@pytest.mark.parametrize("lam_um, t, expected", [
    # Planck spectral radiance [W m-2 sr-1 um-1] computed from CODATA 2018 constants
    # (docs/references.md §1, [C] values; rounded to 7 digits)
    (10.0, 300.0, 9.924033), (10.0, 273.15, 6.174355), (8.0, 300.0, 9.078357),
    (14.0, 300.0, 7.445671), (10.0, 373.15, 25.74419),
])
def test_planck_values(lam_um, t, expected):
    assert planck_radiance(lam_um * 1e-6, t) * 1e-6 == pytest.approx(expected, rel=1e-6)


@pytest.mark.parametrize("t", [200.0, 300.0, 600.0, 1000.0])
def test_stefan_boltzmann_total(t):
    # integral of L over 0.5-1000 um -> sigma T^4 / pi (Stefan-Boltzmann law, CODATA sigma).
    # The band misses the tails: below 0.5 um (negligible) and beyond 1000 um, where the
    # Rayleigh-Jeans fraction (15/pi^4)(x^3/3), x = c2/(lambda T), is 5.7e-6 at 300 K.
    band = SpectralResponse.rectangular(0.5e-6, 1000e-6)
    x = constants.C2 / (1000e-6 * t)
    tail = 15 / np.pi**4 * x**3 / 3
    expected = sc.Stefan_Boltzmann * t**4 / np.pi * (1 - tail)
    assert band.band_radiance(t) == pytest.approx(expected, rel=2e-6)


def test_wien_peak():
    # Wien displacement, b = 2.897771955e-3 m K (CODATA 2018)
    assert wien_peak_wavelength(300.0) == pytest.approx(9.659240e-6, rel=1e-6)   # docs/references.md §1 [C]
    assert wien_peak_wavelength(5800.0) == pytest.approx(0.499616e-6, rel=1e-5)
    assert constants.C2 / (wien_peak_wavelength(1.0)) == pytest.approx(4.965114232, rel=1e-9)
    # and it really is the maximum of planck_radiance
    lam = np.linspace(9.0e-6, 10.4e-6, 140001)
    assert lam[np.argmax(planck_radiance(lam, 300.0))] == pytest.approx(9.659240e-6, abs=2e-11)


@pytest.mark.parametrize("band, t, fraction", [
    # blackbody fraction F(lambda1..lambda2) (docs/references.md §1, series and quadrature agree to 1e-6)
    ((8e-6, 14e-6), 273.15, 0.349851), ((8e-6, 14e-6), 300.0, 0.375742), ((8e-6, 14e-6), 373.15, 0.390860),
    ((7.5e-6, 14e-6), 300.0, 0.405689), ((8e-6, 12e-6), 300.0, 0.263341), ((3e-6, 5e-6), 300.0, 0.012763),
])
def test_band_fraction(band, t, fraction):
    r = SpectralResponse.rectangular(*band)
    assert np.pi * r.band_radiance(t) / (constants.SIGMA * t**4) == pytest.approx(fraction, abs=1.5e-6)


def test_band_radiance_value():
    # 8-14 um band radiance at 300 K: 54.9335 W m-2 sr-1 (docs/references.md §1, [C])
    assert SpectralResponse.rectangular(8e-6, 14e-6).band_radiance(300.0) == pytest.approx(54.9335, abs=1e-4)


def test_tabulated_response_rectangular_equivalent():
    # a tabulated boxcar equals the rectangular band (internal consistency)
    wl = np.array([8.0, 14.0]) * 1e-6
    r = SpectralResponse.tabulated(wl, [1.0, 1.0])
    assert r.band_radiance(300.0) == pytest.approx(54.9335, abs=1e-4)


def test_inverse_table_accuracy_against_root_finder():
    # Brief: inverse from band radiance to temperature over -50..+600 C with numerical
    # error under 1 mK against a float64 root-finder (scipy brentq).
    r = SpectralResponse.rectangular(7.5e-6, 14e-6)
    tab = MonotoneTable(r.band_radiance, 213.15, 923.15)
    rng = np.random.default_rng(1)
    t = rng.uniform(223.15, 873.15, 400)
    s = r.band_radiance(t)
    ref = tab.inverse_exact(s)
    # root finder recovers truth: within 3e-7 K, the float32 rounding of the spectral
    # radiances before the float64 band sum (radiometry._planck_blocks: ~1e-9 relative)
    assert np.max(np.abs(ref - t)) < 3e-7
    assert np.max(np.abs(tab.inverse(s) - ref)) < 1e-3          # < 1 mK, float64
    assert np.max(np.abs(tab.inverse(s.astype(np.float32), dtype=np.float32) - ref)) < 1e-3  # float32
    # out of range and non-physical signals give NaN, not a number
    assert np.isnan(tab.inverse(np.array([-1.0, 0.0, tab.s_max * 2]))).all()


def test_inverse_grid_matches_the_closed_form_inverse_of_planck():
    """The table's inverse grid (1/T at uniform ln S, by local cubic Hermite interpolation of
    the dense nodes) against the closed-form inverse of Planck's law at one wavelength,
    T = c2 / (lambda ln(1 + c1 / (lambda^5 L))) (Planck 1901; constants CODATA via
    scipy.constants), over -60..650 C: within 1e-9 K."""
    lam = 10e-6
    c1, c2 = 2 * sc.h * sc.c ** 2, sc.h * sc.c / sc.k
    tab = MonotoneTable(lambda t: planck_radiance(lam, t), 213.15, 923.15)
    y = tab.y0 + tab.dy * np.arange(tab.n)
    exact = c2 / (lam * np.log1p(c1 / (lam ** 5 * np.exp(y))))
    assert np.max(np.abs(1.0 / tab._x - exact)) < 1e-9


def test_inverse_monotonic():
    # invariant: temperature is strictly increasing in the signal
    r = SpectralResponse.rectangular(8e-6, 14e-6)
    tab = MonotoneTable(r.band_radiance, 213.15, 923.15)
    s = np.linspace(tab.s_min * 1.0001, tab.s_max * 0.9999, 100001)
    assert np.all(np.diff(tab.inverse(s)) > 0)


def test_weighted_transmittance_against_quadrature():
    # tau_eff(T) = int tau L dlambda / int L dlambda over 8-12 um, with Planck's law written
    # here from CODATA constants (scipy.constants) and scipy's adaptive quadrature; the
    # trapezoid sum on the 5 nm grid agrees within 1e-7 (common practice, no source)
    from scipy.integrate import quad

    def planck_um(lam_um, t):
        lam = lam_um * 1e-6
        return 2 * sc.h * sc.c**2 / lam**5 / np.expm1(sc.h * sc.c / (lam * sc.k * t))

    def tau(lam_um):
        return 0.95 - 0.02 * (lam_um - 8.0)

    r = SpectralResponse.rectangular(8e-6, 12e-6)
    for t in (250.0, 300.0, 500.0):
        num = quad(lambda x: tau(x) * planck_um(x, t), 8.0, 12.0, epsabs=0, epsrel=1e-12)[0]
        den = quad(planck_um, 8.0, 12.0, args=(t,), epsabs=0, epsrel=1e-12)[0]
        assert r.weighted_transmittance(tau(r.wavelength * 1e6), t) == pytest.approx(num / den, abs=1e-7)
    # several paths and temperatures at once; a flat 0.7 stays 0.7 (common practice, no source)
    paths = np.stack([tau(r.wavelength * 1e6), np.full(r.wavelength.size, 0.7)])
    out = r.weighted_transmittance(paths, np.array([250.0, 300.0, 500.0]))
    assert out.shape == (2, 3)
    np.testing.assert_allclose(out[1], 0.7, rtol=0, atol=1e-15)
