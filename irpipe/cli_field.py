"""Field-method commands: ``irpipe emissivity`` (ASTM E1933 on a surveyed stack) and
``irpipe calibrate`` (blackbody references -> calibration YAML and NUC maps).

Argument parsing, file reading and writing live here; the methods are the pure functions
of ``irpipe.fieldmethods``.
"""
from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path

import numpy as np

from .constants import ZERO_CELSIUS
from .stages.base import Stage


def register(sub, common):
    """Add the field-method subcommands to the CLI's subparsers."""
    e = sub.add_parser(
        "emissivity", parents=[common],
        help="measure a surface's emissivity on site from a reference region or a contact reading (ASTM E1933)",
        description="Estimate the emissivity of a region of a surveyed stack from a neighbouring reference "
                    "of known emissivity (tape, paint) at the same temperature, or from a contact-thermometer "
                    "reading, with its GUM uncertainty (ASTM E1933). The stack's reflected temperature, air "
                    "temperature and path come from the survey config.")
    e.add_argument("config", help="survey config YAML")
    e.add_argument("--stack", required=True, help="name of the stack in the config")
    e.add_argument("--region", required=True, help="region of unknown emissivity")
    how = e.add_mutually_exclusive_group(required=True)
    how.add_argument("--reference", help="region covered by a reference material of known emissivity")
    how.add_argument("--contact-c", type=float, help="surface temperature read by a contact thermometer [C]")
    e.add_argument("--reference-emissivity", type=float, help="emissivity of the reference material")
    e.add_argument("--u-reference-emissivity", type=float, default=0.02,
                   help="standard uncertainty of the reference emissivity (default 0.02)")
    e.add_argument("--u-reflected-k", type=float,
                   help="standard uncertainty of the reflected temperature [K] "
                        "(default: uncertainty.reflected_temperature_k of the config, else 0)")
    e.add_argument("--u-contact-k", type=float, default=0.5,
                   help="standard uncertainty of the contact reading, probe disturbance included [K] (default 0.5)")
    e.add_argument("--u-camera-k", type=float,
                   help="standard uncertainty of the camera's apparent temperature [K] "
                        "(default: uncertainty.camera_k of the config, else 0)")
    e.add_argument("--write-library", metavar="FILE", help="add the result to this material library YAML")
    e.add_argument("--material", help="material name for --write-library")
    e.add_argument("--json", action="store_true", help="print the result as JSON")

    c = sub.add_parser(
        "calibrate", parents=[common],
        help="fit a counts calibration and NUC maps to blackbody reference stacks",
        description="Fit the linear or Sakuma-Hattori calibration to blackbody reference stacks listed in a "
                    "YAML file (references: [{path, temperature_c}, ...], spectral_band_um or "
                    "spectral_response, optional blackbody_emissivity and surroundings_c), with per-pixel "
                    "two-point NUC maps; writes a calibration YAML for camera.calibration: {file: ...}.")
    c.add_argument("references", help="YAML listing the reference stacks and their temperatures")
    c.add_argument("--out", required=True, help="calibration YAML to write (maps are written beside it)")
    c.add_argument("--model", choices=("linear", "sakuma-hattori"),
                   help="calibration model (default: model in the references YAML, else linear)")
    c.add_argument("--no-nuc", action="store_true", help="do not compute per-pixel gain/offset maps")


def dispatch(args):
    if args.command == "emissivity":
        return emissivity_command(args)
    if args.command == "calibrate":
        return calibrate_command(args)
    return 1


# --- irpipe emissivity -------------------------------------------------------------------

