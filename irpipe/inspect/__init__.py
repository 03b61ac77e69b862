"""``irpipe inspect``: one self-contained HTML page to read temperatures and to draw
regions and assign emissivity by region.

The page holds, per stack, everything its script needs (no server, no network):

* the mean frame of ``<name>.temperature.tif`` (NaN-ignoring mean over frames, float32)
  and of ``<name>.uncertainty.tif`` when there is one;
* the emissivity each pixel was corrected with (after any view-angle scaling), and the
  default emissivity before region assignments and view angles, with the view-angle
  factors, so that the page can rebuild the field after a new assignment;
* up to ``max_frames`` frames quantised to 16 bits over the stack's range (the frame
  slider, and the frame-by-frame term of a recomputed mean temperature);
* a table of the path signal G(T) = S(T) tau_eff(T) on 0.1 K nodes and the reflected
  term G(T_refl) per frame. A new emissivity eps' of a pixel corrected with eps gives
  (measurement equation, ``irpipe.correction``; the path emission cancels)

      G(T') = [eps G(T) + (eps' - eps) G(T_refl)] / eps'

  evaluated per carried frame and averaged; the difference between the exact mean frame
  and the mean of the quantised frames is carried through to first order.

Page size budget (base64 in the HTML, ``page_budget``): per stack 14 bytes per pixel
(mean temperature and uncertainty as float32, the two emissivity images as 8-bit indices,
valid-frame counts when some frames are invalid; 25 bytes when the emissivity is a float
map) plus 2.7 bytes per pixel per carried frame (16 bits), plus 250 kB for the script, the
G(T) table and the config.
Measured (``benchmarks/bench_inspect.py``): one 640 x 512 stack of 10 frames makes a
13.2 MB page, 4.4 MB for the stack and 0.87 MB per frame; at most 32 frames are carried.

Text from the config reaches the page only as JSON inside a ``<script
type="application/json">`` element with ``<``, ``>`` and ``&`` escaped, and the script
shows it with ``textContent``: it is never parsed as HTML or run.
"""
from __future__ import annotations

import base64
import json
import re
import tempfile
from importlib import resources
from pathlib import Path

import numpy as np

from ..config import load_config, load_yaml, merged_conditions
from ..constants import ZERO_CELSIUS
from ..errors import ConfigError

T_STEP_K = 0.1          # spacing of the G(T) nodes carried to the page [K]
MAX_FRAMES = 32         # frames carried for the slider (evenly spaced beyond this)


BUDGET_BYTES_PER_PIXEL = 14.0          # per stack: images other than the frames
BUDGET_BYTES_PER_PIXEL_FRAME = 2.7     # per carried frame
BUDGET_FIXED_BYTES = 250_000           # per page and per stack: script, G(T) table, config


def page_budget(rows, cols, frames_carried, stacks=1):
    """Upper bound of the page size [bytes] for ``stacks`` stacks of rows x cols pixels and
    ``frames_carried`` carried frames each (0 for single-frame stacks)."""
    px = rows * cols
    return int(stacks * (px * (BUDGET_BYTES_PER_PIXEL + BUDGET_BYTES_PER_PIXEL_FRAME * frames_carried)
                         + BUDGET_FIXED_BYTES) + BUDGET_FIXED_BYTES)


def colour_table(name="inferno", n=256):
    """The colour map as ``n`` RGB entries, hex text of 6 digits each ("rrggbb...").

    The report's temperature colour map (matplotlib ``inferno``, perceptually uniform).
    """
    from matplotlib import colormaps

    rgb = np.round(colormaps[name](np.linspace(0.0, 1.0, n))[:, :3] * 255).astype(np.uint8)
    return rgb.tobytes().hex()


def _b64(a):
    return base64.b64encode(np.ascontiguousarray(a).tobytes()).decode("ascii")


def _field_json(field, shape):
    """An EmissivityField as {values, index (uint8/uint16 b64)} or {map (float32 b64)}."""
    if field.map is None:
        values = [float(field.value)] if field.value is not None else [float(v) for v in field.values]
        index = np.zeros(shape, np.uint8) if field.value is not None else np.asarray(field.index)
        dt = np.uint8 if len(values) <= 256 else np.uint16
        return {"values": values, "index": _b64(index.astype(dt)), "bits": 8 * np.dtype(dt).itemsize}
    return {"map": _b64(np.asarray(field.map, np.float32))}


# --- YAML line spans ------------------------------------------------------------------

def _end_line(node):
    """Exclusive end line (0-based) of a node, without trailing comments."""
    import yaml
    if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)) and not node.flow_style and node.value:
        last = node.value[-1]
        return _end_line(last[1] if isinstance(node, yaml.MappingNode) else last)
    m = node.end_mark
    return m.line + (1 if m.column > 0 else 0)


