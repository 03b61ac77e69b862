"""Survey configuration: YAML with line numbers, a declarative schema, strict validation.

The schema below is the single source for validation, defaults, the JSON Schema printed by
``irpipe schema`` and the README's config reference. Units live in the key names (``_c``,
``_k``, ``_pct``, ``_m``, ``_um``); values are converted to SI by the consumers.
"""
from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import yaml

from .defaults import (CONFIG_TEMPERATURE_RANGE_C, CRITICAL_TEMPERATURE_FACTORS, FRAME_CHUNK,
                       MAX_REFLECTOR_EMISSIVITY, TABLE_LIMITS_C, TABLE_RANGE_C)
from .errors import ConfigError


# --- YAML with marks ------------------------------------------------------------------

class _Marks(dict):
    """Maps a key path tuple to (line, column), both 1-based."""

    def at(self, path):
        p = tuple(path)
        while p and p not in self:
            p = p[:-1]
        return self.get(p, (1, 1))


def _construct(node, path, marks, loader):
    marks[tuple(path)] = (node.start_mark.line + 1, node.start_mark.column + 1)
    if isinstance(node, yaml.MappingNode):
        out = {}
        for knode, vnode in node.value:
            key = loader.construct_object(knode, deep=True)
            if isinstance(key, (list, dict)):
                raise ConfigError(f"line {knode.start_mark.line + 1}: a mapping key must be a plain value")
            if key in out:
                raise _dup(knode, key, path)
            marks[tuple(path) + (key,)] = (knode.start_mark.line + 1, knode.start_mark.column + 1)
            out[key] = _construct(vnode, list(path) + [key], marks, loader)
            marks[tuple(path) + (key,)] = (knode.start_mark.line + 1, knode.start_mark.column + 1)
        return out
    if isinstance(node, yaml.SequenceNode):
        return [_construct(v, list(path) + [i], marks, loader) for i, v in enumerate(node.value)]
    return loader.construct_object(node, deep=True)


def _dup(knode, key, path):
    dotted = dotted_key(list(path) + [key])
    return ConfigError(f"line {knode.start_mark.line + 1}, {dotted}: key given twice; keep one")


#: libyaml's parser where PyYAML was built with it (same nodes and marks, about ten times
#: faster: a survey of 200 stacks took 0.6 s to parse in pure Python), else pure Python
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def load_yaml(text: str, filename: str = "<config>"):
    """Parse YAML text into plain Python objects plus a map of key paths to (line, col).

    Raises ConfigError with the file, line and column on a syntax error.
    """
    loader = None
    try:
        loader = _LOADER(text)
        node = loader.get_single_node()
        marks = _Marks()
        if node is None:
            return {}, marks
        try:
            data = _construct(node, [], marks, loader)
        except ConfigError as exc:
            raise ConfigError(f"{filename} {exc}") from None
        return data, marks
    except yaml.MarkedYAMLError as exc:
        m = exc.problem_mark or exc.context_mark
        where = f" line {m.line + 1} column {m.column + 1}" if m else ""
        problem = exc.problem or exc.context or "invalid YAML"
        raise ConfigError(f"{filename}{where}: YAML syntax error: {problem}; check indentation, "
                          "colons and quotes there") from None
    except yaml.YAMLError as exc:
        raise ConfigError(f"{filename}: YAML syntax error: {exc}".replace("\n", " ")) from None
    finally:
        if loader is not None:
            loader.dispose()


def dotted_key(path) -> str:
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


# --- schema ---------------------------------------------------------------------------

class Ctx:
    """Where a value sits: file name, marks and key path, for error messages."""

    def __init__(self, filename, marks, base_dir):
        self.filename, self.marks, self.base_dir = filename, marks, Path(base_dir)

    def where(self, path):
        """'file line L column C, dotted.key' for a key path."""
        line, col = self.marks.at(path)
        return f"{self.filename} line {line} column {col}, {dotted_key(path) or '(top level)'}"

    def fail(self, path, msg):
        line, col = self.marks.at(path)
        key = dotted_key(path) or "(top level)"
        raise ConfigError(f"{self.filename} line {line} column {col}, {key}: {msg}")


@dataclass
class Node:
    help: str = ""
    default: Any = None

    def json(self):
        d = {"description": self.help} if self.help else {}
        if self.default is not None:
            d["default"] = self.default
        return d


@dataclass
class Number(Node):
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    integer: bool = False
    hint_pct: bool = False      # hint "did you mean 0.93?" for values in (1, 100]

    def check(self, v, path, ctx):
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            ctx.fail(path, f"expected a number, got {v!r}")
        if not math.isfinite(v):
            ctx.fail(path, f"expected a finite number, got {v!r}")
        if self.integer and not float(v).is_integer():
            ctx.fail(path, f"expected a whole number, got {v!r}")
        bad = ((self.lo is not None and (v <= self.lo if self.lo_open else v < self.lo)) or
               (self.hi is not None and (v >= self.hi if self.hi_open else v > self.hi)))
        if bad:
            rng = f"{'(' if self.lo_open else '['}{_fmt(self.lo, '-inf')}, {_fmt(self.hi, 'inf')}{')' if self.hi_open else ']'}"
            hint = ""
            if self.hint_pct and 10 <= v <= 100:
                hint = f"; did you mean {v / 100:g}?"
            elif self.hint_pct:
                hint = "; it is a fraction, e.g. 0.93"
            ctx.fail(path, f"{v!r} is not in {rng}{hint}")
        return int(v) if self.integer else float(v)

    def json(self):
        d = super().json()
        d["type"] = "integer" if self.integer else "number"
        if self.lo is not None:
            d["exclusiveMinimum" if self.lo_open else "minimum"] = self.lo
        if self.hi is not None:
            d["exclusiveMaximum" if self.hi_open else "maximum"] = self.hi
        return d


def _fmt(x, inf):
    return inf if x is None else f"{x:g}"


def Celsius(help="", default=None, lo=CONFIG_TEMPERATURE_RANGE_C[0], hi=CONFIG_TEMPERATURE_RANGE_C[1]):
    """A temperature in degrees Celsius: above absolute zero and within a plausible range."""
    return Number(help=help, default=default, lo=lo, hi=hi)


