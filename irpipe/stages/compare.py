"""Compare stage: this stack's mean frame minus its baseline's, aligned, with the
uncertainty of the difference and the ``colder`` / ``warmer`` findings
(``irpipe.compare``). Writes ``<name>.difference.tif`` and
``<name>.difference_uncertainty.tif`` (float32 (rows, cols) [K], NaN outside the overlap),
and ``<name>.temperature_factor_difference.tif`` when both states give indoor and outdoor
air.

The baseline's mean frame comes from, in this order: the baseline stack processed earlier
in the same run; its written ``<name>.mean.tif`` (``--resume``, or a skipped stack), checked
against the run manifest; or another survey's written outputs
(``compare.baseline: {survey: ..., stack: ...}``), its mean frame or its temperature stack
as that survey's manifest lists them. A missing or out-of-date output is an input-data
error naming the file.

The baseline's mean is resampled onto this stack's grid in the camera's blackbody-signal
domain (S(T) of this stack's camera, then back), not in degrees Celsius.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .. import __version__
from .. import compare as cmp
from ..constants import ZERO_CELSIUS
from ..errors import InputDataError
from ..io import StackReader, write_tiff_atomic
from .base import Stage
from .temporal import stack_time

MANIFEST = "manifest.json"


class CompareStage(Stage):
    name = "compare"
    requires = ("ctx.temporal", "ctx.model")
    provides = ("ctx.comparison_picture",)

    @classmethod
    def applies(cls, ctx):
        return bool(ctx.stack.get("compare"))

    def start(self, ctx):
        self.spec = ctx.stack["compare"]
        b = self.spec["baseline"]
        if isinstance(b, dict):
            # fail before any frame is processed when the other survey's output is unusable
            self.baseline = _other_survey_mean(b["survey"], b["stack"], ctx)
        else:
            self.baseline = None

    def _baseline(self, ctx):
        if self.baseline is not None:
            return self.baseline
        name = self.spec["baseline"]
        got = (ctx.options.get("stack_means") or {}).get(name)
        if got is not None:
            return {**got, "survey": None, "source": "this run"}
        configured = ctx.cfg.base_dir / ctx.cfg.data["output"]["dir"]
        if not (Path(ctx.out_dir) / MANIFEST).is_file() and (configured / MANIFEST).is_file():
            # a stack run on its own into a scratch folder (irpipe inspect): the survey's outputs
            return _written_mean(ctx.cfg, name, configured, ctx)
        return _written_mean(ctx.cfg, name, Path(ctx.out_dir), ctx)

    def finish(self, ctx):
        spec = self.spec
        mine = ctx.temporal
        base = self._baseline(ctx)
        mean = np.asarray(mine["mean_c"], np.float64)
        st = ctx.model.signal_table

        def to_signal(t_c):
            t = np.asarray(t_c, float) + ZERO_CELSIUS
            ok = np.isfinite(t)
            s = np.full(t.shape, np.nan)
            s[ok] = st.forward_fast(np.clip(t[ok], *ctx.model.t_range))
            return s

        def from_signal(s):
            ok = np.isfinite(s)
            t = np.full(s.shape, np.nan)
            t[ok] = st.inverse(s[ok]) - ZERO_CELSIUS
            return t

        method = "points" if spec.get("points") else spec.get("registration", "translation")
        aligned_s, reg = cmp.align_mean(to_signal(mean), to_signal(base["mean_c"]), method, spec.get("points"))
        aligned = from_signal(aligned_s)
        raw_diff = mean - aligned
        offset_mode = spec.get("offset", "median")
        mode = offset_mode if offset_mode in ("median", "none") else "region"
        try:
            diff, offset = cmp.remove_offset(raw_diff, mode, ctx.masks.get(offset_mode))
        except ValueError as exc:
            raise InputDataError(f"{ctx.stack['path']}: stack '{ctx.name}', compare.offset region "
                                 f"'{offset_mode}': {exc}; choose a region inside the overlap or median") from None
        na = mine["noise"].get("mean_noise_k") or 0.0
        nb = (base.get("noise") or {}).get("mean_noise_k") or 0.0
        u, edge = cmp.difference_uncertainty(mean, aligned, na, nb)
        below, above = spec.get("below_k"), spec.get("above_k")
        if below is None and above is None:
            below = above = 1.5
        found, suppressed = cmp.find_changes(diff, u, edge, below, above, spec["min_area_px"])
        meta = {"software": "irpipe", "version": __version__, "units": "K", "axes": "row,col", "stack": ctx.name,
                "baseline": base["name"], "sign": "this stack minus the aligned baseline, offset removed"}
        files = {}
        for kind, img, q in (("difference", diff, "temperature difference"),
                             ("difference_uncertainty", u, "expanded uncertainty (k=2) of the difference")):
            f = f"{ctx.name}.{kind}.tif"
            write_tiff_atomic(ctx.out_dir / f, img.astype(np.float32), json.dumps({**meta, "quantity": q}))
            ctx.outputs[kind] = f
            files[kind] = f
        tf = None
        ti, te = mine.get("indoor_air_c"), mine.get("outdoor_air_c")
        bti, bte = base.get("indoor_air_c"), base.get("outdoor_air_c")
        if None not in (ti, te, bti, bte) and ti != te and bti != bte:
            dfac = cmp.temperature_factor_difference(mean, aligned, ti, te, bti, bte)
            f = f"{ctx.name}.temperature_factor_difference.tif"
            write_tiff_atomic(ctx.out_dir / f, dfac.astype(np.float32),
                              json.dumps({**meta, "units": "1", "quantity": "temperature factor difference"}))
            ctx.outputs["temperature_factor_difference"] = f
            files["temperature_factor_difference"] = f
            ok = np.isfinite(dfac)
            tf = {"indoor_air_c": ti, "outdoor_air_c": te, "baseline_indoor_air_c": bti,
                  "baseline_outdoor_air_c": bte,
                  "median_difference": round(float(np.median(dfac[ok])), 5) if ok.any() else None}
        t = reg.transform
        ref = f"baseline '{base['name']}'"
        for d in found:
            ctx.report.setdefault("findings", []).append(
                {**d, "frame": None, "reference": ref, "peak_c": round(float(mean[d["row"], d["col"]]), 3)})
        ctx.report.setdefault("findings", [])
        overlap = np.isfinite(raw_diff)
        ctx.report["compare"] = {
            "baseline": {"stack": base["name"], "survey": base.get("survey"), "time": base.get("time"),
                         "source": base.get("source")},
            "this_stack": {"stack": ctx.name, "time": mine.get("time")},
            "registration": {"method": method, "row_shift_px": round(t.row_shift_px, 3),
                             "col_shift_px": round(t.col_shift_px, 3), "rotation_deg": round(t.rotation_deg, 4),
                             "scale": round(t.scale, 5),
                             "peak_ratio": round(reg.peak_ratio, 2) if np.isfinite(reg.peak_ratio) else None,
                             "sign_convention": "displacement of the baseline's content relative to this stack, "
                                                "positive down/right"},
            "offset": {"mode": offset_mode, "removed_k": round(offset, 4)},
            "below_k": below, "above_k": above, "min_area_px": spec["min_area_px"],
            "overlap_pixels": int(overlap.sum()),
            "noise_k": {"this_mean": _r(na), "baseline_mean": _r(nb)},
            "uncertainty_model": f"U = 2 sqrt(u_this^2 + u_baseline^2) + ({cmp.INTERPOLATION_RESIDUAL_PX:g} px + "
                                 f"{cmp.REGISTRATION_ERROR_PX:g} px) x min(local gradient of both mean frames)",
            "findings": len(found), "suppressed": suppressed,
            "pressure_difference_pa": spec.get("pressure_difference_pa"),
            "temperature_factor": tf, "files": files}
        ctx.comparison_picture = {"difference_k": diff.astype(np.float32),
                                  "checkerboard_c": cmp.checkerboard(mean, aligned).astype(np.float32)}


def _r(x):
    return None if x is None else round(float(x), 5)


# --- baselines from written outputs ------------------------------------------------------

def _read_image(path, label):
    with StackReader(path, label) as r:
        if r.shape[0] == 1:
            img = np.asarray(r.read(0, 1)[0], np.float64)
        else:       # a temperature stack: its mean over valid values, streamed
            tot = np.zeros(r.shape[1:])
            cnt = np.zeros(r.shape[1:])
            for _, t in r.chunks(16):
                ok = np.isfinite(t)
                tot += np.where(ok, t, 0.0).sum(0)
                cnt += ok.sum(0)
            with np.errstate(invalid="ignore", divide="ignore"):
                img = np.where(cnt > 0, tot / np.maximum(cnt, 1), np.nan)
        meta = {}
        try:
            meta = json.loads(r.metadata or "{}")
        except (ValueError, TypeError):
            meta = {}
    return img, meta if isinstance(meta, dict) else {}


def _manifest_entry(out_dir, name, label):
    p = Path(out_dir) / MANIFEST
    try:
        man = json.loads(p.read_text())
    except (OSError, ValueError):
        raise InputDataError(f"{p}: {label}: no readable run manifest; run that survey first") from None
    for s in man.get("stacks", []):
        if s.get("name") == name:
            if s.get("status") != "done":
                raise InputDataError(f"{p}: {label}: stack '{name}' did not complete ({s.get('error', 'failed')}); "
                                     "run it again")
            return s
    raise InputDataError(f"{p}: {label}: stack '{name}' is not in the manifest; run that survey first")


def _check_current(cfg, i, entry, out_dir, label):
    """The manifest entry must match the stack's current inputs and config (fingerprint)."""
    from ..manifest import hash_files, stack_fingerprint, stack_inputs

    if entry.get("fingerprint") != stack_fingerprint(cfg, i, hash_files(stack_inputs(cfg, i))):
        raise InputDataError(f"{Path(out_dir) / MANIFEST}: {label}: the written outputs of stack "
                             f"'{entry['name']}' are out of date (its inputs or config changed since); "
                             "run that survey again")