def _key_span(lines, knode, vnode):
    import yaml
    start, col = knode.start_mark.line, knode.start_mark.column
    prefix = lines[start][:col]
    end = _end_line(vnode)
    ok = re.fullmatch(r" *(- +)?", prefix) is not None
    tail = lines[vnode.end_mark.line][vnode.end_mark.column:] if vnode.end_mark.line < len(lines) else ""
    if isinstance(vnode, yaml.ScalarNode) or vnode.flow_style:
        ok = ok and (tail.strip() == "" or tail.strip().startswith("#"))
    block = isinstance(vnode, yaml.MappingNode) and not vnode.flow_style
    span = {"start": start, "end": end, "col": col, "prefix": prefix, "ok": ok}
    if block and vnode.value:
        span["child_col"] = vnode.value[0][0].start_mark.column
    span["block"] = block
    return span


def _dash_col(lines, item):
    """Column of the '- ' introducing a block-sequence item that starts its own line, else None."""
    line = lines[item.start_mark.line][:item.start_mark.column]
    m = re.fullmatch(r"( *)- +", line)
    return len(m.group(1)) if m else None


def yaml_spans(text):
    """Line spans of each stack's editable blocks in the survey text.

    Returns a list (one per stack) of ``{"item": {start, end, child_col, ok},
    "keys": {key: span}, "conditions": {key: span}}``; a span is ``{start, end, col,
    prefix, ok, block[, child_col]}`` with 0-based lines, ``end`` exclusive, and ``ok``
    false where the block cannot be replaced line by line (flow-style surroundings).
    """
    import yaml
    root = yaml.compose(text, Loader=yaml.SafeLoader)
    lines = text.split("\n")
    out = []
    stacks = next((v for k, v in root.value if getattr(k, "value", None) == "stacks"), None)
    for item in stacks.value:
        if not isinstance(item, yaml.MappingNode):
            out.append({"item": {"ok": False}, "keys": {}, "conditions": {}})
            continue
        info = {"item": {"start": item.start_mark.line, "end": _end_line(item), "ok": not item.flow_style,
                         "child_col": item.value[0][0].start_mark.column if item.value else 0},
                "keys": {}, "conditions": {}}
        for k, v in item.value:
            if k.value in ("regions", "hotspots", "coldspots", "conditions"):
                info["keys"][k.value] = _key_span(lines, k, v)
            if k.value == "regions" and isinstance(v, yaml.SequenceNode) and not v.flow_style and v.value:
                # each item's own lines, so that unchanged regions keep their text and comments
                dash = [_dash_col(lines, it) for it in v.value]
                if all(d is not None for d in dash) and len(set(dash)) == 1:
                    info["keys"]["regions"]["dash_col"] = dash[0]
                    info["keys"]["regions"]["items"] = [
                        {"start": it.start_mark.line, "end": _end_line(it)} for it in v.value]
            if k.value == "conditions" and isinstance(v, yaml.MappingNode) and not v.flow_style:
                for ck, cv in v.value:
                    if ck.value in ("emissivity", "reflected_temperature_c"):
                        info["conditions"][ck.value] = _key_span(lines, ck, cv)
        out.append(info)
    return out


# --- per-stack data ---------------------------------------------------------------------

def _mean_frames(path, max_frames):
    """NaN-ignoring mean frame, valid counts, and the carried frames (quantised) of a
    float TIFF stack, read a few frames at a time."""
    from ..io import StackReader

    with StackReader(path, path.name) as rd:
        n = rd.shape[0]
        keep = np.arange(n) if n <= max_frames else np.unique(np.round(np.linspace(0, n - 1, max_frames)).astype(int))
        s = np.zeros(rd.shape[1:], np.float64)
        cnt = np.zeros(rd.shape[1:], np.int64)
        kept = []
        for a in range(0, n, 16):
            blk = rd.read(a, min(n, a + 16)).astype(np.float64)
            ok = np.isfinite(blk)
            s += np.where(ok, blk, 0.0).sum(0)
            cnt += ok.sum(0)
            if n > 1:
                kept += [blk[k - a] for k in keep if a <= k < a + blk.shape[0]]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, s / np.maximum(cnt, 1), np.nan)
    return mean, cnt, n, (keep if n > 1 else None), kept


def _quantise(frames):
    stack = np.stack(frames)
    fin = np.isfinite(stack)
    lo = float(np.min(stack[fin])) if fin.any() else 0.0
    hi = float(np.max(stack[fin])) if fin.any() else 1.0
    step = (hi - lo) / 65534.0 if hi > lo else 1.0
    q = np.where(fin, np.round((np.where(fin, stack, lo) - lo) / step), 65535).astype(np.uint16)
    return {"lo": lo, "step": step, "data": _b64(q), "count": len(frames)}