@dataclass
class String(Node):
    choices: tuple = ()

    def check(self, v, path, ctx):
        if not isinstance(v, str) or not v.strip():
            ctx.fail(path, f"expected a non-empty text, got {v!r}")
        if self.choices and v not in self.choices:
            close = difflib.get_close_matches(str(v), self.choices, n=1)
            hint = f"; did you mean '{close[0]}'?" if close else ""
            ctx.fail(path, f"'{v}' is not one of {', '.join(self.choices)}{hint}")
        return v

    def json(self):
        d = super().json()
        d["type"] = "string"
        if self.choices:
            d["enum"] = list(self.choices)
        return d


@dataclass
class FilePath(Node):
    """A path relative to the config file; must exist (checked at validation)."""

    must_exist: bool = True

    def check(self, v, path, ctx):
        if not isinstance(v, str) or not v.strip():
            ctx.fail(path, f"expected a file path, got {v!r}")
        p = Path(v)
        p = p if p.is_absolute() else ctx.base_dir / p
        if self.must_exist:
            if not p.exists():
                ctx.fail(path, f"file '{v}' not found (looked in {p.parent}); paths are relative to the config file")
            if not p.is_file():
                ctx.fail(path, f"'{v}' is not a regular file")
        return p

    def json(self):
        d = super().json()
        d["type"] = "string"
        return d


@dataclass
class Bool(Node):
    def check(self, v, path, ctx):
        if not isinstance(v, bool):
            ctx.fail(path, f"expected true or false, got {v!r}")
        return v

    def json(self):
        return {**super().json(), "type": "boolean"}


@dataclass
class Pair(Node):
    """An ordered pair of numbers [lo, hi]."""

    item: Number = field(default_factory=Number)
    ordered: bool = True

    def check(self, v, path, ctx):
        if not isinstance(v, (list, tuple)) or len(v) != 2:
            ctx.fail(path, f"expected a pair [low, high], got {v!r}")
        a = self.item.check(v[0], list(path) + [0], ctx)
        b = self.item.check(v[1], list(path) + [1], ctx)
        if self.ordered and not a < b:
            ctx.fail(path, f"[{a:g}, {b:g}] is not in increasing order; write [{b:g}, {a:g}]")
        return (a, b)

    def json(self):
        return {**super().json(), "type": "array", "items": self.item.json(), "minItems": 2, "maxItems": 2}


@dataclass
class ListOf(Node):
    item: Any = None
    min_items: int = 0

    def check(self, v, path, ctx):
        if not isinstance(v, list):
            ctx.fail(path, f"expected a list, got {type(v).__name__}")
        if len(v) < self.min_items:
            ctx.fail(path, f"expected at least {self.min_items} item(s)")
        return [self.item.check(x, list(path) + [i], ctx) for i, x in enumerate(v)]

    def json(self):
        return {**super().json(), "type": "array", "items": self.item.json()}


@dataclass
class Mapping(Node):
    """A mapping with known keys; unknown keys are rejected with the closest valid key."""

    keys: dict = field(default_factory=dict)
    required: tuple = ()
    fill_empty: bool = False    # when absent, still present with its keys' defaults

    def check(self, v, path, ctx):
        if v is None:
            v = {}
        if not isinstance(v, dict):
            ctx.fail(path, f"expected a mapping of keys, got {v!r}")
        out = {}
        for k in v:
            if k not in self.keys:
                close = difflib.get_close_matches(str(k), list(self.keys), n=1, cutoff=0.5)
                hint = f"did you mean '{close[0]}'? " if close else ""
                ctx.fail(list(path) + [k], f"unknown key '{k}'; {hint}valid keys: {', '.join(self.keys)}")
        for k in self.required:
            if k not in v:
                ctx.fail(path, f"missing required key '{k}'")
        for k in self.required:
            if v.get(k) is None:
                ctx.fail(list(path) + [k], f"required key '{k}' has no value")
        for k, node in self.keys.items():
            if k in v and v[k] is not None:
                out[k] = node.check(v[k], list(path) + [k], ctx)
            elif node.default is not None:
                out[k] = node.default
            elif isinstance(node, Mapping) and node.fill_empty:
                out[k] = node.check({}, list(path) + [k], ctx)
        return out

    def json(self):
        d = {**super().json(), "type": "object", "additionalProperties": False,
             "properties": {k: n.json() for k, n in self.keys.items()}}
        if self.required:
            d["required"] = list(self.required)
        return d


@dataclass
class OneOf(Node):
    """The first alternative whose ``accepts`` matches the value's form validates it."""

    options: tuple = ()   # (predicate, node, description)
    expected: str = ""

    def check(self, v, path, ctx):
        for pred, node, _ in self.options:
            if pred(v):
                return node.check(v, path, ctx)
        ctx.fail(path, f"expected {self.expected}, got {v!r}")

    def json(self):
        return {**super().json(), "anyOf": [n.json() for _, n, _ in self.options]}


