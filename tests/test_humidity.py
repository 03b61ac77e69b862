"""Tests for irpipe.humidity against published formulas and computed check values.

Check values are from the project dossier REFERENCES.md section 5 (computed [C]
from the cited formulas with refdata/check_values.py) unless noted otherwise.
"""
import numpy as np
import pytest

from irpipe import humidity
from irpipe.constants import ZERO_CELSIUS

K = ZERO_CELSIUS


@pytest.mark.parametrize("formula, t_c, e_hpa", [
    # Alduchov & Eskridge 1996 eq. 21 (AERK); values computed in REFERENCES.md §5 [C]
    ("aerk", 0.0, 6.1094), ("aerk", 20.0, 23.3344), ("aerk", 35.0, 56.1757),
    # Buck 1981 eq. 3; values computed in REFERENCES.md §5 [C]
    ("buck1981", 0.0, 6.1121), ("buck1981", 20.0, 23.3728), ("buck1981", 35.0, 56.2591),
])
def test_saturation_vapour_pressure_over_water(formula, t_c, e_hpa):
    e = humidity.saturation_vapour_pressure(t_c + K, formula=formula)
    assert e == pytest.approx(100.0 * e_hpa, abs=0.005)  # 4 decimals in hPa


def test_iso13788_form_matches_dossier_vapour_pressure():
    # ISO 13788 form 610.5 exp(17.269 t/(237.3 + t)) Pa is from memory;
    # p_v(20 °C, 60 %) = 1402.2 Pa computed with it in refdata/check_values_output.txt [C]
    p = humidity.vapour_pressure(20.0 + K, 0.6, formula="magnus-iso13788")
    assert p == pytest.approx(1402.2, abs=0.05)
    # REFERENCES.md §6: AERK and the ISO form agree within 0.005 K in theta_si,min [C];
    # here only check that the two forms are within 0.2 % at 20 °C (from the values above)
    aerk = humidity.saturation_vapour_pressure(20.0 + K)
    iso = humidity.saturation_vapour_pressure(20.0 + K, formula="magnus-iso13788")
    assert iso == pytest.approx(aerk, rel=2e-3)


@pytest.mark.parametrize("t_c, rh, td_c, rho_g, tol", [
    # tol is half a unit of the printed last digit
    (20.0, 0.5, 9.2611, 8.6235, 5e-5),  # REFERENCES.md §5, AERK [C] (refdata output: 9.2611 C, 8.6235 g m-3)
    (20.0, 0.8, 16.444, 13.798, 5e-4),  # REFERENCES.md §5, AERK [C]
    (0.0, 0.9, -1.444, 4.362, 5e-4),    # REFERENCES.md §5, AERK [C]
    (35.0, 0.3, 14.847, 11.850, 5e-4),  # REFERENCES.md §5, AERK [C]
    (21.0, 0.6, 12.940, 10.969, 5e-4),  # refdata/check_values_output.txt, AERK [C]
])
def test_dew_point_and_absolute_humidity_aerk(t_c, rh, td_c, rho_g, tol):
    t = t_c + K
    assert humidity.dew_point(t, rh) - K == pytest.approx(td_c, abs=tol)
    # The dossier computed rho_v with R_v = R/M_w = 461.523 J kg-1 K-1 (refdata/check_values.py);
    # the module uses 461.52, 7e-6 relative lower, i.e. +6e-5 g m-3 at 8.6 g m-3: allow 1e-4.
    assert 1e3 * humidity.absolute_humidity(t, rh) == pytest.approx(rho_g, abs=max(tol, 1e-4))


def test_dew_point_other_formulas():
    t = 20.0 + K
    # Buck 1981, Td(20 °C, 50 %) = 9.2671 °C, REFERENCES.md §5 [C]
    assert humidity.dew_point(t, 0.5, formula="buck1981") - K == pytest.approx(9.2671, abs=5e-5)
    # ISO 13788 form [M], Td(20 °C, 60 %) = 12.004 °C, refdata/check_values_output.txt [C]
    assert humidity.dew_point(t, 0.6, formula="magnus-iso13788") - K == pytest.approx(12.004, abs=5e-4)


def test_dew_point_from_vapour_pressure():
    # AERK dew point for e = 10 hPa is 6.9903 °C, REFERENCES.md §5 / refdata output [C]
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
    # REFERENCES.md §6 [C]: theta_i = 20 °C, 60 % -> theta_si,min = 15.434 °C at phi_si = 0.8 (AERK)
    phi = humidity.surface_relative_humidity(15.434 + K, 20.0 + K, 0.6)
    assert phi == pytest.approx(0.8, abs=2e-4)   # 0.001 K rounding of 15.434 °C


def test_ice_phase():
    # From memory: over ice the saturation pressure is below that over supercooled water
    # (textbook thermodynamics); AERK ice form A = 611.21 Pa at 0 °C (from memory).
    t = np.array([-20.0, -10.0, -1.0]) + K
    assert np.all(humidity.saturation_vapour_pressure(t, phase="ice")
                  < humidity.saturation_vapour_pressure(t, phase="water"))
    assert humidity.saturation_vapour_pressure(K, phase="ice") == pytest.approx(611.21, abs=1e-9)
    # "auto" picks ice below 0 °C and water above (definition of the option)
    auto = humidity.saturation_vapour_pressure(np.array([-5.0, 5.0]) + K, phase="auto")
    assert auto[0] == humidity.saturation_vapour_pressure(-5.0 + K, phase="ice")
    assert auto[1] == humidity.saturation_vapour_pressure(5.0 + K, phase="water")
    # frost point lies above the dew point for the same vapour pressure (from memory)
    e = humidity.vapour_pressure(-5.0 + K, 0.8)
    assert (humidity.dew_point_from_vapour_pressure(e, phase="ice")
            > humidity.dew_point_from_vapour_pressure(e, phase="water"))


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