def stack_data(cfg, ctx, temp_path, unc_path, entry, materials, max_frames=MAX_FRAMES, refl_series_k=None):
    """Everything the page needs for one stack (a JSON-able dict)."""
    from ..config import condition_key
    from ..emissivity import oblique_factor
    from ..prepare import resolve_emissivity

    i = ctx.index
    rows, cols = ctx.shape[1:]
    mean, cnt, nframes, keep, kept = _mean_frames(temp_path, max_frames)
    d = {"name": ctx.name, "index": i, "rows": rows, "cols": cols, "frames": nframes,
         "temperature": _b64(mean.astype(np.float32))}
    if ((cnt > 0) & (cnt < nframes)).any():
        d["counts"] = _b64(cnt.astype(np.uint16 if nframes < 65536 else np.uint32))
        d["count_bits"] = 16 if nframes < 65536 else 32
    if keep is not None:
        d["frame_numbers"] = [int(k) for k in keep]
        d["frames_q"] = _quantise(kept)
    if unc_path is not None:
        u, _, _, _, _ = _mean_frames(unc_path, 0)
        d["uncertainty"] = _b64(u.astype(np.float32))
    d["emissivity_used"] = _field_json(ctx.emissivity, (rows, cols))
    cond = merged_conditions(cfg.data, i)
    spec = cond["emissivity"]
    default = spec["default"] if isinstance(spec, dict) and "regions" in spec else spec
    ekey = condition_key(cfg, i, "emissivity")
    d["emissivity_default"] = _field_json(resolve_emissivity(cfg, ekey[:-1], default, (rows, cols), materials),
                                          (rows, cols))
    n_ref = cond.get("refractive_index", 1.5)
    d["stack_angle_factor"] = float(oblique_factor(cond["view_angle_deg"], n_ref)) if "view_angle_deg" in cond else 1.0
    d["angle_factors"] = {str(a): float(oblique_factor(a, n_ref)) for a in
                          {r["view_angle_deg"] for r in ctx.region_cfg.values() if r.get("view_angle_deg") is not None}}
    # G(T) on 0.1 K nodes over the inverse tables' range
    t0, t1 = ctx.model.t_range
    nodes = np.arange(t0, t1 + 1e-9, T_STEP_K)
    d["g_table"] = {"t0_k": float(nodes[0]), "step_k": T_STEP_K, "g": _b64(ctx.model.path_signal(nodes).astype(np.float64))}
    refl = cond["reflected_temperature_c"]
    if isinstance(refl, dict):
        ser = np.asarray(refl_series_k if refl_series_k is not None else
                         [v + ZERO_CELSIUS for v in entry.get("reflected_temperature_series_c", [])], float)
        g = ctx.model.path_signal(ser)
        d["g_refl_mean"] = float(np.mean(g))
        if keep is not None:
            d["g_refl_frames"] = [float(g[k]) for k in keep]
    else:
        d["g_refl_mean"] = float(ctx.model.path_signal(refl + ZERO_CELSIUS))
    d["masks"] = {n: _b64(np.packbits(m.astype(np.uint8).ravel())) for n, m in ctx.masks.items()
                  if "mask" in ctx.region_cfg[n]}
    d["findings"] = [{k: f.get(k) for k in ("kind", "row", "col", "frame", "peak_c", "delta_k", "area_px",
                                            "bbox", "reference")} for f in entry.get("findings", [])]
    d["electrical"] = [{k: c.get(k) for k in ("region", "severity", "priority", "max_c", "rise_over_reference_k")}
                       for c in (entry.get("electrical") or {}).get("components", [])]
    d["plan"] = entry.get("plan")
    return d


# --- the page ------------------------------------------------------------------------------

def _finite(obj):
    """NaN and infinities as null (JSON has no such numbers)."""
    if isinstance(obj, float):
        return obj if np.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    return obj


def _json_for_html(obj):
    """JSON that cannot end the <script> element it sits in nor start markup."""
    s = json.dumps(_finite(obj), separators=(",", ":"), default=str, allow_nan=False)
    return (s.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))


def _asset(name):
    return resources.files("irpipe.inspect").joinpath(name).read_text(encoding="utf-8")


