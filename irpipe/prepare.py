"""Building a stack's models from the validated config, before any output is written.

``prepare_stack`` opens a stack, reads its maps and masks, resolves its conditions and
builds its camera and measurement models into a ``StackContext`` for the stage chain;
``load_materials``, ``camera_model``, ``path_transmittance`` and ``resolve_emissivity`` are
the pieces, also used by the field commands. Nothing here writes a file.
"""
from __future__ import annotations

import json

import numpy as np

from .config import Config, camera_key, condition_key, merged_camera, merged_conditions
from .constants import STANDARD_PRESSURE, ZERO_CELSIUS
from .correction import CameraModel, MeasurementModel
from .defaults import REFRACTIVE_INDEX, TABLE_RANGE_C
from .emissivity import EmissivityField, material_emissivity
from .errors import ConfigError, InputDataError
from .io import StackReader, read_map, read_spectral_response
from .radiometry import SpectralResponse
from .regions import geometry_problem, region_mask
from .context import StackContext


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


def path_model_factory(model, cond, response, where):
    """``make(air_temperature_k, relative_humidity, distance_m)``: the measurement model of
    the stack's path with other conditions (same camera, range and path kind), built as
    the stack's own was (``path_transmittance``). A change that leaves the transmittance
    unchanged (forced flat transmittance, distance 0) returns ``model`` itself."""
    from .uncertainty import path_variant

    def make(air_temperature, relative_humidity, distance):
        c = dict(cond, air_temperature_c=air_temperature - ZERO_CELSIUS,
                 relative_humidity_pct=relative_humidity * 100.0, distance_m=distance)
        tau, _ = path_transmittance(c, response, where)
        t = np.asarray(tau, float)
        if t.shape == model.tau.shape and np.array_equal(t, model.tau):
            return model
        try:
            return path_variant(model, tau)
        except ValueError as exc:
            raise ConfigError(f"{where}: {exc}") from None

    return make


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


def prepare_stack(cfg: Config, i: int, out_dir, cameras: dict, materials, options, with_model=True):
    """Open a stack, check it, read its maps and masks, resolve conditions and build its
    models; no output written. The stack file is closed again before returning.

    ``cameras`` caches camera models by their merged camera section across stacks.
    ``with_model=False`` checks everything (the path's transmittance included) but does
    not build the measurement model, whose tables are the costly part."""
    st = cfg.data["stacks"][i]
    cond = merged_conditions(cfg.data, i)
    cam = merged_camera(cfg.data, i)
    ckey = json.dumps(cam, sort_keys=True, default=str)
    if ckey not in cameras:
        cameras[ckey] = camera_model(cfg, cam)
        if not with_model:      # the camera's tables must build: check once per camera
            rng = cam.get("range_c") or TABLE_RANGE_C
            try:
                MeasurementModel(cameras[ckey][0], 1.0, (rng[0] + ZERO_CELSIUS, rng[1] + ZERO_CELSIUS))
            except ValueError as exc:
                raise ConfigError(f"{cfg.path.name}, camera: {exc}; check the calibration coefficients") from None
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
    ctx.calibration = cal
    ctx.camera_cfg = cam
    key = ["stacks", i]
    try:
        _prepare_maps(ctx, cfg, key, cam)
        _prepare_regions(ctx, cfg, key, st)
        _prepare_conditions(ctx, cfg, key, cond, with_model)
        if "heat_flow" in st or "frame_times" in st:
            from .heatprep import prepare_heat_flow
            with _where(cfg, key):
                prepare_heat_flow(ctx, cfg)
    finally:
        reader.close()
    return ctx