def emissivity_command(args):
    from .errors import ConfigError, InputDataError
    from .fieldmethods import estimate_emissivity

    if args.reference and args.reference_emissivity is None:
        raise ConfigError("--reference needs --reference-emissivity (the known emissivity of the tape or paint)")
    if args.reference_emissivity is not None and not 0 < args.reference_emissivity <= 1:
        raise ConfigError(f"--reference-emissivity {args.reference_emissivity:g} is not in (0, 1]")
    if bool(args.write_library) != bool(args.material):
        raise ConfigError("give --write-library FILE and --material NAME together")
    m = measure_regions(args.config, args.stack, [args.region] + ([args.reference] if args.reference else []))
    sec = m["uncertainty"]
    u_refl = args.u_reflected_k if args.u_reflected_k is not None else sec.get("reflected_temperature_k", 0.0)
    u_cam = args.u_camera_k if args.u_camera_k is not None else sec.get("camera_k", 0.0)
    try:
        est = estimate_emissivity(
            m["signal"][args.region], m["reflected_temperature_k"], m["air_temperature_k"], m["model"],
            reference_signal=m["signal"][args.reference] if args.reference else None,
            reference_emissivity=args.reference_emissivity,
            contact_temperature=None if args.contact_c is None else args.contact_c + ZERO_CELSIUS,
            u_reference_emissivity=args.u_reference_emissivity, u_reflected_temperature=u_refl,
            u_contact=args.u_contact_k, u_camera=u_cam)
    except ValueError as exc:
        raise InputDataError(f"stack '{args.stack}': {exc}") from None
    method = (f"ASTM E1933 non-contact method, reference region '{args.reference}' "
              f"(emissivity {args.reference_emissivity:g})" if args.reference else
              f"ASTM E1933 contact thermometer method ({args.contact_c:g} C)")
    result = {"stack": args.stack, "region": args.region, "method": method,
              "emissivity": round(est.emissivity, 4),
              "expanded_uncertainty": round(est.expanded_uncertainty, 4), "coverage_factor": est.coverage_factor,
              "standard_uncertainty": round(est.standard_uncertainty, 4),
              "surface_temperature_c": round(est.surface_temperature - ZERO_CELSIUS, 3),
              "reflected_temperature_c": round(est.reflected_temperature - ZERO_CELSIUS, 3),
              "air_temperature_c": round(m["air_temperature_k"] - ZERO_CELSIUS, 3),
              "pixels": est.pixels, "frames": m["frames"],
              "budget": {k: round(v, 5) for k, v in est.budget.items()}, "warnings": est.warnings}
    if args.write_library:
        if not 0 < est.emissivity <= 1:
            raise InputDataError(f"the estimate {est.emissivity:.3f} is outside (0, 1]; not written to "
                                 f"{args.write_library}: check the inputs and measure again")
        entry = {"emissivity": round(est.emissivity, 3), "uncertainty": round(est.standard_uncertainty, 3),
                 "source": f"measured on site, {method}; stack '{args.stack}' region '{args.region}' of "
                           f"{Path(args.config).name}, {_dt.date.today().isoformat()}; uncertainty is the "
                           "standard uncertainty (k = 1)"}
        replaced = write_library_entry(args.write_library, args.material, entry)
        result["library"] = {"file": str(args.write_library), "material": args.material, "replaced": replaced}
    if args.json:
        print(json.dumps(result, indent=2))
        return 0
    print(f"irpipe emissivity: stack '{args.stack}', region '{args.region}' ({est.pixels} px, {m['frames']} "
          f"frame(s)); {method}")
    print(f"  surface {result['surface_temperature_c']:.2f} C, reflected {result['reflected_temperature_c']:.2f} C, "
          f"air {result['air_temperature_c']:.1f} C")
    print(f"  emissivity {est.emissivity:.3f} +- {est.expanded_uncertainty:.3f} (expanded uncertainty, "
          f"k = {est.coverage_factor:g}; standard uncertainty {est.standard_uncertainty:.3f})")
    print("  budget (standard uncertainties): " +
          ", ".join(f"{k.replace('_', ' ')} {v:.4f}" for k, v in est.budget.items()))
    for w in est.warnings:
        print(f"  warning: {w}")
    if args.write_library:
        print(f"  {'replaced' if result['library']['replaced'] else 'added'} material '{args.material}' in "
              f"{args.write_library}")
    return 0