def _is_num(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _has(key):
    return lambda v: isinstance(v, dict) and key in v


# --- the irpipe schema ------------------------------------------------------------------

EMISSIVITY = Number(lo=0.0, hi=1.0, lo_open=True, hint_pct=True,
                    help="emissivity, a fraction in (0, 1]")

_label_value = OneOf(options=(
    (_is_num, EMISSIVITY, "emissivity"),
    (lambda v: isinstance(v, str), String(help="material name from the material library"), "material"),
), expected="an emissivity in (0, 1] or a material name")


class _LabelValues(Node):
    def check(self, v, path, ctx):
        if not isinstance(v, dict) or not v:
            ctx.fail(path, "expected a mapping {label number: emissivity or material name}")
        out = {}
        for k, val in v.items():
            try:
                lab = int(k)
            except (TypeError, ValueError):
                ctx.fail(list(path) + [k], f"label '{k}' is not a whole number")
            if lab != float(k) if not isinstance(k, str) else str(lab) != str(k).strip():
                ctx.fail(list(path) + [k], f"label '{k}' is not a whole number")
            out[lab] = _label_value.check(val, list(path) + [k], ctx)
        return out

    def json(self):
        return {"type": "object", "description": "label number -> emissivity or material name",
                "additionalProperties": _label_value.json()}


_EMISSIVITY_ONE = OneOf(options=(
    (_is_num, EMISSIVITY, "number"),
    (lambda v: isinstance(v, str), String(help="material name"), "material"),
    (_has("map"), Mapping(keys={"map": FilePath(help="float TIFF map of emissivity, same (rows, cols) as the stack")},
                          required=("map",)), "map"),
    (_has("labels"), Mapping(keys={"labels": FilePath(help="integer TIFF label image, same (rows, cols) as the stack"),
                                   "values": _LabelValues(),
                                   "default": _label_value},
                             required=("labels", "values")), "labels"),
), expected="a number in (0, 1], a material name, {map: file.tif} or {labels: file.tif, values: {...}}",
    help="surface emissivity")


class _RegionValues(Node):
    """{region name: emissivity or material name}; names are checked against the stack's regions."""

    def check(self, v, path, ctx):
        if not isinstance(v, dict) or not v:
            ctx.fail(path, "expected a mapping {region name: emissivity or material name}, e.g. "
                           "{glazing: 0.84, brick-field: brick-common}")
        return {String().check(k, list(path) + [k], ctx): _label_value.check(val, list(path) + [k], ctx)
                for k, val in v.items()}

    def json(self):
        return {"type": "object", "description": self.help, "additionalProperties": _label_value.json()}


EMISSIVITY_SPEC = OneOf(options=(
    (_has("regions"), Mapping(keys={
        "regions": _RegionValues(help="region name -> emissivity or material; a later region in the stack's "
                                      "regions list wins where regions overlap"),
        "default": _EMISSIVITY_ONE}, required=("regions", "default"),
        help="emissivity by region over a default (any emissivity form)"), "by region"),
) + _EMISSIVITY_ONE.options, expected="a number in (0, 1], a material name, {map: file.tif}, "
    "{labels: file.tif, values: {...}} or {regions: {region: value}, default: ...}", help="surface emissivity")

REFLECTED_SPEC = OneOf(options=(
    (_is_num, Celsius(lo=-120.0), "number"),
    (_has("reflector"), Mapping(keys={"reflector": String(help="region holding a diffuse reflector (ASTM E1862 reflector method)"),
                                      "reflector_emissivity": Number(lo=0, hi=1, lo_open=True, default=None,
                                                                     help="emissivity of the reflector; the reflector method assumes ~0 (0.03 for crumpled foil)")},
                                required=("reflector",)), "reflector"),
), expected="a temperature in C or {reflector: region name}",
    help="reflected temperature [C] (ASTM E1862)")

ATMOSPHERE = Mapping(keys={
    "transmittance": Number(lo=0.0, hi=1.0, lo_open=True, help="force a spectrally flat path transmittance"),
    "pressure_kpa": Number(lo=50.0, hi=110.0, help="air pressure along the path [kPa]"),
    "model": String(choices=("lowtran7-table",), help="atmosphere model"),
}, help="atmospheric path")

CONDITIONS = Mapping(keys={
    "emissivity": EMISSIVITY_SPEC,
    "reflected_temperature_c": REFLECTED_SPEC,
    "air_temperature_c": Celsius("air temperature along the path [C]", lo=-60.0, hi=60.0),
    "relative_humidity_pct": Number(lo=0.0, hi=100.0, help="relative humidity of the path air [%]"),
    "distance_m": Number(lo=0.0, hi=300.0, help="camera-to-surface distance [m]; 0 for no path"),
    "atmosphere": ATMOSPHERE,
    "view_angle_deg": Number(lo=0.0, hi=90.0, hi_open=True, help="viewing angle from the surface normal [deg]"),
    "refractive_index": Number(lo=1.0, hi=10.0, help="refractive index for the oblique-view emissivity model"),
}, help="measurement conditions; stack-level keys override these key by key")

CALIBRATION = OneOf(options=(
    (lambda v: isinstance(v, dict) and v.get("model") == "linear", Mapping(keys={
        "model": String(choices=("linear", "sakuma-hattori")),
        "gain": Number(lo=0.0, lo_open=True, help="counts per W m-2 sr-1 of band radiance"),
        "offset_counts": Number(help="counts at zero band radiance", default=0.0),
    }, required=("model", "gain")), "linear"),
    (lambda v: isinstance(v, dict) and v.get("model") == "sakuma-hattori", Mapping(keys={
        "model": String(choices=("linear", "sakuma-hattori")),
        "A_um": Number(lo=0.5, hi=30.0, help="Sakuma-Hattori A [um]"),
        "B_umK": Number(lo=-5000.0, hi=5000.0, help="Sakuma-Hattori B [um K]"),
        "C": Number(lo=0.0, lo_open=True, help="Sakuma-Hattori C [counts]"),
        "offset_counts": Number(default=0.0, help="counts at zero signal"),
    }, required=("model", "A_um", "B_umK", "C")), "sakuma-hattori"),
    (_has("file"), Mapping(keys={"file": FilePath(help="calibration YAML written by 'irpipe calibrate'")},
                           required=("file",)), "file"),
), expected="{model: linear, gain, offset_counts}, {model: sakuma-hattori, A_um, B_umK, C, offset_counts} "
            "or {file: calibration.yaml}", help="counts calibration")

CAMERA = Mapping(keys={
    "spectral_band_um": Pair(item=Number(lo=0.5, hi=30.0), default=None, help="rectangular band [lo, hi] um"),
    "spectral_response": FilePath(help="CSV with columns wavelength_um, response"),
    "input": String(choices=("counts", "apparent_temperature"), default="counts"),
    "calibration": CALIBRATION,
    "raw_scale": Number(lo=0.0, lo_open=True, default=None, help="apparent_temperature input: kelvin per raw unit"),
    "raw_offset": Number(default=None, help="apparent_temperature input: kelvin at raw 0"),
    "saturation": Number(help="raw value at or above which a pixel is saturated (default: dtype maximum)"),
    "gain_map": FilePath(help="per-pixel NUC gain TIFF (corrected = gain*raw + offset)"),
    "offset_map": FilePath(help="per-pixel NUC offset TIFF [counts]"),
    "bad_pixel_mask": FilePath(help="TIFF, non-zero where a pixel is bad; filled from valid neighbours"),
    "range_c": Pair(item=Celsius(lo=TABLE_LIMITS_C[0], hi=TABLE_LIMITS_C[1]), default=None,
                    help="temperature range of the inverse tables [C]; default "
                         f"[{TABLE_RANGE_C[0]:g}, {TABLE_RANGE_C[1]:g}]"),
    "ifov_mrad": Number(lo=0.0, lo_open=True, hi=100.0,
                        help="heat flow: instantaneous field of view of one pixel [mrad] (pixel side = distance x IFOV)"),
    "horizontal_fov_deg": Number(lo=0.0, lo_open=True, hi=180.0, hi_open=True,
                                 help="heat flow: horizontal field of view [deg]; pixel side 2 d tan(HFOV/2) / width"),
}, help="camera model")

class _Ellipse(Node):
    """An ellipse as {center|centre: [row, col], radii: [rows, cols]} or [row, col, rr, rc];
    normalised to {"center": (row, col), "radii": (rr, rc)}."""

    _map = Mapping(keys={"center": Pair(item=Number(), ordered=False), "centre": Pair(item=Number(), ordered=False),
                         "radii": Pair(item=Number(lo=0, lo_open=True), ordered=False)}, required=("radii",))

    def check(self, v, path, ctx):
        if isinstance(v, list):
            if len(v) != 4:
                ctx.fail(path, f"expected [row, col, row_radius, col_radius], got {v!r}")
            r, c = (Number().check(x, list(path) + [i], ctx) for i, x in enumerate(v[:2]))
            a, b = (Number(lo=0, lo_open=True).check(x, list(path) + [i + 2], ctx) for i, x in enumerate(v[2:]))
            return {"center": (r, c), "radii": (a, b)}
        out = self._map.check(v, path, ctx)
        if ("center" in out) == ("centre" in out):
            ctx.fail(path, "give the ellipse's center: [row, col] (once) and radii: [rows, cols]")
        return {"center": out.get("center", out.get("centre")), "radii": out["radii"]}

    def json(self):
        return {"description": self.help, "anyOf": [self._map.json(),
                {"type": "array", "items": {"type": "number"}, "minItems": 4, "maxItems": 4}]}


REGION = Mapping(keys={
    "name": String(),
    "rect": ListOf(item=Number(integer=True), help="[row0, col0, row1, col1], half-open"),
    "polygon": ListOf(item=Pair(item=Number(), ordered=False), min_items=3, help="[[row, col], ...]"),
    "ellipse": _Ellipse(help="{center: [row, col], radii: [rows, cols]} (or centre:), or [row, col, row_radius, col_radius]"),
    "mask": FilePath(help="TIFF, non-zero inside the region"),
    "role": String(choices=("surface", "reference", "reflector", "component", "ambient"), default="surface"),
    "reference": String(help="electrical: name of the similar component to compare with"),
    "critical_temperature_factor": Number(lo=0.0, hi=1.0),
    "view_angle_deg": Number(lo=0.0, hi=90.0, hi_open=True),
    "thermal_bridge": Mapping(keys={
        "length_m": Number(lo=0.0, lo_open=True, help="bridge length [m]; default: the region's longer "
                           "bounding-box side on the wall"),
        "kind": String(choices=("flat", "corner"), default="flat",
                       help="flat: bridge in a flat wall (internal-dimension psi_i); corner: flagged, the flat-wall "
                            "psi of a corner seen in one image is not the ISO 14683 value"),
    }, fill_empty=False, help="heat flow: linear thermal transmittance psi of this region against heat_flow.reference"),
}, required=("name",), help="a named region of the image")

SPOTS = Mapping(keys={
    "above_c": Celsius(), "below_c": Celsius(),
    "above_reference_k": Number(lo=0.0, lo_open=True), "below_reference_k": Number(lo=0.0, lo_open=True),
    "reference": String(help="region name or 'median'"),
    "min_area_px": Number(lo=1, integer=True, default=4),
    "within": ListOf(item=String(), min_items=1, help="search only inside these regions"),
    "exclude": ListOf(item=String(), min_items=1, help="never search inside these regions (e.g. glazing)"),
}, help="spot search")

STACK_CAMERA = Mapping(keys={k: replace(n, default=None) for k, n in CAMERA.keys.items()},
                       help="per-stack camera overrides, key by key (e.g. one stack exported as apparent temperature)")

# --- alignment and comparison ---------------------------------------------------

_POINT = Pair(item=Number(), ordered=False, help="[row, col]")
POINT_PAIRS = ListOf(item=ListOf(item=_POINT, min_items=2), min_items=2,
                     help="[[[row, col] in the reference, [row, col] in the frame], ...]: similarity from point pairs")

ALIGN_SPEC = Mapping(keys={
    "reference_frame": Number(lo=0, integer=True, default=0, help="frame whose geometry regions and maps are drawn in"),
    "max_shift_px": Number(lo=0.0, lo_open=True, default=20.0,
                           help="frames displaced further than this are rejected (reported, left out of statistics)"),
    "min_peak_ratio": Number(lo=1.0, default=3.0,
                             help="frames whose correlation peak ratio is lower are rejected as failed registrations"),
    "transform": String(choices=("translation", "similarity"), default="translation",
                        help="translation (sub-pixel) or similarity (rotation + scale + translation)"),
    "points": POINT_PAIRS,
}, help="align every frame to a reference frame")

ALIGN = OneOf(options=(
    (lambda v: isinstance(v, bool), Bool(), "true/false"),
    (lambda v: isinstance(v, dict) or v is None, ALIGN_SPEC, "mapping"),
), expected="true, false or {reference_frame, max_shift_px, min_peak_ratio, transform, points}",
    help="frame alignment: true for the defaults, or {reference_frame: 0, max_shift_px: 20, ...}")

BASELINE = OneOf(options=(
    (lambda v: isinstance(v, str), String(help="name of an earlier stack of this config"), "stack name"),
    (lambda v: isinstance(v, dict), Mapping(keys={
        "survey": FilePath(help="another survey's config (its written outputs are read)"),
        "stack": String(help="stack name in that survey")}, required=("survey", "stack")), "other survey"),
), expected="an earlier stack's name or {survey: path/to/survey.yaml, stack: name}",
    help="the stack to compare with")

COMPARE = Mapping(keys={
    "baseline": BASELINE,
    "below_k": Number(lo=0.0, lo_open=True, help="colder findings: difference at or below -below_k [K] "
                                                  "(default 1.5 when neither threshold is given)"),
    "above_k": Number(lo=0.0, lo_open=True, help="warmer findings: difference at or above above_k [K]"),
    "min_area_px": Number(lo=1, integer=True, default=6, help="smallest finding [pixels]"),
    "offset": String(default="median", help="global offset removed before thresholding: median, none or a region name"),
    "pressure_difference_pa": Number(help="pressure difference across the envelope during this stack [Pa] (recorded)"),
    "registration": String(choices=("translation", "similarity"), default="translation",
                           help="how the baseline's mean frame is registered to this stack's"),
    "points": POINT_PAIRS,
}, required=("baseline",), help="difference with a baseline stack (differential thermography)")
class _RegionNumbers(Node):
    """A number, or {region name: number, ..., default: number}."""

    def __init__(self, item, help=""):
        super().__init__(help=help)
        self.item = item

    def check(self, v, path, ctx):
        if _is_num(v):
            return self.item.check(v, path, ctx)
        if not isinstance(v, dict) or not v:
            ctx.fail(path, f"expected a number or {{region name: number, default: number}}, got {v!r}")
        return {str(k): self.item.check(x, list(path) + [k], ctx) for k, x in v.items()}

    def json(self):
        return {"description": self.help, "anyOf": [self.item.json(),
                {"type": "object", "additionalProperties": self.item.json()}]}


class _Time(String):
    """An ISO 8601 date-time text, checked when read."""

    def check(self, v, path, ctx):
        import datetime as _dt
        if isinstance(v, _dt.datetime):        # YAML reads unquoted times as datetimes
            return v.isoformat()
        s = String.check(self, v, path, ctx)
        t = s.strip()
        try:
            _dt.datetime.fromisoformat(t[:-1] + "+00:00" if t.endswith(("Z", "z")) else t)
        except ValueError:
            ctx.fail(path, f"'{s}' is not an ISO 8601 date-time; write e.g. \"2026-01-10T18:00:00\" "
                           "(quoted, with an optional +01:00 offset)")
        return t


FRAME_TIMES = OneOf(options=(
    (_has("file"), Mapping(keys={"file": FilePath(help="CSV with a column time (ISO 8601), one row per frame")},
                           required=("file",)), "file"),
    (_has("start"), Mapping(keys={"start": _Time(help="time of the first frame, ISO 8601"),
                                  "interval_s": Number(lo=0.0, lo_open=True, help="time between frames [s]")},
                            required=("start", "interval_s")), "start"),
), expected="{start: \"2026-01-10T18:00:00\", interval_s: 1800} or {file: times.csv}",
    help="time of each frame (time-lapse stacks); needed to match an air log")

HEAT_FLOW = Mapping(keys={
    "side": String(choices=("inside", "outside"), default="inside",
                   help="surface seen: inside (reliable) or outside (night frames, less reliable)"),
    "hemispherical_emissivity": _RegionNumbers(EMISSIVITY, help="total hemispherical emissivity for radiative "
                                               "exchange (number or by region); default: normal emissivity x "
                                               "hemispherical_ratio"),
    "hemispherical_ratio": Number(lo=0.5, hi=1.0, default=0.95, help="hemispherical / normal emissivity "
                                  "(dielectrics about 0.95, from memory)"),
    "convective_coefficient_w_m2k": Number(lo=0.0, lo_open=True, hi=200.0,
                                           help="h_c [W/(m2 K)]; default ISO 6946 Annex C: inside 2.5 (horizontal "
                                                "flow), outside 4 + 4 v"),
    "heat_flow_direction": String(choices=("horizontal", "upward", "downward"), default="horizontal",
                                  help="inside h_c from ISO 6946 Annex C: walls horizontal (2.5), ceilings upward "
                                       "(5.0), floors downward (0.7)"),
    "wind_speed_m_s": Number(lo=0.0, hi=60.0, help="outside: wind speed at the facade [m/s] when the log has none"),
    "radiant_temperature_c": Celsius(lo=-120.0, hi=100.0, help="radiant temperature the surface exchanges with "
                                     "[C]; outside: sky and ground (required without a log column); inside: "
                                     "default the stack's reflected temperature"),
    "radiant_temperature_uncertainty_k": Number(lo=0.0, hi=50.0, help="u(T_r) of this stack's radiant temperature "
                                                "[K]; default uncertainty.reflected_temperature_k"),
    "reference": String(help="region of undisturbed wall: U_ref for thermal bridges, contact-sensor region"),
    "contact_surface_c": Celsius(lo=-60.0, hi=100.0, help="contact-sensor reading on the reference region "
                                 "(mean over the window) [C]; removes the camera's absolute offset"),
    "window": Mapping(keys={"start": _Time(help="first time used"), "end": _Time(help="time after the last used")},
                      help="data window (leave out sun and heating transients)"),
    "night_only": Bool(help="use only frames between 20:00 and 06:00 on the frames' clock (default true outside)"),
    "tilt_axis": String(choices=("rows", "cols"), default="rows",
                        help="image axis along which the wall recedes (view angle divides that pixel side)"),
    "surface_distance_m": Number(lo=0.0, lo_open=True, hi=300.0,
                                 help="camera-to-surface distance for the footprint when conditions.distance_m is 0"),
    "scale": Mapping(keys={"length_m": Number(lo=0.0, lo_open=True, help="known length on the wall [m]"),
                           "between": ListOf(item=Pair(item=Number(), ordered=False), min_items=2,
                                             help="[[row, col], [row, col]]: its ends in the image")},
                     required=("length_m", "between"), help="pixel size from a known length in the scene"),
    "areal_heat_capacity_kj_m2k": Number(lo=0.0, lo_open=True, hi=5000.0,
                                         help="areal heat capacity of the element [kJ/(m2 K)] for the ISO 9869-1 "
                                              "stored-heat criterion"),
}, help="in-situ U-value, thermal-bridge psi and annual heat loss from a time-lapse stack (ISO 9869-1 average "
        "method). Modes: inside (default) q = h_c (theta_ai - theta_si) + eps_h sigma (T_r^4 - T_si^4), U = sum q dt / "
        "sum (theta_ai - theta_ae) dt, h_c default 2.5 (ISO 6946 Annex C), T_r the reflected temperature; outside "
        "q = h_c (theta_se - theta_ae) + eps_h sigma (T_se^4 - T_sky^4), h_c = 4 + 4 v, needs radiant_temperature_c, "
        "night frames only by default, less reliable. With survey.air_log and frame_times: time series, ISO 9869-1 "
        "criteria (72 h, +-5 % vs 24 h earlier, first/last INT(2D/3) days, stored heat). Without a log: constant "
        "survey air temperatures, single-time estimate, criteria not evaluable. Without frame_times: equal frame "
        "weights, no window. Outputs: <name>.u_value.tif (rows, cols) W/(m2 K), <name>.heat_flux.tif (frames, rows, "
        "cols) W/m2; per region area_m2, heat_flux_w_m2, u_value_w_m2k, u_value_expanded_uncertainty_w_m2k, "
        "u_value_converged, annual_heat_loss_kwh; per stack heat_flow {...} and thermal_bridges [...]")

STACK = Mapping(keys={
    "name": String(),
    "path": FilePath(),
    "camera": STACK_CAMERA,
    "view_from": String(choices=("inside", "outside"), default="inside",
                        help="envelope stacks: surveyed from inside (temperature factor, mould) or outside"),
    "conditions": CONDITIONS,
    "regions": ListOf(item=REGION),
    "hotspots": SPOTS,
    "coldspots": SPOTS,
    "assessment": String(choices=("envelope", "electrical", "general"), default="general"),
    "load_pct": Number(lo=0.0, lo_open=True, hi=200.0, help="electrical: load during the survey, % of rating"),
    "ambient_c": Celsius(help="electrical: ambient air near the equipment [C]"),
    "time": String(help="when the stack was taken (free text, shown in comparisons; default: frame_times.start)"),
    "align": ALIGN,
    "compare": COMPARE,
    "frame_times": FRAME_TIMES,
    "heat_flow": HEAT_FLOW,
}, required=("name", "path"), help="one thermal stack")

SCHEMA = Mapping(keys={
    "survey": Mapping(keys={
        "title": String(),
        "site": String(),
        "date": String(),
        "operator": String(),
        "indoor_air_c": Celsius(lo=-30.0, hi=60.0),
        "outdoor_air_c": Celsius(lo=-60.0, hi=60.0),
        "indoor_relative_humidity_pct": Number(lo=0.0, hi=100.0),
        "building_use": String(choices=tuple(CRITICAL_TEMPERATURE_FACTORS)),
        "critical_temperature_factor": Number(lo=0.0, hi=1.0),
        "air_log": FilePath(help="CSV: time, indoor_air_c, outdoor_air_c [, wind_speed_m_s, radiant_temperature_c, "
                                 "contact_surface_c], interpolated to the frame times"),
        "heating_degree_days_kd": Number(lo=0.0, lo_open=True, hi=20000.0,
                                         help="heating degree-days [K d per year] for annual heat loss"),
        "heating_degree_days_base_c": Celsius(lo=-10.0, hi=30.0, help="base temperature of the degree-days [C]"),
        "energy_price_per_kwh": Number(lo=0.0, lo_open=True, help="price of delivered heat per kWh (currency of your choice)"),
        "heating_efficiency": Number(lo=0.0, lo_open=True, hi=6.0, help="seasonal efficiency of the heating (or COP)"),
    }),
    "camera": CAMERA,
    "conditions": CONDITIONS,
    "uncertainty": Mapping(keys={
        "emissivity": Number(lo=0.0, hi=0.5), "reflected_temperature_k": Number(lo=0.0, hi=100.0),
        "air_temperature_k": Number(lo=0.0, hi=50.0), "relative_humidity_pct": Number(lo=0.0, hi=50.0),
        "distance_m": Number(lo=0.0, hi=100.0), "camera_k": Number(lo=0.0, hi=20.0),
        "limit_k": Number(lo=0.0, lo_open=True, help="flag regions whose expanded uncertainty exceeds this"),
        "convective_coefficient_w_m2k": Number(lo=0.0, hi=100.0, help="heat flow: u(h_c) [W/(m2 K)]; default 30 % of h_c"),
        "indoor_air_k": Number(lo=0.0, hi=20.0, help="heat flow: indoor air sensor [K]; default 0.29"),
        "outdoor_air_k": Number(lo=0.0, hi=20.0, help="heat flow: outdoor air sensor [K]; default 0.29"),
        "contact_surface_k": Number(lo=0.0, hi=20.0, help="heat flow: contact surface sensor [K]; default 0.2"),
    }, help="standard uncertainties of the inputs (GUM)"),
    "materials": FilePath(help="extra material library YAML"),
    "stacks": ListOf(item=STACK, min_items=1),
    "output": Mapping(keys={
        "dir": String(default="out"),
        "formats": ListOf(item=String(choices=("tiff", "netcdf", "zarr")), default=["tiff"]),
        "report": Bool(default=True),
        "frame_chunk": Number(lo=1, integer=True, default=FRAME_CHUNK),
        "products": ListOf(item=String(choices=("mean", "std")),
                           help="temporal products after alignment: <name>.mean.tif, <name>.std.tif"),
        "fsync": Bool(default=False, help="force temperature stacks to disk before renaming them into place "
                                         "(survives a power loss; slower). Reports are always synced."),
    }, fill_empty=True),
}, required=("camera", "stacks"))


def json_schema():
    """JSON Schema (draft 2020-12) of the config, for editors."""
    d = SCHEMA.json()
    d["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    d["title"] = "irpipe survey config"
    return d


@dataclass
class Config:
    """A validated config: ``data`` holds values with defaults filled in."""

    data: dict
    path: Path
    marks: _Marks
    ctx: Ctx

    @property
    def base_dir(self):
        return self.path.parent

    def fail(self, keypath, msg):
        self.ctx.fail(keypath, msg)


def load_config(path) -> Config:
    """Read and validate a survey config; raises ConfigError naming file, line and key."""
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"{path}: config file not found; give the path to a survey YAML")
    if not path.is_file():
        raise ConfigError(f"{path}: not a regular file; give the path to a survey YAML")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a text file (not UTF-8); give the path to a survey YAML") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read ({exc.strerror})") from None
    data, marks = load_yaml(text, path.name)
    ctx = Ctx(path.name, marks, path.resolve().parent)
    if not isinstance(data, dict):
        raise ConfigError(f"{path.name} line 1: expected a mapping with keys camera, stacks, ...; got {type(data).__name__}")
    checked = SCHEMA.check(data, [], ctx)
    cfg = Config(checked, path.resolve(), marks, ctx)
    _cross_checks(cfg)
    return cfg


