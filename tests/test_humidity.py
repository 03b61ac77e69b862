"""Tests for irpipe.humidity against published formulas and computed check values.

Check values are from docs/references.md §5 (computed [C]
from the cited formulas by the dossier's script, output in §A) unless noted otherwise.
"""
import numpy as np
import psychrolib
import pytest

from irpipe import humidity
from irpipe.constants import ZERO_CELSIUS

K = ZERO_CELSIUS


@pytest.mark.parametrize("formula, t_c, e_hpa", [
    # Alduchov & Eskridge 1996 eq. 21 (AERK); values computed in docs/references.md §5 [C]
    ("aerk", 0.0, 6.1094), ("aerk", 20.0, 23.3344), ("aerk", 35.0, 56.1757),
    # Buck 1981 eq. 3; values computed in docs/references.md §5 [C]
    ("buck1981", 0.0, 6.1121), ("buck1981", 20.0, 23.3728), ("buck1981", 35.0, 56.2591),
])
def test_saturation_vapour_pressure_over_water(formula, t_c, e_hpa):
    e = humidity.saturation_vapour_pressure(t_c + K, formula=formula)
    assert e == pytest.approx(100.0 * e_hpa, abs=0.005)  # 4 decimals in hPa


def test_iso13788_form_matches_dossier_vapour_pressure():
    # ISO 13788 form 610.5 exp(17.269 t/(237.3 + t)) Pa is from memory;
    # p_v(20 °C, 60 %) = 1402.2 Pa computed with it in docs/references.md §A [C]
    p = humidity.vapour_pressure(20.0 + K, 0.6, formula="magnus-iso13788")
    assert p == pytest.approx(1402.2, abs=0.05)
    # docs/references.md §6: AERK and the ISO form agree within 0.005 K in theta_si,min [C];
    # here only check that the two forms are within 0.2 % at 20 °C (from the values above)
    aerk = humidity.saturation_vapour_pressure(20.0 + K)
    iso = humidity.saturation_vapour_pressure(20.0 + K, formula="magnus-iso13788")
    assert iso == pytest.approx(aerk, rel=2e-3)


@pytest.mark.parametrize("t_c, rh, td_c, rho_g, tol", [
    # tol is half a unit of the printed last digit
    (20.0, 0.5, 9.2611, 8.6235, 5e-5),  # docs/references.md §5, AERK [C] (dossier script output: 9.2611 C, 8.6235 g m-3)
    (20.0, 0.8, 16.444, 13.798, 5e-4),  # docs/references.md §5, AERK [C]
    (0.0, 0.9, -1.444, 4.362, 5e-4),    # docs/references.md §5, AERK [C]
    (35.0, 0.3, 14.847, 11.850, 5e-4),  # docs/references.md §5, AERK [C]
    (21.0, 0.6, 12.940, 10.969, 5e-4),  # docs/references.md §A, AERK [C]
])
def test_dew_point_and_absolute_humidity_aerk(t_c, rh, td_c, rho_g, tol):
    t = t_c + K
    assert humidity.dew_point(t, rh) - K == pytest.approx(td_c, abs=tol)
    # The dossier computed rho_v with R_v = R/M_w = 461.523 J kg-1 K-1 (the dossier's script, docs/references.md §A);
    # the module uses 461.52, 7e-6 relative lower, i.e. +6e-5 g m-3 at 8.6 g m-3: allow 1e-4.
    assert 1e3 * humidity.absolute_humidity(t, rh) == pytest.approx(rho_g, abs=max(tol, 1e-4))


def test_dew_point_other_formulas():
    t = 20.0 + K
    # Buck 1981, Td(20 °C, 50 %) = 9.2671 °C, docs/references.md §5 [C]
    assert humidity.dew_point(t, 0.5, formula="buck1981") - K == pytest.approx(9.2671, abs=5e-5)
    # ISO 13788 form [M], Td(20 °C, 60 %) = 12.004 °C, docs/references.md §A [C]
    assert humidity.dew_point(t, 0.6, formula="magnus-iso13788") - K == pytest.approx(12.004, abs=5e-4)


