"""Moist-air quantities for surface-condensation and mould assessment.

Pure, vectorised numpy functions. Temperatures are in kelvin, relative humidity
is a fraction in [0, 1], pressures in pascal and densities in kg m-3 (SI inside).

All saturation formulas here have the Magnus form

    e_s(t) = A exp(b t / (c + t)),    t = T - 273.15 K,

so the inverse (dew point, frost point) is closed-form. The coefficients
(A, b, c) for water and for ice are kept in ``SATURATION_FORMULAS`` with their
sources.
"""
import numpy as np

from .constants import ZERO_CELSIUS

__all__ = [
    "R_V",
    "SATURATION_FORMULAS",
    "saturation_vapour_pressure",
    "vapour_pressure",
    "dew_point",
    "dew_point_from_vapour_pressure",
    "absolute_humidity",
    "surface_relative_humidity",
]

#: Specific gas constant of water vapour [J kg-1 K-1]; 461.52 is the value used
#: in the meteorological literature (e.g. WMO-No. 8) -- given from memory.
R_V = 461.52

#: Magnus coefficients (A [Pa], b [-], c [degC]) by formula and phase.
SATURATION_FORMULAS = {
    # Alduchov & Eskridge (1996), water: their recommended "AERK" fit, eq. 21.
    # Ice: their "AEKR" fit, eq. 23 -- ice coefficients given from memory.
    "aerk": {"water": (610.94, 17.625, 243.04), "ice": (611.21, 22.587, 273.86)},
    # ISO 13788:2012, Annex (saturation pressure used in the standard's method);
    # both forms given from memory.
    "magnus-iso13788": {"water": (610.5, 17.269, 237.3), "ice": (610.5, 21.875, 265.5)},
    # Buck (1981), eq. 3 over water; the ice form is from the same paper, from memory.
    "buck1981": {"water": (611.21, 17.502, 240.97), "ice": (611.15, 22.452, 272.55)},
}

_PHASES = ("water", "ice", "auto")


def _coefficients(formula, phase):
    try:
        table = SATURATION_FORMULAS[formula]
    except KeyError:
        raise ValueError(
            f"formula={formula!r} is not known; use one of {sorted(SATURATION_FORMULAS)}"
        ) from None
    if phase not in _PHASES:
        raise ValueError(f"phase={phase!r} is not known; use one of {list(_PHASES)}")
    return table


def _as_kelvin(temperature, name):
    t = np.asarray(temperature, dtype=float)
    finite = t[np.isfinite(t)]
    if finite.size and finite.min() < 100.0:
        raise ValueError(
            f"{name}: {finite.min():g} K is below 100 K; temperatures here are in kelvin "
            f"-- did you pass degrees Celsius? Add {ZERO_CELSIUS} K."
        )
    return t


def _as_fraction(relative_humidity, name="relative_humidity"):
    rh = np.asarray(relative_humidity, dtype=float)
    finite = rh[np.isfinite(rh)]
    if finite.size and (finite.min() < 0.0 or finite.max() > 1.0):
        raise ValueError(
            f"{name}: values must be a fraction in [0, 1], got range "
            f"[{finite.min():g}, {finite.max():g}]; did you pass percent? Divide by 100."
        )
    return rh


def _magnus(t_c, coeffs):
    a, b, c = coeffs
    return a * np.exp(b * t_c / (c + t_c))


def _magnus_inverse(e, coeffs):
    a, b, c = coeffs
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.log(e / a)
        return c * g / (b - g)