class _RegionSignal(Stage):
    """Chain stage of ``measure_regions``: per-pixel sums of the offset-free signal of
    some regions over the frames (the kernel's own linearisation), and the reflector
    method's per-frame reflected signal."""

    name = "region_signal"
    requires = ("chunk.raw", "ctx.tables", "chunk.reflected_temperature_k")
    provides = ()

    def __init__(self, idx):  # noqa: D107
        self.idx = idx
        self.sums = {r: np.zeros(i.size) for r, i in idx.items()}
        self.cnts = {r: np.zeros(i.size) for r, i in idx.items()}
        self.g_refl = []

    def process(self, chunk, ctx):
        from .correction import VALID
        from .kernel import linearise

        s, reason = linearise(chunk.raw, ctx.tables)
        if chunk.reflected_temperature_k is not None:
            self.g_refl += list(ctx.model.path_signal(chunk.reflected_temperature_k))
        f = s.shape[0]
        for r, i in self.idx.items():
            v = s.reshape(f, -1)[:, i]
            ok = reason.reshape(f, -1)[:, i] == VALID
            self.sums[r] += np.where(ok, v, 0).sum(0)
            self.cnts[r] += ok.sum(0)


def measure_regions(config, stack, regions):
    """Frame-mean offset-free signal of each pixel of some regions of a stack.

    The stack runs through its own chain (``irpipe.runner.run_chain``: bad-pixel fill and
    the radiometric kernel) with a collector stage added, so the signal is the one every
    run computes. Returns a dict with ``signal`` (region -> 1-D array, NaN for pixels never
    valid), ``model``, ``reflected_temperature_k`` (the stack's, or the signal-mean of the
    per-frame reflector values), ``air_temperature_k``, ``frames`` and the config's
    ``uncertainty`` section.
    """
    import tempfile

    from .config import load_config
    from .constants import ZERO_CELSIUS
    from .errors import ConfigError
    from .prepare import load_materials, prepare_stack
    from .runner import local_chunks, run_chain
    from .stages import build_chain

    cfg = load_config(config)
    names = [s["name"] for s in cfg.data["stacks"]]
    if stack not in names:
        raise ConfigError(f"{cfg.path.name}: no stack '{stack}'; stacks: {', '.join(names)}")
    with tempfile.TemporaryDirectory(prefix="irpipe-field-") as scratch:
        ctx = prepare_stack(cfg, names.index(stack), Path(scratch), {}, load_materials(cfg), {})
        for r in regions:
            if r not in ctx.masks:
                raise ConfigError(f"{cfg.path.name}, stack '{stack}': no region '{r}'; regions: "
                                  f"{', '.join(ctx.masks) or 'none'}")
        collector = _RegionSignal({r: np.flatnonzero(ctx.masks[r]) for r in regions})
        # only the pixel stages: nothing is written, no statistics are kept
        pixel = {"bad_pixels", "radiometric"}
        chain = [s for s in build_chain(ctx, extra=[collector]) if s.name in pixel or s is collector]
        run_chain(chain, ctx, local_chunks(ctx, 16), threads=False)
    with np.errstate(invalid="ignore", divide="ignore"):
        signal = {r: np.where(collector.cnts[r] > 0, collector.sums[r] / np.maximum(collector.cnts[r], 1), np.nan)
                  for r in regions}
    if ctx.reflected_temperature_k is None:
        # the equation is linear in G(T_refl): the frame mean of G gives the equivalent value
        refl = float(ctx.model.path_table.inverse(np.array([np.mean(collector.g_refl)]))[0])
    else:
        refl = float(ctx.reflected_temperature_k)
    return {"signal": signal, "model": ctx.model, "reflected_temperature_k": refl,
            "air_temperature_k": ctx.conditions["air_temperature_c"] + ZERO_CELSIUS, "frames": ctx.shape[0],
            "uncertainty": cfg.data.get("uncertainty") or {}}


def write_library_entry(path, name, entry):
    """Add or replace one material in a library YAML, atomically; returns True if replaced.

    A new material is appended to the text, so the file's comments and layout stay; a
    replaced one rewrites the mappings (leading comment lines are kept).
    """
    import yaml

    from .errors import ConfigError
    from .io import write_text_atomic

    p = Path(path)
    text = p.read_text(encoding="utf-8") if p.exists() else ""
    try:
        data = yaml.safe_load(text) if text.strip() else {}
    except yaml.YAMLError as exc:
        raise ConfigError(f"{p}: material library is not valid YAML ({str(exc).splitlines()[0]}); "
                          "fix it or choose another file") from None
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise ConfigError(f"{p}: material library must map names to {{emissivity: ..., source: ...}}")
    block = yaml.safe_dump({name: entry}, sort_keys=False, allow_unicode=True, width=1000)
    if name in data:
        data[name] = entry
        head = []
        for line in text.splitlines():          # keep the leading comment block
            if line.strip() and not line.lstrip().startswith("#"):
                break
            head.append(line + "\n")
        new = "".join(head) + yaml.safe_dump(data, sort_keys=False, allow_unicode=True, width=1000)
        replaced = True
    else:
        new = text + ("\n" if text and not text.endswith("\n") else "") + block
        replaced = False
    write_text_atomic(p, new)
    return replaced