def test_dew_point_from_vapour_pressure():
    # AERK dew point for e = 10 hPa is 6.9903 °C, docs/references.md §5 [C]
    assert humidity.dew_point_from_vapour_pressure(1000.0) - K == pytest.approx(6.9903, abs=5e-5)
    # e <= 0 has no dew point (definition; common practice, no source)
    assert np.isnan(humidity.dew_point_from_vapour_pressure(0.0))


def test_dew_point_round_trip_and_saturation_identities():
    # Definitions (WMO-No. 8 relative humidity, from memory): at the dew point the surface RH is 1,
    # at the air temperature it equals the air RH.
    t = np.array([[273.15, 293.15], [303.15, 288.15]])
    rh = np.array([[0.9, 0.5], [0.3, 0.75]])
    td = humidity.dew_point(t, rh)
    assert td.shape == t.shape
    np.testing.assert_allclose(humidity.surface_relative_humidity(td, t, rh), 1.0, rtol=1e-12)
    np.testing.assert_allclose(humidity.surface_relative_humidity(t, t, rh), rh, rtol=1e-12)
    # RH = 1: dew point equals air temperature (definition)
    np.testing.assert_allclose(humidity.dew_point(t, 1.0), t, atol=1e-9)


def test_surface_relative_humidity_iso13788_case():
    # docs/references.md §6 [C]: theta_i = 20 °C, 60 % -> theta_si,min = 15.434 °C at phi_si = 0.8 (AERK)
    phi = humidity.surface_relative_humidity(15.434 + K, 20.0 + K, 0.6)
    assert phi == pytest.approx(0.8, abs=2e-4)   # 0.001 K rounding of 15.434 °C


def test_ice_phase():
    # Over ice the saturation pressure is below that over supercooled water (textbook
    # thermodynamics, from memory; the two curves meet at the triple point).
    t = np.array([-20.0, -10.0, -1.0]) + K
    assert np.all(humidity.saturation_vapour_pressure(t, phase="ice")
                  < humidity.saturation_vapour_pressure(t, phase="water"))
    # Outside value: Hyland-Wexler over ice (ASHRAE Handbook Fundamentals 2017 ch. 1, eq. 5,
    # via psychrolib) at 0 and -20 degC; AERK's ice fit is within 0.15 % of it (see
    # test_saturation_vapour_pressure_against_hyland_wexler)
    for t_c in (0.0, -20.0):
        assert humidity.saturation_vapour_pressure(t_c + K, phase="ice") == pytest.approx(
            _hw(t_c), rel=1.5e-3)
    # "auto" picks ice below 0 °C and water above (definition of the option)
    auto = humidity.saturation_vapour_pressure(np.array([-5.0, 5.0]) + K, phase="auto")
    assert auto[0] == humidity.saturation_vapour_pressure(-5.0 + K, phase="ice")
    assert auto[1] == humidity.saturation_vapour_pressure(5.0 + K, phase="water")
    # frost point lies above the dew point for the same vapour pressure (from memory)
    e = humidity.vapour_pressure(-5.0 + K, 0.8)
    assert (humidity.dew_point_from_vapour_pressure(e, phase="ice")
            > humidity.dew_point_from_vapour_pressure(e, phase="water"))


# --- against an independent reference library -------------------------------------------
# psychrolib 2.5 (PyPI; test dependency only) implements ASHRAE Handbook Fundamentals 2017
# ch. 1: saturation pressure by Hyland & Wexler (1983), eq. 5 over ice below the triple point
# (0.01 degC), eq. 6 over liquid water above it; dew/frost point by iterative inversion of the
# same (to 0.001 K). The Magnus fits in irpipe.humidity are approximations of such
# formulations, so the tolerances below are the largest difference between the two
# formulations over the range, measured on a 0.25 K grid and rounded up (numbers beside them).

psychrolib.SetUnitSystem(psychrolib.SI)