def saturation_vapour_pressure(temperature, formula="aerk", phase="water"):
    """Saturation vapour pressure of pure water vapour over a plane surface.

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    formula : {"aerk", "magnus-iso13788", "buck1981"}, optional
        Coefficient set; default the Alduchov & Eskridge (1996) fit.
    phase : {"water", "ice", "auto"}, optional
        Saturation over liquid water (default, also supercooled), over ice, or
        over ice below 0 degC and over water above.

    Returns
    -------
    ndarray
        Saturation vapour pressure e_s [Pa]. NaN where the temperature is NaN.

    Notes
    -----
    Magnus form, t = T - 273.15 K::

        e_s = A exp(b t / (c + t))

    Over water: AERK A = 610.94 Pa, b = 17.625, c = 243.04 degC (eq. 21 of [1]);
    ISO 13788 A = 610.5 Pa, b = 17.269, c = 237.3 degC [3] (from memory);
    Buck A = 611.21 Pa, b = 17.502, c = 240.97 degC (eq. 3 of [2]).
    Over ice (all from memory): AERK 611.21 Pa, 22.587, 273.86 degC [1];
    ISO 13788 610.5 Pa, 21.875, 265.5 degC [3]; Buck 611.15 Pa, 22.452,
    272.55 degC [2]. No enhancement factor is applied (moist air at 1 atm
    holds about 0.4 % more, see [2]).

    References
    ----------
    .. [1] O. A. Alduchov and R. E. Eskridge, "Improved Magnus form approximation
       of saturation vapor pressure", J. Appl. Meteorol. 35(4), 601-609, 1996,
       doi:10.1175/1520-0450(1996)035<0601:IMFAOS>2.0.CO;2
    .. [2] A. L. Buck, "New equations for computing vapor pressure and
       enhancement factor", J. Appl. Meteorol. 20(12), 1527-1532, 1981,
       doi:10.1175/1520-0450(1981)020<1527:NEFCVP>2.0.CO;2
    .. [3] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    """
    table = _coefficients(formula, phase)
    t_c = _as_kelvin(temperature, "temperature") - ZERO_CELSIUS
    if phase == "auto":
        return np.where(t_c < 0.0, _magnus(t_c, table["ice"]), _magnus(t_c, table["water"]))
    return _magnus(t_c, table[phase])  # Eq. 21 of [1] (water)


def vapour_pressure(temperature, relative_humidity, formula="aerk", phase="water"):
    """Partial pressure of water vapour in air of known relative humidity.

    Parameters
    ----------
    temperature : array_like
        Air temperature [K].
    relative_humidity : array_like
        Relative humidity with respect to water [fraction, 0-1].
    formula, phase : str, optional
        See :func:`saturation_vapour_pressure`.

    Returns
    -------
    ndarray
        Vapour pressure e [Pa].

    Notes
    -----
    e = RH e_s(T), the WMO definition of relative humidity [1].

    References
    ----------
    .. [1] WMO, Guide to Instruments and Methods of Observation (WMO-No. 8),
       Annex 4.B, World Meteorological Organization, 2008 (edition from memory).
    """
    rh = _as_fraction(relative_humidity)
    return rh * saturation_vapour_pressure(temperature, formula, phase)


def dew_point_from_vapour_pressure(vapour_pressure, formula="aerk", phase="water"):
    """Temperature at which the given vapour pressure is the saturation pressure.

    Parameters
    ----------
    vapour_pressure : array_like
        Water vapour partial pressure e [Pa], > 0.
    formula : str, optional
        See :func:`saturation_vapour_pressure`; use the same one as the forward
        computation so that the round trip is exact.
    phase : {"water", "ice", "auto"}, optional
        "water" gives the dew point, "ice" the frost point, "auto" the frost
        point where the result is below 0 degC.

    Returns
    -------
    ndarray
        Dew (or frost) point temperature [K]; NaN for e <= 0 or NaN.

    Notes
    -----
    Inverse of the Magnus form [1]::

        g = ln(e / A),   t_d = c g / (b - g)

    References
    ----------
    .. [1] O. A. Alduchov and R. E. Eskridge, "Improved Magnus form approximation
       of saturation vapor pressure", J. Appl. Meteorol. 35(4), 601-609, 1996,
       doi:10.1175/1520-0450(1996)035<0601:IMFAOS>2.0.CO;2
    """
    table = _coefficients(formula, phase)
    e = np.asarray(vapour_pressure, dtype=float)
    e = np.where(e > 0.0, e, np.nan)
    if phase == "auto":
        td_w = _magnus_inverse(e, table["water"])
        td_c = np.where(td_w < 0.0, _magnus_inverse(e, table["ice"]), td_w)
    else:
        td_c = _magnus_inverse(e, table[phase])
    return td_c + ZERO_CELSIUS