def page_html(payload):
    """The complete page: inline CSS, the data as JSON, inline script."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            "<title>irpipe inspect</title>\n<style>\n" + _asset("page.css") + "</style>\n</head>\n<body>\n"
            "<main id=\"app\"><p id=\"loading\">Loading the survey data&hellip; (this page needs JavaScript)</p></main>\n"
            "<script type=\"application/json\" id=\"irpipe-data\">" + _json_for_html(payload) + "</script>\n"
            "<script>\n" + _asset("page.js") + "\n</script>\n</body></html>\n")


def _current(out_dir, cfg, i, name):
    """The manifest entry of a previous run whose per-pixel outputs are current, or None."""
    from ..fingerprint import pixel_fingerprint, stack_fingerprint
    from ..manifest import hash_files, read_manifest, stack_inputs

    man = read_manifest(out_dir) or {}
    prev = next((s for s in man.get("stacks", []) if s.get("name") == name and s.get("status") == "done"), None)
    if not prev or "temperature" not in prev.get("outputs", {}):
        return None
    if not all((out_dir / f).is_file() for f in prev["outputs"].values()):
        return None
    hashes = hash_files(stack_inputs(cfg, i))
    if prev.get("pixel_fingerprint") == pixel_fingerprint(cfg, i, hashes):
        prev = dict(prev, stats_current=prev.get("fingerprint") == stack_fingerprint(cfg, i, hashes))
        return prev
    if prev.get("fingerprint") == stack_fingerprint(cfg, i, hashes):
        return dict(prev, stats_current=True)
    return None


def build(config_path, stacks=None, max_frames=MAX_FRAMES):
    """Build the page's payload: reuse current outputs from ``output.dir`` or run the
    stacks into a temporary folder. Returns (payload dict, notes list)."""
    from ..pipeline import run_stack
    from ..prepare import load_materials, prepare_stack

    cfg = load_config(config_path)
    text = cfg.path.read_text(encoding="utf-8")
    raw, _ = load_yaml(text, cfg.path.name)
    names = [s["name"] for s in cfg.data["stacks"]]
    if stacks:
        unknown = [s for s in stacks if s not in names]
        if unknown:
            raise ConfigError(f"{cfg.path.name}: --stack {unknown[0]!r} is not a stack of this survey; "
                              f"stacks: {', '.join(names)}")
    chosen = [i for i, n in enumerate(names) if not stacks or n in stacks]
    materials = load_materials(cfg)
    out_dir = cfg.base_dir / cfg.data["output"]["dir"]
    options = {"quiet": True, "frame_chunk": cfg.data["output"]["frame_chunk"], "formats": ["tiff"],
               "threads": True}
    cameras, notes, data = {}, [], []
    with tempfile.TemporaryDirectory(prefix="irpipe-inspect-") as tmp:
        tmp = Path(tmp)
        for i in chosen:
            name = names[i]
            prev = _current(out_dir, cfg, i, name)
            ctx = prepare_stack(cfg, i, tmp, cameras, materials, options)
            series = None
            if prev is not None:
                where, entry = out_dir, prev["report"]
                outs = prev["outputs"]
                notes.append(f"{name}: temperatures from the earlier run in {cfg.data['output']['dir']}/"
                             + ("" if prev.get("stats_current") else
                                " (regions or findings changed since: findings shown are from that run)"))
            else:
                entry = run_stack(ctx)
                where, outs = tmp, ctx.outputs
                series = ctx.reflected_series_k or None
                notes.append(f"{name}: processed now, as irpipe run would")
            unc = where / outs["uncertainty"] if "uncertainty" in outs else None
            data.append(stack_data(cfg, ctx, where / outs["temperature"], unc, entry, materials, max_frames,
                                   refl_series_k=series))
    raw_json = json.loads(json.dumps(raw, default=str))
    survey = raw_json.get("survey") or {}
    payload = {
        "software": "irpipe inspect", "config_name": cfg.path.name, "config_text": text,
        "spans": yaml_spans(text), "raw": raw_json,
        "title": str(survey.get("title", "")), "site": str(survey.get("site", "")),
        "stacks": data, "notes": notes, "colour_table": colour_table(),
        "materials": {k: {"emissivity": float(v["emissivity"]), "uncertainty": v.get("uncertainty")}
                      for k, v in materials.items() if isinstance(v, dict) and "emissivity" in v},
        "typed_uncertainty": (cfg.data.get("uncertainty") or {}).get("emissivity"),
        "has_uncertainty": any(bool(v) for v in (cfg.data.get("uncertainty") or {}).values()),
    }
    return payload, notes


def write_page(config_path, out=None, stacks=None, max_frames=MAX_FRAMES):
    """Write the page; returns its path. Never writes into the config's output.dir."""
    from ..io import write_text_atomic

    cfg_path = Path(config_path)
    payload, notes = build(cfg_path, stacks, max_frames)
    dest = Path(out) if out else cfg_path.with_name(cfg_path.stem + ".inspect.html")
    write_text_atomic(dest, page_html(payload))
    return dest, notes