# --- irpipe calibrate --------------------------------------------------------------------

def _references_schema():
    from .config import Bool, Celsius, FilePath, ListOf, Mapping, Number, Pair, String

    ref = Mapping(keys={"path": FilePath(help="TIFF stack of the blackbody at this temperature"),
                        "temperature_c": Celsius(help="blackbody temperature [C]", lo=-60.0, hi=1000.0)},
                  required=("path", "temperature_c"))
    return Mapping(keys={
        "spectral_band_um": Pair(item=Number(lo=0.5, hi=30.0), help="rectangular band [lo, hi] um"),
        "spectral_response": FilePath(help="CSV with columns wavelength_um, response"),
        "model": String(choices=("linear", "sakuma-hattori")),
        "blackbody_emissivity": Number(lo=0.0, hi=1.0, lo_open=True, help="emissivity of the reference source"),
        "surroundings_c": Celsius(help="temperature of the surroundings the source reflects [C]"),
        "offset_counts": Number(help="sakuma-hattori: known counts at zero signal (else fitted)"),
        "fit_rect": ListOf(item=Number(integer=True), help="[row0, col0, row1, col1] area used for the fit"),
        "nuc": Bool(default=True, help="compute per-pixel gain/offset maps"),
        "references": ListOf(item=ref, min_items=2),
    }, required=("references",))