def _check_camera(cfg, cam, key):
    if "spectral_band_um" not in cam and "spectral_response" not in cam:
        cfg.fail(key, "give spectral_band_um: [lo, hi] or spectral_response: file.csv")
    if cam["input"] == "counts" and "calibration" not in cam:
        cfg.fail(key, "input is counts: give calibration: {model: linear, gain: ..., offset_counts: ...}")
    if cam["input"] == "apparent_temperature":
        for k in ("raw_scale", "raw_offset"):
            if cam.get(k) is None:
                cfg.fail(key, f"input is apparent_temperature: give {k} (kelvin = raw * raw_scale + raw_offset)")
    if ("gain_map" in cam) != ("offset_map" in cam):
        cfg.fail(key, "give both gain_map and offset_map for non-uniformity correction, or neither")


def merged_camera(data: dict, index: int) -> dict:
    """The survey camera overridden key by key by the stack's own ``camera:``."""
    cam = dict(data["camera"])
    own = {k: v for k, v in data["stacks"][index].get("camera", {}).items() if v is not None}
    if "spectral_response" in own:
        cam.pop("spectral_band_um", None)
    if "spectral_band_um" in own:
        cam.pop("spectral_response", None)
    cam.update(own)
    return cam


def _cross_checks(cfg: Config):
    d = cfg.data
    _check_camera(cfg, d["camera"], ["camera"])
    names = set()
    for i, st in enumerate(d["stacks"]):
        if st.get("camera"):
            _check_camera(cfg, merged_camera(d, i), ["stacks", i, "camera"])
        if st["name"] in names:
            cfg.fail(["stacks", i, "name"], f"stack name '{st['name']}' used twice; names must be unique")
        bad = [ch for ch in ("/", "\\", "\0") if ch in st["name"]]
        if bad or st["name"].startswith(".") or not st["name"].strip():
            cfg.fail(["stacks", i, "name"], f"stack name {st['name']!r} cannot name output files (it starts "
                                            "with '.', is empty, or holds '/' or '\\'); use letters, digits, "
                                            "'-' and '_'")
        names.add(st["name"])
        rnames = set()
        for j, r in enumerate(st.get("regions", [])):
            kinds = [k for k in ("rect", "polygon", "ellipse", "mask") if k in r]
            if len(kinds) != 1:
                cfg.fail(["stacks", i, "regions", j], "give exactly one of rect, polygon, ellipse, mask")
            if "rect" in r and len(r["rect"]) != 4:
                cfg.fail(["stacks", i, "regions", j, "rect"], "expected [row0, col0, row1, col1]")
            if r["name"] in rnames:
                cfg.fail(["stacks", i, "regions", j, "name"], f"region name '{r['name']}' used twice in this stack")
            rnames.add(r["name"])
        for sk in ("hotspots", "coldspots"):
            sp = st.get(sk)
            if not sp:
                continue
            for lk in ("within", "exclude"):
                for k, nm in enumerate(sp.get(lk, [])):
                    if nm not in rnames:
                        cfg.fail(["stacks", i, sk, lk, k], f"'{nm}' is not a region of this stack; regions: {', '.join(sorted(rnames)) or 'none'}")
            ref = sp.get("reference")
            if ref and ref != "median" and ref not in rnames:
                cfg.fail(["stacks", i, sk, "reference"], f"'{ref}' is not a region of this stack nor 'median'; regions: {', '.join(sorted(rnames)) or 'none'}")
            absolute, relative = ("above_c", "above_reference_k") if sk == "hotspots" else ("below_c", "below_reference_k")
            if absolute not in sp and relative not in sp:
                cfg.fail(["stacks", i, sk], f"no threshold: give {absolute} (a temperature) or {relative} with a "
                                            "reference (a region name or median)")
            if relative in sp and not ref:
                cfg.fail(["stacks", i, sk, relative], f"{relative} is relative to a reference: add "
                                                      "reference: <region name> or reference: median")
        for j, r in enumerate(st.get("regions", [])):
            ref = r.get("reference")
            if ref is not None and ref not in rnames:
                cfg.fail(["stacks", i, "regions", j, "reference"],
                         f"'{ref}' is not a region of this stack; regions: {', '.join(sorted(rnames)) or 'none'}")
        _check_align_compare(cfg, i, st, rnames, [x["name"] for x in d["stacks"]])
        cond = merged_conditions(d, i)
        refl = cond.get("reflected_temperature_c")
        if isinstance(refl, dict) and refl["reflector"] not in rnames:
            cfg.fail(["stacks", i, "conditions", "reflected_temperature_c", "reflector"],
                     f"'{refl['reflector']}' is not a region of this stack; regions: {', '.join(sorted(rnames)) or 'none'}")
        if isinstance(refl, dict) and (refl.get("reflector_emissivity") or 0.0) >= MAX_REFLECTOR_EMISSIVITY:
            cfg.fail(condition_key(cfg, i, "reflected_temperature_c") + ["reflector_emissivity"],
                     f"a reflector of emissivity {refl['reflector_emissivity']:g} is not a reflector; the reflector "
                     "method needs a diffuse reflector of emissivity near 0 (crumpled-and-flattened aluminium foil, "
                     f"about 0.03): give a value below {MAX_REFLECTOR_EMISSIVITY:g}")
        em = cond.get("emissivity")
        if isinstance(em, dict) and "regions" in em:
            own = "emissivity" in st.get("conditions", {})
            ekey = ["stacks", i, "conditions", "emissivity", "regions"] if own else ["conditions", "emissivity", "regions"]
            for nm in em["regions"]:
                if nm not in rnames:
                    cfg.fail(ekey + [nm], f"'{nm}' is not a region of stack '{st['name']}'; regions: "
                                          f"{', '.join(sorted(rnames)) or 'none'}; add the region or remove this entry")
        for key in ("emissivity", "reflected_temperature_c", "air_temperature_c"):
            if key not in cond:
                cfg.fail(["stacks", i], f"no {key} for this stack: set it under conditions or the stack's conditions")
        forced = "transmittance" in cond.get("atmosphere", {})
        if cond.get("distance_m", 0) > 0 and not forced and "relative_humidity_pct" not in cond:
            cfg.fail(["stacks", i], "distance_m > 0 needs relative_humidity_pct (or atmosphere: {transmittance: ...})")
        if "heat_flow" in st or "frame_times" in st or any("thermal_bridge" in r for r in st.get("regions", [])):
            _check_heat_flow(cfg, i, st, rnames, cond)
    s = d.get("survey", {})
    if ("energy_price_per_kwh" in s) != ("heating_efficiency" in s):
        cfg.fail(["survey"], "a cost figure needs both energy_price_per_kwh and heating_efficiency; give both or neither")
    if "energy_price_per_kwh" in s and "heating_degree_days_kd" not in s:
        cfg.fail(["survey", "energy_price_per_kwh"], "a cost figure needs heating_degree_days_kd")


