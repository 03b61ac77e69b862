"""The pipeline: read a validated config, prepare each stack, stream its frames through
the stage chain, and write the outputs and the report.

Order of work: (1) the whole config is validated and every input is opened and checked
before any output is written (``plan``); (2) stacks run one after another, each writing
only temporary files until it completes; (3) the report and the run manifest are written
last, atomically.
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .config import Config, load_config, merged_camera, merged_conditions
from .constants import STANDARD_PRESSURE, ZERO_CELSIUS
from .correction import CameraModel, MeasurementModel
from .emissivity import EmissivityField, material_emissivity
from .errors import ConfigError, InputDataError, IrpipeError
from .io import StackReader, read_map, read_spectral_response, sha256, write_json_atomic
from .radiometry import SpectralResponse
from .regions import geometry_problem, region_mask
from .stages import Chunk, StackContext, build_chain

DEFAULT_RANGE_C = (-60.0, 650.0)
MANIFEST = "manifest.json"
REPORT_SCHEMA = "irpipe.report/1"


# --- shared survey-level objects ------------------------------------------------------

def load_materials(cfg: Config):
    """The packaged material library, extended/overridden by ``materials:`` in the config."""
    import yaml
    from importlib import resources

    lib = yaml.safe_load(resources.files("irpipe").joinpath("data/materials.yaml").read_text())
    if "materials" in cfg.data:
        p = cfg.data["materials"]
        try:
            extra = yaml.safe_load(p.read_text())
        except (yaml.YAMLError, UnicodeDecodeError) as exc:
            raise ConfigError(f"{p}: material library is not valid YAML ({str(exc).splitlines()[0]})") from None
        if not isinstance(extra, dict):
            raise ConfigError(f"{p}: material library must map names to {{emissivity: ..., source: ...}}")
        for name, entry in extra.items():
            e = entry.get("emissivity") if isinstance(entry, dict) else None
            if not isinstance(e, (int, float)) or not 0 < e <= 1:
                raise ConfigError(f"{p}, {name}.emissivity: expected a number in (0, 1], got {e!r}")
        lib.update(extra)
    return lib


def spectral_response(section: dict) -> SpectralResponse:
    """The camera's response from ``spectral_response`` (CSV) or ``spectral_band_um`` of a
    validated config section."""
    if "spectral_response" in section:
        try:
            wl, resp = read_spectral_response(section["spectral_response"])
            return SpectralResponse.tabulated(wl, resp, description=section["spectral_response"].name)
        except ValueError as exc:
            raise InputDataError(f"{section['spectral_response']}: {exc}") from None
    lo, hi = section["spectral_band_um"]
    return SpectralResponse.rectangular(lo * 1e-6, hi * 1e-6)


def camera_model(cfg: Config, cam: dict):
    """Spectral response and signal model from a (merged) camera section."""
    response = spectral_response(cam)
    cal = resolve_calibration(cfg, cam)
    if cam["input"] == "counts" and cal["model"] == "sakuma-hattori":
        return CameraModel(response, "sakuma-hattori", (cal["A_um"] * 1e-6, cal["B_umK"] * 1e-6, cal["C"])), cal
    return CameraModel(response, "band"), cal


def resolve_calibration(cfg: Config, cam: dict):
    if cam["input"] == "apparent_temperature":
        return {"model": "apparent_temperature", "raw_scale": cam["raw_scale"], "raw_offset": cam["raw_offset"],
                "offset_counts": 0.0}
    cal = dict(cam["calibration"])
    if "file" in cal:
        from .config import CALIBRATION, Ctx, load_yaml
        path = cal["file"]
        data, marks = load_yaml(path.read_text(), path.name)
        inner = data.get("calibration", data) if isinstance(data, dict) else data
        cal = CALIBRATION.check(inner, ["calibration"], Ctx(path.name, marks, path.parent))
        maps = {}
        if isinstance(data, dict):
            for k in ("gain_map", "offset_map", "bad_pixel_mask"):
                if k in data and k not in cam:
                    f = path.parent / str(data[k])
                    if not f.is_file():
                        raise ConfigError(f"{path.name}, {k}: file '{data[k]}' not found next to the calibration file")
                    maps[k] = f
        cal["maps"] = maps
    cal.setdefault("offset_counts", 0.0)
    return cal


def path_transmittance(cond, response, where):
    """Spectral (or forced flat) transmittance of the stack's path, and a description."""
    atm = cond.get("atmosphere", {})
    d = cond.get("distance_m", 0.0)
    if "transmittance" in atm:
        return float(atm["transmittance"]), f"forced flat transmittance {atm['transmittance']:g}"
    if d == 0:
        return 1.0, "no path (distance 0)"
    from .atmosphere import spectral_transmittance

    p = atm.get("pressure_kpa", STANDARD_PRESSURE / 1000) * 1000.0
    try:
        tau = spectral_transmittance(response.wavelength, d, cond["air_temperature_c"] + ZERO_CELSIUS,
                                     cond["relative_humidity_pct"] / 100.0, p)
    except ValueError as exc:
        raise ConfigError(f"{where}: {exc}") from None
    return tau, f"LOWTRAN7-derived spectral transmittance, {d:g} m, {cond['air_temperature_c']:g} C, " \
                f"{cond['relative_humidity_pct']:g} % RH, {p / 1000:g} kPa"


