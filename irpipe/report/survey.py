"""report.json's survey document: the survey header, survey-wide warnings and the cautions
around the stacks' entries (``build_report``). Pure: takes the validated config and the
stacks' report entries, writes nothing."""
from __future__ import annotations

import datetime as _dt

from .. import __version__
from ..constants import ZERO_CELSIUS

REPORT_SCHEMA = "irpipe.report/1"


def now_utc():
    """Creation time stamp of reports and manifests (ISO 8601, UTC, seconds)."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


CAUTIONS = [
    "Findings on electrical equipment are indications for a licensed electrician to assess and repair; "
    "do not open, touch or load energised equipment on the strength of this report.",
    "Structural, moisture, mould and safety findings must be assessed by a qualified professional before "
    "any decision or repair.",
    "Local building codes, electrical regulations and licensed professional practice prevail over this report.",
    "Temperatures are surface temperatures inferred from infrared radiation. They depend on the emissivity, "
    "reflected temperature and path conditions stated for each stack; where these are uncertain (shiny "
    "metal, glazing, low emissivity, oblique views, sun or wind before the survey) the figures can be wrong "
    "by several kelvin or more.",
    "Thermography shows surface temperature patterns, not their cause: missing insulation, air leakage, "
    "moisture and thermal bridges can look alike and need confirmation by other means.",
]


def build_report(cfg, stacks: list) -> dict:
    """The report.json document for a survey config and its stacks' entries."""
    survey = dict(cfg.data.get("survey", {}))
    warnings = []
    if "indoor_air_c" in survey and "outdoor_air_c" in survey:
        from ..findings import survey_condition_warnings
        from ..humidity import dew_point
        warnings += survey_condition_warnings(survey["indoor_air_c"], survey["outdoor_air_c"])
        if survey.get("indoor_relative_humidity_pct") is not None:
            td = dew_point(survey["indoor_air_c"] + ZERO_CELSIUS, survey["indoor_relative_humidity_pct"] / 100.0)
            survey["indoor_dew_point_c"] = round(float(td) - ZERO_CELSIUS, 3)
        survey["indoor_outdoor_difference_k"] = survey["indoor_air_c"] - survey["outdoor_air_c"]
    for st in stacks:
        warnings += [f"{st['name']}: {w}" for w in st.get("warnings", [])]
    return {"schema": REPORT_SCHEMA, "software": {"name": "irpipe", "version": __version__},
            "created_utc": now_utc(), "config": cfg.path.name, "survey": survey,
            "warnings": warnings, "cautions": list(CAUTIONS) + _heat_flow_cautions(stacks), "stacks": stacks}


def _heat_flow_cautions(stacks):
    """The energy assessor's caution, only when a stack has heat-flow results."""
    if not any(st.get("heat_flow") for st in stacks):
        return []
    from ..heatflow import ENERGY_CAUTION
    return [ENERGY_CAUTION]