def calibrate_command(args):
    from .config import Ctx, load_yaml
    from .errors import ConfigError, InputDataError
    from .fieldmethods import fit_calibration, nuc_from_references
    from .io import StackReader, write_text_atomic, write_tiff_atomic

    path = Path(args.references)
    if not path.is_file():
        raise ConfigError(f"{path}: references file not found; give a YAML listing the blackbody stacks")
    data, marks = load_yaml(path.read_text(encoding="utf-8"), path.name)
    ctx = Ctx(path.name, marks, path.resolve().parent)
    spec = _references_schema().check(data, [], ctx)
    if "spectral_band_um" not in spec and "spectral_response" not in spec:
        ctx.fail([], "give spectral_band_um: [lo, hi] or spectral_response: file.csv (the camera's band)")
    from .pipeline import spectral_response
    response = spectral_response(spec)
    eps_bb = spec.get("blackbody_emissivity", 1.0)
    if eps_bb < 1 and "surroundings_c" not in spec:
        ctx.fail(["blackbody_emissivity"], "a blackbody emissivity below 1 needs surroundings_c (the temperature "
                                           "of the room the source reflects)")
    model = args.model or spec.get("model", "linear")
    refs = spec["references"]
    temps = np.array([r["temperature_c"] for r in refs]) + ZERO_CELSIUS
    if np.unique(temps).size != temps.size:
        ctx.fail(["references"], "two references have the same temperature; give distinct temperatures")
    means, shape = [], None
    for j, r in enumerate(refs):
        with StackReader(r["path"], f"reference stack {r['path'].name}") as rd:
            if not np.issubdtype(rd.dtype, np.integer):
                raise InputDataError(f"{r['path']}: reference stack holds {rd.dtype} values; calibration needs "
                                     "raw counts (integers)")
            if shape is not None and rd.shape[1:] != shape:
                raise InputDataError(f"{r['path']}: frames are {rd.shape[1]}x{rd.shape[2]} but the first reference's "
                                     f"are {shape[0]}x{shape[1]}; use stacks of the same camera")
            shape = rd.shape[1:]
            acc = np.zeros(shape)
            for _, chunk in rd.chunks(16):
                acc += chunk.astype(np.float64).sum(0)
            means.append(acc / rd.frames)
    means = np.array(means)
    fit_area = np.ones(shape, bool)
    if "fit_rect" in spec:
        r0, c0, r1, c1 = spec["fit_rect"]
        fit_area[:] = False
        fit_area[r0:r1, c0:c1] = True
        if not fit_area.any():
            ctx.fail(["fit_rect"], f"covers no pixel of the {shape[0]}x{shape[1]} frames")
    use_nuc = spec.get("nuc", True) and not args.no_nuc
    lo_i, hi_i = int(np.argmin(temps)), int(np.argmax(temps))
    if use_nuc:
        try:
            gain, offset, bad = nuc_from_references(means[lo_i], means[hi_i])
        except ValueError as exc:
            raise InputDataError(f"{path.name}: {exc}") from None
        corrected = gain[None] * means + offset[None]
    else:
        bad = np.zeros(shape, bool)
        corrected = means
    sel = fit_area & ~bad
    counts = np.array([np.median(c[sel]) for c in corrected])
    try:
        fit = fit_calibration(temps, counts, response, model, blackbody_emissivity=eps_bb,
                              surroundings_temperature=spec["surroundings_c"] + ZERO_CELSIUS
                              if "surroundings_c" in spec else None,
                              offset_counts=spec.get("offset_counts"))
    except ValueError as exc:
        raise InputDataError(f"{path.name}: {exc}") from None
    out = Path(args.out)
    stem = out.name[:-len(out.suffix)] if out.suffix else out.name
    files = []
    doc = {"calibration": fit.parameters}
    if use_nuc:
        meta = json.dumps({"software": "irpipe", "quantity": "two-point NUC", "references": path.name})
        gname, oname = f"{stem}.gain.tif", f"{stem}.offset.tif"
        write_tiff_atomic(out.parent / gname, gain.astype(np.float32), meta)
        write_tiff_atomic(out.parent / oname, offset.astype(np.float32), meta)
        doc["gain_map"], doc["offset_map"] = gname, oname
        files += [gname, oname]
        if bad.any():
            bname = f"{stem}.bad_pixels.tif"
            write_tiff_atomic(out.parent / bname, bad.astype(np.uint8), meta)
            doc["bad_pixel_mask"] = bname
            files.append(bname)
    order = np.argsort(temps)
    doc["fit"] = {
        "references_file": path.name, "spectral_response": response.description,
        "blackbody_emissivity": eps_bb, "surroundings_c": spec.get("surroundings_c"),
        "nuc": use_nuc, "bad_pixels": int(bad.sum()),
        "points": [{"file": refs[j]["path"].name, "temperature_c": float(refs[j]["temperature_c"]),
                    "counts": round(float(counts[j]), 3),
                    "residual_k": round(float(fit.residuals[pos]), 5)} for pos, j in enumerate(order)],
        "rms_residual_k": round(float(np.sqrt(np.mean(fit.residuals**2))), 5),
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
    }
    import yaml
    text = (f"# irpipe calibration from {path.name} ({model}); use it in a survey config as\n"
            f"#   camera: {{input: counts, calibration: {{file: {out.name}}}}}\n"
            + yaml.safe_dump(doc, sort_keys=False, width=1000))
    write_text_atomic(out, text)
    print(f"irpipe calibrate: {model} fit to {len(refs)} blackbody reference(s) "
          f"(emissivity {eps_bb:g}{', NUC maps' if use_nuc else ''})")
    for pnt in doc["fit"]["points"]:
        print(f"  {pnt['file']:28s} {pnt['temperature_c']:8.2f} C  counts {pnt['counts']:12.3f}  "
              f"residual {pnt['residual_k']:+.4f} K")
    print(f"  rms residual {doc['fit']['rms_residual_k']:.4f} K; parameters: "
          + ", ".join(f"{k} {v:.6g}" for k, v in fit.parameters.items() if k != "model"))
    if bad.any():
        print(f"  {int(bad.sum())} bad pixel(s): set camera.bad_pixel_mask to {out.parent / doc['bad_pixel_mask']} "
              "(relative to the survey config) to fill them")
    print(f"  wrote {out}" + (f" and {', '.join(files)}" if files else ""))
    return 0