# --- preparing one stack --------------------------------------------------------------

class _where:
    """Add the config location to an input-data error raised inside the block."""

    def __init__(self, cfg, keypath):
        self.cfg, self.keypath = cfg, keypath

    def __enter__(self):
        return self

    def __exit__(self, typ, exc, tb):
        if exc is not None and isinstance(exc, InputDataError) and not getattr(exc, "_located", False):
            new = type(exc)(f"{exc} [given at {self.cfg.ctx.where(self.keypath)}]")
            new._located = True
            raise new from None
        return False


def _cond_key(cfg, i, name):
    """Key path of a condition: the stack's own if it sets it, else the survey-wide one."""
    own = cfg.data["stacks"][i].get("conditions", {})
    return ["stacks", i, "conditions", name] if name in own else ["conditions", name]


def _cam_key(cfg, i, name):
    own = cfg.data["stacks"][i].get("camera", {})
    return ["stacks", i, "camera", name] if own.get(name) is not None else ["camera", name]


def prepare_stack(cfg: Config, i: int, out_dir: Path, cameras: dict, materials, options):
    """Open a stack, read its maps and masks, resolve conditions; no output written."""
    st = cfg.data["stacks"][i]
    cond = merged_conditions(cfg.data, i)
    cam = merged_camera(cfg.data, i)
    ckey = json.dumps(cam, sort_keys=True, default=str)
    if ckey not in cameras:
        cameras[ckey] = camera_model(cfg, cam)
    camera, cal = cameras[ckey]
    for k, f in cal.get("maps", {}).items():      # maps named by a calibration file
        cam.setdefault(k, f)
    with _where(cfg, ["stacks", i, "path"]):
        reader = StackReader(st["path"], f"stack '{st['name']}'")
    shape, dtype = reader.shape, reader.dtype
    if cam["input"] == "counts" and not np.issubdtype(dtype, np.integer):
        reader.close()
        raise InputDataError(f"{st['path']}: stack '{st['name']}' holds {dtype} values but camera.input is "
                             "counts; raw counts are integers: set camera.input: apparent_temperature "
                             "(with raw_scale, raw_offset) or export raw counts")
    ctx = StackContext(name=st["name"], index=i, cfg=cfg, stack=st, conditions=cond, shape=shape,
                       dtype=dtype, out_dir=out_dir, camera=camera, materials=materials, options=options)
    ctx.shared["reader"] = reader
    ctx.shared["calibration"] = cal
    ctx.shared["camera_cfg"] = cam
    key = ["stacks", i]
    try:
        _prepare_maps(ctx, cfg, key, cam)
        _prepare_regions(ctx, cfg, key, st)
        _prepare_conditions(ctx, cfg, key, cond)
        if "heat_flow" in st or "frame_times" in st:
            from .heatprep import prepare_heat_flow
            with _where(cfg, key):
                prepare_heat_flow(ctx, cfg)
    except BaseException:
        reader.close()
        raise
    return ctx