def _check_heat_flow(cfg, i, st, rnames, cond):
    """Cross-checks of the heat-flow keys of one stack (see HEAT_FLOW)."""
    d = cfg.data
    key = ["stacks", i]
    hf = st.get("heat_flow")
    survey = d.get("survey", {})
    bridges = [j for j, r in enumerate(st.get("regions", [])) if "thermal_bridge" in r]
    if hf is None:
        if bridges:
            cfg.fail(key + ["regions", bridges[0], "thermal_bridge"],
                     "thermal_bridge needs the stack's heat_flow: {reference: <undisturbed wall region>, ...}")
        return
    cam = merged_camera(d, i)
    if "scale" in hf:
        b = hf["scale"]["between"]
        if len(b) != 2 or tuple(b[0]) == tuple(b[1]):
            cfg.fail(key + ["heat_flow", "scale", "between"], "give two different points [[row, col], [row, col]]")
    else:
        if cam.get("ifov_mrad") is None and cam.get("horizontal_fov_deg") is None:
            cfg.fail(key, "heat_flow needs the pixel size on the wall: set camera.ifov_mrad or "
                          "camera.horizontal_fov_deg, or heat_flow.scale: {length_m, between}")
        if not cond.get("distance_m", 0) > 0 and "surface_distance_m" not in hf:
            cfg.fail(key, "heat_flow needs the distance to the surface: set conditions.distance_m > 0, or "
                          "heat_flow.surface_distance_m where the path correction is off (distance 0)")
    ref = hf.get("reference")
    if ref is not None and ref not in rnames:
        cfg.fail(key + ["heat_flow", "reference"],
                 f"'{ref}' is not a region of this stack; regions: {', '.join(sorted(rnames)) or 'none'}")
    if bridges and ref is None:
        cfg.fail(key + ["heat_flow"], "thermal_bridge regions need heat_flow.reference: the undisturbed wall region")
    for j in bridges:
        if st["regions"][j]["name"] == ref:
            cfg.fail(key + ["regions", j, "thermal_bridge"], "the reference region cannot be a thermal bridge")
    if "contact_surface_c" in hf and ref is None:
        cfg.fail(key + ["heat_flow", "contact_surface_c"], "a contact reading needs heat_flow.reference: the region "
                                                          "where the sensor sits")
    eh = hf.get("hemispherical_emissivity")
    if isinstance(eh, dict):
        for k in eh:
            if k != "default" and k not in rnames:
                cfg.fail(key + ["heat_flow", "hemispherical_emissivity", k],
                         f"'{k}' is not a region of this stack nor 'default'; regions: {', '.join(sorted(rnames))}")
    has_log = "air_log" in survey
    if has_log and "frame_times" not in st:
        cfg.fail(key, "survey.air_log is matched to frame times: give this stack frame_times: "
                      "{start: \"2026-01-10T18:00:00\", interval_s: 1800} or {file: times.csv}")
    if not has_log and ("indoor_air_c" not in survey or "outdoor_air_c" not in survey):
        cfg.fail(["survey"], f"heat_flow on stack '{st['name']}' needs the air temperatures: survey.air_log, or "
                             "survey.indoor_air_c and survey.outdoor_air_c (single-time estimate)")
    for k in ("window", "night_only"):
        if hf.get(k) and "frame_times" not in st:
            cfg.fail(key + ["heat_flow", k], f"{k} needs the stack's frame_times")
    w = hf.get("window")
    if w and "start" in w and "end" in w:
        import datetime as _dt
        a, b = (_dt.datetime.fromisoformat(w[k][:-1] + "+00:00" if w[k].endswith(("Z", "z")) else w[k])
                for k in ("start", "end"))
        if (a.tzinfo is None) != (b.tzinfo is None) or not a < b:
            cfg.fail(key + ["heat_flow", "window"], "window start must be before end, both with or both without "
                                                    "a UTC offset")
    if hf.get("side") == "outside" and "radiant_temperature_c" not in hf and not has_log:
        cfg.fail(key + ["heat_flow"], "side outside needs heat_flow.radiant_temperature_c (sky and ground) "
                                      "or a radiant_temperature_c column in survey.air_log")


