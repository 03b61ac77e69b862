"""Building-envelope findings: temperature factor, ISO 13788 minimum temperature
factor, surface humidity / dew point (mould and condensation) checks, and
survey-condition warnings.

Pure functions, no file I/O. Temperatures at this edge carry their unit in the
name (``_c`` degrees Celsius, ``_k`` kelvin difference, ``_pct`` percent), as the
findings are reported in those units.
"""
import math

import numpy as np

from .. import humidity
from ..constants import ZERO_CELSIUS
from ..defaults import CRITICAL_TEMPERATURE_FACTORS as _CRITICAL_BY_USE
from ._common import _out

__all__ = [
    "CRITICAL_TEMPERATURE_FACTORS",
    "MOULD_SURFACE_RH",
    "MIN_SURVEY_DIFFERENCE_K",
    "temperature_factor",
    "minimum_temperature_factor",
    "envelope_assessment",
    "survey_condition_warnings",
]

#: Critical temperature factor f_CRsi by building use, UK practice (BRE IP1/06,
#: Ward 2006; conventions in BR 497; from memory): the table of
#: ``irpipe.defaults.CRITICAL_TEMPERATURE_FACTORS``, keyed here with underscores
#: ("sports_hall") where the config spells "sports-hall".
CRITICAL_TEMPERATURE_FACTORS = {k.replace("-", "_"): v for k, v in _CRITICAL_BY_USE.items()}

#: Surface relative humidity at or above which mould growth is assumed possible
#: [fraction] (ISO 13788:2012 criterion; clause from memory).
MOULD_SURFACE_RH = 0.8

#: Indoor-outdoor air temperature difference below which an envelope survey is
#: normally not carried out [K] (EN 13187:1998 / EN ISO 6781-1:2023 practice;
#: common practice, no clause checked).
MIN_SURVEY_DIFFERENCE_K = 10.0


def temperature_factor(surface_c, indoor_c, outdoor_c):
    """Temperature factor at the internal surface, f_Rsi.

    Parameters
    ----------
    surface_c : array_like
        Internal surface temperature theta_si [degC].
    indoor_c : array_like
        Indoor air temperature theta_i [degC].
    outdoor_c : array_like
        Outdoor air temperature theta_e [degC].

    Returns
    -------
    float or ndarray
        f_Rsi [-]; 1 for a surface at indoor temperature, 0 at outdoor
        temperature. NaN where theta_i == theta_e or an input is NaN.

    Notes
    -----
    ::

        f_Rsi = (theta_si - theta_e) / (theta_i - theta_e)

    as defined in ISO 13788 [1] and ISO 10211 [2] (clauses from memory). The
    measured value is only meaningful under steady conditions; see
    :func:`survey_condition_warnings`.

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    """
    s = np.asarray(surface_c, dtype=float)
    i = np.asarray(indoor_c, dtype=float)
    e = np.asarray(outdoor_c, dtype=float)
    d = i - e
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(d != 0.0, (s - e) / np.where(d != 0.0, d, 1.0), np.nan)  # [1]
    return _out(f)



def _rh_pct_to_fraction(indoor_rh_pct):
    rh = np.asarray(indoor_rh_pct, dtype=float)
    finite = rh[np.isfinite(rh)]
    if finite.size and (finite.min() < 0.0 or finite.max() > 100.0):
        raise ValueError(f"indoor_rh_pct: {finite.max():g} is not in [0, 100] percent")
    if finite.size and 0.0 < finite.max() <= 1.0:
        raise ValueError(
            f"indoor_rh_pct: {finite.max():g} looks like a fraction; this argument is in "
            f"percent -- did you mean {100 * finite.max():g}?")
    return rh / 100.0