def _prepare_maps(ctx, cfg, key, cam):
    rows_cols = ctx.shape[1:]
    if "gain_map" in cam:
        with _where(cfg, _cam_key(cfg, ctx.index, "gain_map")):
            g = read_map(cam["gain_map"], rows_cols, "camera.gain_map").astype(np.float64)
        with _where(cfg, _cam_key(cfg, ctx.index, "offset_map")):
            o = read_map(cam["offset_map"], rows_cols, "camera.offset_map").astype(np.float64)
        if not (np.all(np.isfinite(g)) and np.all(np.isfinite(o))):
            raise InputDataError(f"{cam['gain_map']}: gain/offset maps contain NaN or infinite values; "
                                 "recompute them with 'irpipe calibrate'")
        ctx.shared["nuc"] = (g, o)
    if "bad_pixel_mask" in cam:
        with _where(cfg, _cam_key(cfg, ctx.index, "bad_pixel_mask")):
            m = read_map(cam["bad_pixel_mask"], rows_cols, "camera.bad_pixel_mask") != 0
        if m.all():
            raise InputDataError(f"{cam['bad_pixel_mask']}: bad-pixel mask flags every pixel; "
                                 "it should be non-zero only at bad pixels")
        ctx.shared["bad_pixel_mask"] = m if m.any() else None


def _prepare_regions(ctx, cfg, key, st):
    rows_cols = ctx.shape[1:]
    for j, r in enumerate(st.get("regions", [])):
        prob = None if "mask" in r else geometry_problem(rows_cols, r)
        if prob:
            cfg.fail(key + ["regions", j], prob)
        with _where(cfg, key + ["regions", j, "mask"]):
            img = read_map(r["mask"], rows_cols, f"region '{r['name']}' mask") if "mask" in r else None
        m = region_mask(rows_cols, r, img)
        if not m.any():
            cfg.fail(key + ["regions", j], f"region '{r['name']}' covers no pixel")
        ctx.masks[r["name"]] = m
        ctx.region_cfg[r["name"]] = r


def _prepare_conditions(ctx, cfg, key, cond):
    ekey = _cond_key(cfg, ctx.index, "emissivity")
    with _where(cfg, ekey):
        ctx.emissivity = resolve_emissivity(cfg, ekey[:-1], cond["emissivity"], ctx.shape[1:], ctx.materials)
    # oblique views: stack-wide angle, replaced by a region's own angle for its pixels;
    # metals (emissivity < 0.5) are left as they are (irpipe.emissivity.apply_view_angles)
    ctx.shared["emissivity_normal"] = ctx.emissivity     # before view-angle scaling (heat flow)
    region_angles = [(n, ctx.masks[n], r["view_angle_deg"]) for n, r in ctx.region_cfg.items()
                     if r.get("view_angle_deg") is not None]
    if "view_angle_deg" in cond or region_angles:
        from .emissivity import apply_view_angles
        ctx.emissivity, angle_warnings = apply_view_angles(
            ctx.emissivity, ctx.shape[1:], cond.get("view_angle_deg"), region_angles,
            cond.get("refractive_index", 1.5))
        if angle_warnings:
            ctx.report.setdefault("warnings", []).extend(angle_warnings)
    refl = cond["reflected_temperature_c"]
    if isinstance(refl, dict):
        ctx.shared["reflected_temperature_k"] = None
        ctx.shared["reflector_mask"] = ctx.masks[refl["reflector"]].ravel()
    else:
        ctx.shared["reflected_temperature_k"] = refl + ZERO_CELSIUS
    tau, desc = path_transmittance(cond, ctx.camera.response, f"{cfg.path.name}, stacks[{ctx.index}] conditions")
    rng = ctx.shared["camera_cfg"].get("range_c") or DEFAULT_RANGE_C
    try:
        ctx.model = MeasurementModel(ctx.camera, tau, (rng[0] + ZERO_CELSIUS, rng[1] + ZERO_CELSIUS))
    except ValueError as exc:
        raise ConfigError(f"{cfg.path.name}, camera: {exc}; check the calibration coefficients") from None
    ctx.report["conditions"] = {
        "emissivity": ctx.emissivity.description,
        "reflected_temperature_c": refl if not isinstance(refl, dict) else f"reflector region '{refl['reflector']}'",
        "air_temperature_c": cond["air_temperature_c"],
        "relative_humidity_pct": cond.get("relative_humidity_pct"),
        "distance_m": cond.get("distance_m", 0.0),
        "path": desc,
        "band_transmittance_300k": round(ctx.model.describe(), 5),
        "view_angle_deg": cond.get("view_angle_deg"),
    }
    if region_angles:
        ctx.report["conditions"]["region_view_angles_deg"] = {n: a for n, _, a in region_angles}