def _mean_from_entry(entry, out_dir, label):
    outs = entry.get("outputs") or {}
    f = outs.get("mean") or outs.get("temperature")
    if not f or not (Path(out_dir) / f).is_file():
        raise InputDataError(f"{Path(out_dir) / (f or (entry['name'] + '.mean.tif'))}: {label}: output missing; "
                             "run that survey again")
    img, meta = _read_image(Path(out_dir) / f, label)
    noise = {"mean_noise_k": meta.get("mean_noise_k")}
    if noise["mean_noise_k"] is None:
        noise["mean_noise_k"] = ((entry.get("report") or {}).get("temporal") or {}).get("mean_noise_k")
    return img, noise, meta


def _baseline_from_outputs(cfg, name, out_dir, label, survey=None, source="written outputs"):
    """A baseline's mean frame read from a survey's written outputs (checked current)."""
    i = [s["name"] for s in cfg.data["stacks"]].index(name)
    entry = _manifest_entry(out_dir, name, label)
    _check_current(cfg, i, entry, out_dir, label)
    img, noise, meta = _mean_from_entry(entry, out_dir, label)
    sv = cfg.data.get("survey", {})
    return {"mean_c": img, "noise": noise, "name": name, "time": stack_time(cfg.data["stacks"][i]),
            "survey": survey, "source": source, "indoor_air_c": sv.get("indoor_air_c"),
            "outdoor_air_c": sv.get("outdoor_air_c")}


def _written_mean(cfg, name, out_dir, ctx):
    return _baseline_from_outputs(cfg, name, out_dir, f"baseline of stack '{ctx.name}'")


def _other_survey_mean(survey_path, name, ctx):
    from ..config import load_config

    other = load_config(survey_path)
    names = [s["name"] for s in other.data["stacks"]]
    if name not in names:
        raise InputDataError(f"{survey_path}: survey has no stack '{name}' (compare.baseline of stack "
                             f"'{ctx.name}'); its stacks: {', '.join(names)}")
    return _baseline_from_outputs(other, name, other.base_dir / other.data["output"]["dir"],
                                  f"baseline of stack '{ctx.name}' from survey {Path(survey_path).name}",
                                  survey=str(survey_path), source="written outputs of another survey")