def _prepare_maps(ctx, cfg, key, cam):
    rows_cols = ctx.shape[1:]
    if "gain_map" in cam:
        with _where(cfg, camera_key(cfg, ctx.index, "gain_map")):
            g = read_map(cam["gain_map"], rows_cols, "camera.gain_map").astype(np.float64)
        with _where(cfg, camera_key(cfg, ctx.index, "offset_map")):
            o = read_map(cam["offset_map"], rows_cols, "camera.offset_map").astype(np.float64)
        if not (np.all(np.isfinite(g)) and np.all(np.isfinite(o))):
            raise InputDataError(f"{cam['gain_map']}: gain/offset maps contain NaN or infinite values; "
                                 "recompute them with 'irpipe calibrate'")
        ctx.nuc = (g, o)
    if "bad_pixel_mask" in cam:
        with _where(cfg, camera_key(cfg, ctx.index, "bad_pixel_mask")):
            m = read_map(cam["bad_pixel_mask"], rows_cols, "camera.bad_pixel_mask") != 0
        if m.all():
            raise InputDataError(f"{cam['bad_pixel_mask']}: bad-pixel mask flags every pixel; "
                                 "it should be non-zero only at bad pixels")
        ctx.bad_pixel_mask = m if m.any() else None


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


def _prepare_conditions(ctx, cfg, key, cond, with_model=True):
    ekey = condition_key(cfg, ctx.index, "emissivity")
    with _where(cfg, ekey):
        ctx.emissivity = resolve_emissivity(cfg, ekey[:-1], cond["emissivity"], ctx.shape[1:], ctx.materials,
                                            masks=ctx.masks)
    # oblique views: stack-wide angle, replaced by a region's own angle for its pixels;
    # metals (emissivity < 0.5) are left as they are (irpipe.emissivity.apply_view_angles)
    ctx.emissivity_normal = ctx.emissivity     # before view-angle scaling (heat flow)
    region_angles = [(n, ctx.masks[n], r["view_angle_deg"]) for n, r in ctx.region_cfg.items()
                     if r.get("view_angle_deg") is not None]
    if "view_angle_deg" in cond or region_angles:
        from .emissivity import apply_view_angles
        ctx.emissivity, angle_warnings = apply_view_angles(
            ctx.emissivity, ctx.shape[1:], cond.get("view_angle_deg"), region_angles,
            cond.get("refractive_index", REFRACTIVE_INDEX))
        if angle_warnings:
            ctx.report.setdefault("warnings", []).extend(angle_warnings)
    refl = cond["reflected_temperature_c"]
    if isinstance(refl, dict):
        ctx.reflected_temperature_k = None
        ctx.reflector_mask = ctx.masks[refl["reflector"]].ravel()
        ctx.reflector_emissivity = float(refl.get("reflector_emissivity") or 0.0)
    else:
        ctx.reflected_temperature_k = refl + ZERO_CELSIUS
    tau, desc = path_transmittance(cond, ctx.camera.response, f"{cfg.path.name}, stacks[{ctx.index}] conditions")
    if not with_model:
        return
    rng = ctx.camera_cfg.get("range_c") or TABLE_RANGE_C
    try:
        ctx.model = MeasurementModel(ctx.camera, tau, (rng[0] + ZERO_CELSIUS, rng[1] + ZERO_CELSIUS))
    except ValueError as exc:
        raise ConfigError(f"{cfg.path.name}, camera: {exc}; check the calibration coefficients") from None
    ctx.path_model = path_model_factory(ctx.model, cond, ctx.camera.response,
                                        f"{cfg.path.name}, stacks[{ctx.index}] conditions (perturbed path)")
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


def resolve_emissivity(cfg, keypath, spec, rows_cols, materials, masks=None) -> EmissivityField:
    """Turn the config's emissivity spec into an EmissivityField (reads maps)."""
    if isinstance(spec, dict) and "regions" in spec:       # emissivity by region over a default
        from .emissivity import emissivity_by_region
        base = resolve_emissivity(cfg, keypath, spec["default"], rows_cols, materials)
        typed_u = float((cfg.data.get("uncertainty") or {}).get("emissivity", 0.0))
        try:
            return emissivity_by_region(base, masks or {}, spec["regions"], materials, typed_u)
        except KeyError as exc:
            cfg.fail(keypath + ["emissivity", "regions"], exc.args[0])
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