def resolve_emissivity(cfg, keypath, spec, rows_cols, materials) -> EmissivityField:
    """Turn the config's emissivity spec into an EmissivityField (reads maps)."""
    def lib(name, kp):
        try:
            return material_emissivity(name, materials)
        except KeyError as exc:
            cfg.fail(kp, exc.args[0])

    def unc(name):
        return float(materials[name].get("uncertainty", 0.0)) if isinstance(name, str) else 0.0

    if isinstance(spec, (int, float)):
        return EmissivityField(value=float(spec), description=f"{spec:g}")
    if isinstance(spec, str):
        return EmissivityField(value=lib(spec, keypath + ["emissivity"]), description=spec, uncertainty=unc(spec))
    if "map" in spec:
        m = read_map(spec["map"], rows_cols, "emissivity map").astype(np.float64)
        bad = ~np.isfinite(m) | (m <= 0) | (m > 1)
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise InputDataError(f"{spec['map']}: emissivity map has {int(bad.sum())} value(s) outside (0, 1] or NaN "
                                 f"(first at row {r}, col {c}: {m[r, c]!r}); emissivity must be in (0, 1]")
        return EmissivityField(map=m, description=f"map {spec['map'].name}")
    labels = read_map(spec["labels"], rows_cols, "emissivity label image", kind="int")
    present = np.unique(labels)
    table = spec["values"]
    default = spec.get("default")
    missing = [int(v) for v in present if int(v) not in table]
    if missing and default is None:
        cfg.fail(keypath + ["emissivity", "values"],
              f"label(s) {', '.join(map(str, missing[:10]))} of {spec['labels'].name} have no emissivity; "
              "add them to values or give default")
    vals, unc_vals, desc = [], [], []
    lut = np.zeros(int(present.max()) - int(present.min()) + 1, np.int64)
    for k, v in enumerate(present):
        item = table.get(int(v), default)
        e = lib(item, keypath + ["emissivity", "values", int(v)]) if isinstance(item, str) else float(item)
        vals.append(e)
        unc_vals.append(unc(item))
        desc.append(f"{int(v)}: {item}" + (f" ({e:g})" if isinstance(item, str) else ""))
        lut[int(v) - int(present.min())] = k
    index = lut[labels - int(present.min())].astype(np.int32)
    unused = sorted(set(table) - set(int(v) for v in present))
    d = f"labels {spec['labels'].name}: " + ", ".join(desc)
    if unused:
        d += f" (labels {unused} not in the image)"
    return EmissivityField(index=index, values=np.asarray(vals), description=d,
                           uncertainty=np.asarray(unc_vals)[index])


# --- running --------------------------------------------------------------------------

@dataclass
class RunResult:
    report: dict
    failed: list = field(default_factory=list)   # (stack name, message)
    skipped: list = field(default_factory=list)
    out_dir: Path | None = None

    @property
    def exit_code(self):
        if not self.failed:
            return 0
        return max(getattr(e, "exit_code", 1) for _, _, e in self.failed)


