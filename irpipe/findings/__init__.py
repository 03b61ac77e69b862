"""Findings from corrected surface-temperature stacks, one module per topic.

* :mod:`.envelope`: temperature factor, ISO 13788 minimum temperature factor,
  surface humidity / dew point (mould, condensation), survey-condition warnings.
* :mod:`.spots`: hot and cold spots from a running extreme image
  (:class:`ExtremesState`) while a stack is streamed.
* :mod:`.electrical`: grading of temperature rises against a severity table
  (``configs/electrical_severity.yaml``), load scaling.

Every public name is re-exported here, so ``from irpipe.findings import X`` and
``irpipe.findings.X`` keep working.
"""
from .electrical import (MIN_LOAD_FRACTION, SeverityBand, SeverityTable, grade_electrical,
                         load_scaled_rise, load_severity_table)
from .envelope import (CRITICAL_TEMPERATURE_FACTORS, MIN_SURVEY_DIFFERENCE_K, MOULD_SURFACE_RH,
                       envelope_assessment, minimum_temperature_factor, survey_condition_warnings,
                       temperature_factor)
from .spots import ExtremesState, find_spots, update_extremes

__all__ = [
    "CRITICAL_TEMPERATURE_FACTORS",
    "MOULD_SURFACE_RH",
    "MIN_SURVEY_DIFFERENCE_K",
    "MIN_LOAD_FRACTION",
    "temperature_factor",
    "minimum_temperature_factor",
    "envelope_assessment",
    "survey_condition_warnings",
    "ExtremesState",
    "update_extremes",
    "find_spots",
    "SeverityBand",
    "SeverityTable",
    "load_severity_table",
    "grade_electrical",
    "load_scaled_rise",
]