def align_spec(stack: dict):
    """The stack's ``align`` section with defaults filled in, or None without alignment."""
    a = stack.get("align")
    if not a:
        return None
    if a is True:
        a = {}
    return {"reference_frame": 0, "max_shift_px": 20.0, "min_peak_ratio": 3.0, "transform": "translation", **a}


def _check_align_compare(cfg, i, st, rnames, names):
    for key in ("align", "compare"):
        sec = st.get(key)
        for k, pair in enumerate((sec or {}).get("points", []) if isinstance(sec, dict) else []):
            if len(pair) != 2:
                cfg.fail(["stacks", i, key, "points", k], "expected a pair [[row, col] in the reference, [row, col] "
                                                         "in the frame]")
    a = st.get("align")
    if isinstance(a, dict) and a.get("points") and a.get("transform") == "similarity":
        cfg.fail(["stacks", i, "align"], "give either points (the transform is fitted to them) or "
                                         "transform: similarity, not both")
    c = st.get("compare")
    if not c:
        return
    b = c["baseline"]
    if isinstance(b, str):
        if b == st["name"]:
            cfg.fail(["stacks", i, "compare", "baseline"], f"stack '{b}' cannot be its own baseline")
        if b not in names:
            cfg.fail(["stacks", i, "compare", "baseline"],
                     f"no stack named '{b}'; stacks: {', '.join(names)}")
        if names.index(b) > i:
            cfg.fail(["stacks", i, "compare", "baseline"],
                     f"stack '{b}' comes later in the config (stacks[{names.index(b)}]); a baseline must be "
                     "an earlier stack: move it before this one")
    off = c.get("offset", "median")
    if off not in ("median", "none") and off not in rnames:
        cfg.fail(["stacks", i, "compare", "offset"],
                 f"'{off}' is neither median, none nor a region of this stack; regions: {', '.join(sorted(rnames)) or 'none'}")


def merged_conditions(data: dict, index: int) -> dict:
    """Survey-wide conditions overridden key by key by the stack's own."""
    base = dict(data.get("conditions", {}))
    own = data["stacks"][index].get("conditions", {})
    for k, v in own.items():
        if k == "atmosphere" and isinstance(v, dict):
            base[k] = {**base.get(k, {}), **v}
        else:
            base[k] = v
    return base


def condition_key(cfg, i, name):
    """Key path of a condition of stack ``i``: the stack's own if it sets it, else the
    survey-wide one (for ``Config.fail`` and error locations)."""
    own = cfg.data["stacks"][i].get("conditions", {})
    return ["stacks", i, "conditions", name] if name in own else ["conditions", name]


def camera_key(cfg, i, name):
    """Key path of a camera setting of stack ``i`` (its own override, else the survey's)."""
    own = cfg.data["stacks"][i].get("camera", {})
    return ["stacks", i, "camera", name] if own.get(name) is not None else ["camera", name]