def minimum_temperature_factor(indoor_c, indoor_rh_pct, outdoor_c, surface_rh_limit=MOULD_SURFACE_RH,
                               formula="aerk"):
    """Lowest internal surface temperature and temperature factor that keep the
    surface relative humidity below a limit (ISO 13788 procedure).

    Parameters
    ----------
    indoor_c : array_like
        Indoor air temperature theta_i [degC].
    indoor_rh_pct : array_like
        Indoor relative humidity [%].
    outdoor_c : array_like
        Outdoor air temperature theta_e [degC].
    surface_rh_limit : float, optional
        Critical surface relative humidity [fraction]; 0.8 for mould (default),
        1.0 for condensation on low-inertia elements such as glazing [1].
    formula : str, optional
        Saturation formula, see :func:`irpipe.humidity.saturation_vapour_pressure`.

    Returns
    -------
    theta_si_min_c : float or ndarray
        Minimum acceptable surface temperature [degC].
    f_min : float or ndarray
        Minimum temperature factor f_Rsi,min [-].

    Notes
    -----
    ::

        p_i          = phi_i p_sat(theta_i)
        p_sat,min    = p_i / phi_si,crit
        theta_si,min = p_sat^-1(p_sat,min)
        f_Rsi,min    = (theta_si,min - theta_e) / (theta_i - theta_e)

    (procedure of ISO 13788 [1]; clause from memory). Check values: theta_i =
    20 degC, 60 %, theta_e = 0 degC gives theta_si,min = 15.43 degC and
    f_Rsi,min = 0.7717.

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    """
    if not 0.0 < surface_rh_limit <= 1.0:
        raise ValueError(f"surface_rh_limit: {surface_rh_limit!r} is not in (0, 1]; it is a fraction, "
                         f"e.g. 0.8")
    t_i = np.asarray(indoor_c, dtype=float) + ZERO_CELSIUS
    p_i = humidity.vapour_pressure(t_i, _rh_pct_to_fraction(indoor_rh_pct), formula)
    p_sat_min = p_i / surface_rh_limit                                           # [1]
    theta_si_min_c = humidity.dew_point_from_vapour_pressure(p_sat_min, formula) - ZERO_CELSIUS
    f_min = temperature_factor(theta_si_min_c, indoor_c, outdoor_c)              # [1]
    return _out(theta_si_min_c), f_min



def _critical_factor(critical_factor):
    if isinstance(critical_factor, str):
        try:
            return CRITICAL_TEMPERATURE_FACTORS[critical_factor]
        except KeyError:
            raise ValueError(
                f"critical_factor={critical_factor!r} is not a known building use; use one of "
                f"{sorted(CRITICAL_TEMPERATURE_FACTORS)} or a number in (0, 1)") from None
    value = float(critical_factor)
    if not 0.0 < value < 1.0:
        raise ValueError(f"critical_factor: {critical_factor!r} is not in (0, 1)")
    return value