def _hw(t_c):
    """Hyland-Wexler saturation pressure [Pa] (ice below 0.01 degC), psychrolib."""
    return psychrolib.GetSatVapPres(float(t_c))


@pytest.mark.parametrize("formula, phase, lo_c, hi_c, rel", [
    ("aerk", "water", 0.02, 50.0, 2.5e-3),              # measured max 0.236 % (24 degC)
    ("buck1981", "water", 0.02, 50.0, 2.0e-3),          # measured max 0.153 % (50 degC)
    ("magnus-iso13788", "water", 0.02, 50.0, 2.0e-3),   # measured max 0.177 % (46 degC)
    ("aerk", "ice", -60.0, -0.01, 1.5e-3),              # measured max 0.132 % (-23.5 degC)
    ("buck1981", "ice", -60.0, -0.01, 1.5e-3),          # measured max 0.106 % (-60 degC)
])
def test_saturation_vapour_pressure_against_hyland_wexler(formula, phase, lo_c, hi_c, rel):
    t_c = np.arange(lo_c, hi_c, 0.25)
    ref = np.array([_hw(t) for t in t_c])
    got = humidity.saturation_vapour_pressure(t_c + K, formula=formula, phase=phase)
    np.testing.assert_allclose(got, ref, rtol=rel)


@pytest.mark.parametrize("t_c, rh", [(20.0, 0.5), (20.0, 0.8), (21.0, 0.6), (35.0, 0.3), (30.0, 0.9),
                                     (5.0, 0.95), (2.0, 0.9)])
def test_dew_point_against_hyland_wexler(t_c, rh):
    # above freezing, with the dew point above 0.01 degC so both sides use liquid water.
    # The relative difference of e_s (< 0.24 %, above) shifts T_d by at most
    # 0.0024 / (d ln e_s / dT ~ 0.06 K-1) = 0.04 K
    ref = psychrolib.GetTDewPointFromRelHum(t_c, rh)
    assert ref > 0.01
    assert humidity.dew_point(t_c + K, rh) - K == pytest.approx(ref, abs=0.04)


@pytest.mark.parametrize("t_c, rh_ice", [(-2.0, 0.9), (-5.0, 0.8), (-15.0, 0.7), (-25.0, 0.6),
                                         (-35.0, 0.8)])
def test_frost_point_against_hyland_wexler(t_c, rh_ice):
    # psychrolib's RH below freezing is over ice, irpipe's over water, so compare through the
    # vapour pressure: e = RH_ice e_i(T) (Hyland-Wexler), then the frost point of e. AERK's ice
    # fit is within 0.14 % of Hyland-Wexler, and d ln e_i / dT ~ 0.08-0.1 K-1: within 0.02 K.
    e = rh_ice * _hw(t_c)
    ref = psychrolib.GetTDewPointFromVapPres(t_c, e)
    assert humidity.dew_point_from_vapour_pressure(e, phase="ice") - K == pytest.approx(ref, abs=0.02)
    # "auto" gives the frost point below 0 degC, as the reference does
    assert humidity.dew_point_from_vapour_pressure(e, phase="auto") - K == pytest.approx(ref, abs=0.02)


def test_nan_propagates_and_shapes_are_kept():
    # Project rule: invalid pixels are NaN and stay NaN (common practice, no source)
    t = np.array([293.15, np.nan])
    e = humidity.saturation_vapour_pressure(t)
    assert np.isfinite(e[0]) and np.isnan(e[1])
    assert np.isnan(humidity.dew_point(293.15, np.nan))


def test_errors_say_what_to_fix():
    with pytest.raises(ValueError, match="did you pass degrees Celsius"):
        humidity.saturation_vapour_pressure(20.0)
    with pytest.raises(ValueError, match="did you pass percent"):
        humidity.vapour_pressure(293.15, 50.0)
    with pytest.raises(ValueError, match="formula='magnus' is not known"):
        humidity.saturation_vapour_pressure(293.15, formula="magnus")
    with pytest.raises(ValueError, match="phase='solid' is not known"):
        humidity.saturation_vapour_pressure(293.15, phase="solid")