def _stack_fingerprint(cfg: Config, i: int, input_hashes: dict):
    st = cfg.data["stacks"][i]
    blob = json.dumps({"camera": merged_camera(cfg.data, i), "conditions": merged_conditions(cfg.data, i),
                       "stack": st, "survey": cfg.data.get("survey", {}),
                       "uncertainty": cfg.data.get("uncertainty", {}), "inputs": input_hashes,
                       "version": __version__}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def _inputs_of(cfg: Config, i: int, cam=None):
    """Files a stack depends on."""
    st = cfg.data["stacks"][i]
    files = [st["path"]]
    cam = cam or merged_camera(cfg.data, i)
    for k in ("spectral_response", "gain_map", "offset_map", "bad_pixel_mask"):
        if k in cam:
            files.append(cam[k])
    if isinstance(cam.get("calibration"), dict) and "file" in cam["calibration"]:
        files.append(cam["calibration"]["file"])
    e = merged_conditions(cfg.data, i)["emissivity"]
    if isinstance(e, dict):
        files.append(e.get("map") or e.get("labels"))
    files += [r["mask"] for r in st.get("regions", []) if "mask" in r]
    if "materials" in cfg.data:
        files.append(cfg.data["materials"])
    if "file" in (st.get("frame_times") or {}):
        files.append(st["frame_times"]["file"])
    if "frame_times" in st and "air_log" in cfg.data.get("survey", {}):
        files.append(cfg.data["survey"]["air_log"])
    return files


def plan(cfg: Config, out_dir: Path, options=None):
    """Validate every stack's inputs against the config before any work (no outputs)."""
    options = options or {}
    cameras = {}
    materials = load_materials(cfg)
    contexts = []
    for i in range(len(cfg.data["stacks"])):
        try:
            ctx = prepare_stack(cfg, i, out_dir, cameras, materials, options)
        except InputDataError as exc:
            if not options.get("keep_going"):
                for c in contexts:
                    c.shared["reader"].close()
                raise
            contexts.append((i, exc))
            continue
        ctx.shared["reader"].close()
        contexts.append(ctx)
    return cameras, materials, contexts


def run(config_path, out_dir=None, *, resume=False, keep_going=False, quiet=True, workers=None,
        scheduler=None, write_report=True, frame_chunk=None) -> RunResult:
    """Run a survey config; returns a RunResult. Raises ConfigError / InputDataError when
    the run cannot start or (without ``keep_going``) a stack fails."""
    cfg = load_config(config_path)
    out = Path(out_dir) if out_dir else (cfg.base_dir / cfg.data["output"]["dir"])
    options = {"keep_going": keep_going, "quiet": quiet, "workers": workers, "scheduler": scheduler,
               "frame_chunk": frame_chunk or cfg.data["output"]["frame_chunk"],
               "formats": cfg.data["output"]["formats"]}
    cameras, materials, contexts = plan(cfg, out, options)
    out.mkdir(parents=True, exist_ok=True)
    old_manifest = _read_json(out / MANIFEST)
    old_stacks = {s["name"]: s for s in (old_manifest or {}).get("stacks", [])}
    manifest = {"software": "irpipe", "version": __version__, "config": str(cfg.path.name),
                "config_sha256": sha256(cfg.path), "started_utc": _now(), "stacks": []}
    results, failed, skipped = [], [], []
    progress = _progress(quiet)
    for item in contexts:
        if isinstance(item, tuple):
            i, exc = item
            name = cfg.data["stacks"][i]["name"]
            failed.append((name, str(exc), exc))
            manifest["stacks"].append({"name": name, "status": "failed", "error": str(exc)})
            results.append({"name": name, "status": "failed", "error": str(exc)})
            continue
        ctx = item
        files = _inputs_of(cfg, ctx.index, ctx.shared["camera_cfg"])
        prev = old_stacks.get(ctx.name)

        def hash_inputs(files=files):
            return {str(p): sha256(p) for p in files}

        pending = None
        if resume and prev and prev.get("status") == "done":
            hashes = hash_inputs()
            fp = _stack_fingerprint(cfg, ctx.index, hashes)
            if prev.get("fingerprint") == fp and all((out / f).exists() for f in prev.get("outputs", {}).values()):
                skipped.append(ctx.name)
                manifest["stacks"].append(prev)
                results.append(prev["report"])
                continue
        else:
            # hashing a large stack costs about as much as reading it: do it on the side
            # while the stack is processed (hashlib releases the GIL)
            from concurrent.futures import ThreadPoolExecutor
            pool = ThreadPoolExecutor(1)
            pending = pool.submit(hash_inputs)
            pool.shutdown(wait=False)
        try:
            t0 = time.perf_counter()
            rep = run_stack(ctx, progress)
            rep["seconds"] = round(time.perf_counter() - t0, 3)
        except IrpipeError as exc:
            hashes = pending.result() if pending is not None else hashes
            failed.append((ctx.name, str(exc), exc))
            manifest["stacks"].append({"name": ctx.name, "status": "failed", "error": str(exc),
                                       "inputs": hashes})
            if not keep_going:
                _write_manifest(out, manifest, old_manifest, partial=True)
                raise
            results.append({"name": ctx.name, "status": "failed", "error": str(exc)})
            continue
        if pending is not None:
            hashes = pending.result()
            fp = _stack_fingerprint(cfg, ctx.index, hashes)
        manifest["stacks"].append({"name": ctx.name, "status": "done", "fingerprint": fp, "inputs": hashes,
                                   "outputs": dict(ctx.outputs), "report": rep})
        results.append(rep)
    report = build_report(cfg, results)
    if write_report:
        write_reports(out, report, contexts, pictures=cfg.data["output"].get("report", True))
    manifest["finished_utc"] = _now()
    _write_manifest(out, manifest, old_manifest)
    return RunResult(report, failed, skipped, out)


def _write_manifest(out, manifest, old, partial=False):
    if partial and old:
        # keep the record of complete stacks from the earlier run that this run did not reach
        seen = {s["name"] for s in manifest["stacks"]}
        manifest["stacks"] += [s for s in old.get("stacks", []) if s["name"] not in seen]
        manifest["interrupted"] = True
    write_json_atomic(out / MANIFEST, manifest, compact=True)


def _read_json(p):
    try:
        return json.loads(Path(p).read_text())
    except (OSError, ValueError):
        return None


def _now():
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def abort_chain(chain, ctx):
    """Let every stage release and delete what it made (a stack failed)."""
    for s in chain:
        try:
            s.abort(ctx)
        except Exception:
            pass


def run_stack(ctx: StackContext, progress=None) -> dict:
    """Stream one stack through its stage chain; returns its report entry."""
    if ctx.options.get("workers") or ctx.options.get("scheduler"):
        from .parallel import run_stack_distributed
        return run_stack_distributed(ctx, progress)
    reader = StackReader(ctx.stack["path"], f"stack '{ctx.name}'")
    chain = build_chain(ctx)
    try:
        for s in chain:
            s.start(ctx)
        size = int(ctx.options.get("frame_chunk") or 32)
        n = ctx.shape[0]
        # chunks read ahead in a thread and each stage in its own thread, in frame order
        # (irpipe.parallel.stream_chain); results are those of the one-thread loop
        from .parallel import stream_chain
        chunks = (Chunk(first, reader.read(first, min(n, first + size))) for first in range(0, n, size))
        stream_chain(chain, ctx, chunks, progress, threads=ctx.options.get("threads", True))
        for s in chain:
            s.finish(ctx)
    except BaseException:
        abort_chain(chain, ctx)
        raise
    finally:
        reader.close()
    rep = {"name": ctx.name, "status": "done", "path": str(ctx.stack["path"].name), "frames": ctx.shape[0],
           "rows": ctx.shape[1], "cols": ctx.shape[2], "assessment": ctx.stack.get("assessment", "general")}
    rep.update(ctx.report)
    rep["outputs"] = dict(ctx.outputs)
    ctx.shared.pop("reader", None)
    return rep


def _progress(quiet, stream=None):
    """Progress bar on stderr, one line per stack, redrawn after each chunk of frames
    (frames done, frames per second, time left); None (no output) with --quiet or when
    stderr is not a terminal."""
    stream = stream or sys.stderr
    if quiet or not stream.isatty():
        return None
    started = {}

    def show(name, done, total):
        now = time.perf_counter()
        t0, d0 = started.setdefault(name, (now, done))
        w = 28
        k = int(w * done / max(total, 1))
        rate = (done - d0) / (now - t0) if now > t0 else 0.0
        left = f"{(total - done) / rate:4.0f} s left" if rate > 0 and done < total else f"{now - t0:5.1f} s"
        stream.write(f"\r{name[:22]:22s} [{'#' * k}{'.' * (w - k)}] {done}/{total} frames "
                     f"{rate:5.0f}/s {left}\x1b[K")
        if done >= total:
            stream.write("\n")
        stream.flush()
    return show


# --- report -----------------------------------------------------------------------------

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


def build_report(cfg: Config, stacks: list) -> dict:
    survey = dict(cfg.data.get("survey", {}))
    warnings = []
    if "indoor_air_c" in survey and "outdoor_air_c" in survey:
        from .findings import survey_condition_warnings
        from .humidity import dew_point
        warnings += survey_condition_warnings(survey["indoor_air_c"], survey["outdoor_air_c"])
        if survey.get("indoor_relative_humidity_pct") is not None:
            td = dew_point(survey["indoor_air_c"] + ZERO_CELSIUS, survey["indoor_relative_humidity_pct"] / 100.0)
            survey["indoor_dew_point_c"] = round(float(td) - ZERO_CELSIUS, 3)
        survey["indoor_outdoor_difference_k"] = survey["indoor_air_c"] - survey["outdoor_air_c"]
    for st in stacks:
        warnings += [f"{st['name']}: {w}" for w in st.get("warnings", [])]
    return {"schema": REPORT_SCHEMA, "software": {"name": "irpipe", "version": __version__},
            "created_utc": _now(), "config": cfg.path.name, "survey": survey,
            "warnings": warnings, "cautions": list(CAUTIONS), "stacks": stacks}


def write_reports(out: Path, report: dict, contexts, pictures=True):
    """report.json, then the tables and the HTML report (pictures drawn with matplotlib)."""
    write_json_atomic(out / "report.json", report)
    if pictures:
        from .report import pictures_from_contexts, write_all
        write_all(out, report, pictures_from_contexts(contexts, report, out))