def envelope_assessment(min_surface_c, indoor_c, outdoor_c, indoor_rh_pct=None, critical_factor=0.75,
                        formula="aerk"):
    """Assess the coldest internal surface temperature of an area of the envelope.

    Parameters
    ----------
    min_surface_c : array_like
        Lowest internal surface temperature of the area (e.g. a thermal bridge)
        [degC]; an array assesses several areas at once.
    indoor_c, outdoor_c : array_like
        Indoor and outdoor air temperatures [degC].
    indoor_rh_pct : array_like, optional
        Indoor relative humidity [%]. Without it the humidity results are None.
    critical_factor : float or str, optional
        Critical temperature factor f_CRsi [-], or a key of
        ``CRITICAL_TEMPERATURE_FACTORS`` (building use). Default 0.75, the UK
        value for dwellings [3] (from memory, corroborated by practice pages).
    formula : str, optional
        Saturation formula, see :func:`irpipe.humidity.saturation_vapour_pressure`.

    Returns
    -------
    dict
        ``temperature_factor`` f_Rsi [-]; ``critical_temperature_factor`` [-];
        ``passes`` (f_Rsi >= f_CRsi); ``surface_relative_humidity_pct`` [%];
        ``mould_risk`` (surface RH >= 80 % [1]); ``condensation_risk`` (surface
        at or below the indoor dew point); ``indoor_dew_point_c`` [degC];
        ``minimum_surface_temperature_c`` [degC] and ``minimum_temperature_factor``
        [-] from :func:`minimum_temperature_factor`. The last five are None when
        ``indoor_rh_pct`` is None. Flags are False where an input is NaN (the
        factor is then NaN, which shows it).

    Notes
    -----
    ::

        f_Rsi  = (theta_si - theta_e) / (theta_i - theta_e)          [1], [2]
        phi_si = phi_i p_sat(theta_i) / p_sat(theta_si)               [1]
        mould risk:        phi_si >= 0.8                              [1]
        condensation risk: theta_si <= theta_d(theta_i, phi_i)

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    .. [3] T. I. Ward, "Assessing the effects of thermal bridging at junctions
       and around openings", BRE Information Paper IP1/06, BRE Press, 2006.
    """
    f = np.asarray(temperature_factor(min_surface_c, indoor_c, outdoor_c))
    f_crit = _critical_factor(critical_factor)
    result = {
        "temperature_factor": _out(f),
        "critical_temperature_factor": f_crit,
        "passes": _out(f >= f_crit),
        "surface_relative_humidity_pct": None,
        "mould_risk": None,
        "condensation_risk": None,
        "indoor_dew_point_c": None,
        "minimum_surface_temperature_c": None,
        "minimum_temperature_factor": None,
    }
    if indoor_rh_pct is None:
        return result
    rh = _rh_pct_to_fraction(indoor_rh_pct)
    t_s = np.asarray(min_surface_c, dtype=float) + ZERO_CELSIUS
    t_i = np.asarray(indoor_c, dtype=float) + ZERO_CELSIUS
    phi_si = humidity.surface_relative_humidity(t_s, t_i, rh, formula)
    dew_c = humidity.dew_point(t_i, rh, formula) - ZERO_CELSIUS
    theta_min, f_min = minimum_temperature_factor(indoor_c, indoor_rh_pct, outdoor_c, formula=formula)
    result.update(
        surface_relative_humidity_pct=_out(100.0 * phi_si),
        mould_risk=_out(phi_si >= MOULD_SURFACE_RH),
        condensation_risk=_out(t_s - ZERO_CELSIUS <= dew_c),
        indoor_dew_point_c=_out(dew_c),
        minimum_surface_temperature_c=theta_min,
        minimum_temperature_factor=f_min,
    )
    return result



def survey_condition_warnings(indoor_c, outdoor_c, min_difference_k=MIN_SURVEY_DIFFERENCE_K):
    """Warnings about air temperatures unfit for an envelope survey.

    Parameters
    ----------
    indoor_c, outdoor_c : float
        Indoor and outdoor air temperatures during the survey [degC].
    min_difference_k : float, optional
        Minimum indoor-outdoor difference [K]; 10 K by default.

    Returns
    -------
    list of str
        Empty when the difference is sufficient.

    Notes
    -----
    Envelope surveys normally require theta_i - theta_e >= 10 K, during and for
    about 24 h before the survey [1], [2] (common practice; the numeric
    condition is not checked against the standards' clauses). A measurement
    error u on theta_si moves the temperature factor by u / (theta_i - theta_e).
    Sun, wind, rain and the stability of both temperatures must also be checked
    by the surveyor; they are not inputs here.

    References
    ----------
    .. [1] EN 13187:1998, Thermal performance of buildings -- Qualitative
       detection of thermal irregularities in building envelopes -- Infrared
       method (ISO 6781:1983 modified).
    .. [2] EN ISO 6781-1:2023, Performance of buildings -- Detection of heat, air
       and moisture irregularities in buildings by infrared methods -- Part 1:
       General procedures (title from memory).
    """
    i, e = float(indoor_c), float(outdoor_c)
    if not (math.isfinite(i) and math.isfinite(e)):
        return [f"indoor ({i:g} degC) or outdoor ({e:g} degC) air temperature is unknown; "
                "survey conditions and temperature factors cannot be checked"]
    d = i - e
    if d <= 0.0:
        return [f"indoor air ({i:g} degC) is not warmer than outdoor air ({e:g} degC): heat flows "
                "inwards, so cold-surface findings, temperature factors and the mould check do not apply"]
    if d < min_difference_k:
        return [f"indoor-outdoor difference is {d:.1f} K, below the {min_difference_k:g} K that "
                "envelope surveys normally require (EN 13187 / EN ISO 6781-1 practice): thermal "
                "irregularities may not show, and a 1 K error in surface temperature changes the "
                f"temperature factor by {1.0 / d:.2f}"]
    return []