def dew_point(temperature, relative_humidity, formula="aerk", phase="water"):
    """Dew point temperature of air of known temperature and relative humidity.

    Parameters
    ----------
    temperature : array_like
        Air temperature [K].
    relative_humidity : array_like
        Relative humidity with respect to water [fraction, 0-1]; 0 gives NaN.
    formula, phase : str, optional
        See :func:`dew_point_from_vapour_pressure`.

    Returns
    -------
    ndarray
        Dew point T_d [K].

    Notes
    -----
    Magnus inverse with t = T - 273.15 K [1]::

        g = ln(RH) + b t / (c + t),   t_d = c g / (b - g)

    which equals ``dew_point_from_vapour_pressure(RH e_s(T))``.

    References
    ----------
    .. [1] O. A. Alduchov and R. E. Eskridge, "Improved Magnus form approximation
       of saturation vapor pressure", J. Appl. Meteorol. 35(4), 601-609, 1996,
       doi:10.1175/1520-0450(1996)035<0601:IMFAOS>2.0.CO;2
    """
    e = vapour_pressure(temperature, relative_humidity, formula, "water")
    return dew_point_from_vapour_pressure(e, formula, phase)


def absolute_humidity(temperature, relative_humidity, formula="aerk"):
    """Mass concentration of water vapour in air.

    Parameters
    ----------
    temperature : array_like
        Air temperature [K].
    relative_humidity : array_like
        Relative humidity with respect to water [fraction, 0-1].
    formula : str, optional
        See :func:`saturation_vapour_pressure`.

    Returns
    -------
    ndarray
        Absolute humidity rho_v [kg m-3].

    Notes
    -----
    Ideal-gas law for the vapour [1]::

        rho_v = e / (R_v T),   R_v = 461.52 J kg-1 K-1

    References
    ----------
    .. [1] WMO, Guide to Instruments and Methods of Observation (WMO-No. 8),
       Annex 4.B, World Meteorological Organization, 2008 (edition from memory).
    """
    t = _as_kelvin(temperature, "temperature")
    return vapour_pressure(t, relative_humidity, formula) / (R_V * t)


def surface_relative_humidity(surface_temperature, air_temperature, air_relative_humidity,
                              formula="aerk"):
    """Relative humidity of the room air in contact with a colder (or warmer) surface.

    Parameters
    ----------
    surface_temperature : array_like
        Surface temperature theta_si [K], e.g. a corrected thermogram.
    air_temperature : array_like
        Room air temperature theta_i [K].
    air_relative_humidity : array_like
        Room air relative humidity [fraction, 0-1].
    formula : str, optional
        See :func:`saturation_vapour_pressure`.

    Returns
    -------
    ndarray
        Surface relative humidity phi_si [fraction]. Not clipped: values >= 1 mean
        the surface is at or below the dew point of the room air (condensation).

    Notes
    -----
    The vapour pressure of the room air is taken as unchanged at the surface [1]::

        phi_si = p_i / p_sat(theta_si) = RH_i p_sat(theta_i) / p_sat(theta_si)

    ISO 13788 takes phi_si >= 0.8 as the mould criterion [1] (clause from memory).

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    """
    p_i = vapour_pressure(air_temperature, air_relative_humidity, formula)
    p_sat_s = saturation_vapour_pressure(
        _as_kelvin(surface_temperature, "surface_temperature"), formula)
    return p_i / p_sat_s
