"""Align stage: every frame registered to the reference frame and resampled onto its grid,
in the signal domain, between the sensor corrections and the measurement equation.

Order of operations: the bad-pixel stage has filled detector pixels in the raw
data; here each frame is linearised exactly as the radiometric stage would (NUC maps,
calibration or apparent-temperature input, the same reason codes: the radiometric stage's
own ``signal`` function), registered against the reference frame (``irpipe.alignment``),
and resampled once onto the reference grid, with its validity alongside. The radiometric
stage then takes the resampled signal (``chunk.aligned_signal``, ``chunk.aligned_reason``) and applies
emissivity, reflected temperature and path in the reference frame's geometry, where the
emissivity and label maps, regions and reflector are drawn; the uncertainty stage follows.

Registration runs in ``start`` over the whole stack (one extra read of the frames), so
the shifts are known before the first chunk, whichever runner streams the frames.

Invalid pixels: a resampled pixel built only from valid input pixels keeps a valid
signal; one whose resampled validity is below 1 takes the reason code of the nearest input
pixel when that one was invalid (saturated, ...), else ``not_covered_after_alignment``.
Rejected frames (peak ratio below ``min_peak_ratio`` or shift beyond ``max_shift_px``)
become all-NaN frames with ``frame_rejected_by_alignment``: they keep their place in the
temperature stack and are left out of every statistic.
"""
from __future__ import annotations

import numpy as np
from scipy import ndimage

from .. import alignment as al
from ..config import align_spec
from ..constants import ZERO_CELSIUS
from ..correction import VALID
from ..kernel import build_tables, linearise
from .base import Stage


class Linearizer:
    """raw -> (signal, reason) with the radiometric correction's own numbers
    (``kernel.linearise`` on this stack's calibration, NUC and saturation); picklable."""

    def __init__(self, ctx):
        self.tables = build_tables(input=ctx.camera_cfg["input"], calibration=ctx.calibration, model=ctx.model,
                                   air_temperature_k=ctx.conditions["air_temperature_c"] + ZERO_CELSIUS,
                                   reflected_temperature_k=ctx.reflected_temperature_k, dtype=ctx.dtype,
                                   emissivity_field=ctx.emissivity, shape=ctx.shape[1:],
                                   saturation=ctx.camera_cfg.get("saturation"), nuc=ctx.nuc, per_pixel=True)

    def __call__(self, raw):
        return linearise(raw, self.tables)


class AlignStage(Stage):
    name = "align"
    requires = ("chunk.raw", "ctx.model", "ctx.emissivity", "ctx.nuc", "ctx.bad_pixel_mask")
    provides = ("chunk.aligned_signal", "chunk.aligned_reason", "ctx.alignment")

    @classmethod
    def applies(cls, ctx):
        return align_spec(ctx.stack) is not None

    def start(self, ctx):
        from ..calibration import BadPixelFiller
        from ..errors import InputDataError
        from ..io import StackReader

        spec = align_spec(ctx.stack)
        self.spec = spec
        n = ctx.shape[0]
        ref = int(spec["reference_frame"])
        if ref >= n:
            raise InputDataError(f"{ctx.stack['path']}: stack '{ctx.name}' has {n} frame(s) (0 to {n - 1}); "
                                 f"align.reference_frame {ref} does not exist: choose one of them")
        self.lin = Linearizer(ctx)
        mask = ctx.bad_pixel_mask
        filler = BadPixelFiller(mask) if mask is not None else None
        size = ctx.frame_chunk

        def frames():
            with StackReader(ctx.stack["path"], f"stack '{ctx.name}'") as r:
                for first, raw in r.chunks(size):
                    raw = np.array(raw, copy=True)
                    if filler is not None:
                        filler.fill(raw)
                    s, reason = self.lin(raw)
                    s = np.where(reason == VALID, s, np.nan)
                    for k in range(raw.shape[0]):
                        yield first + k, s[k]

        with StackReader(ctx.stack["path"], f"stack '{ctx.name}'") as r:
            raw = np.array(r.read(ref, ref + 1), copy=True)
        if filler is not None:
            filler.fill(raw)
        s, reason = self.lin(raw)
        ref_img = np.where(reason[0] == VALID, s[0], np.nan)
        if not np.isfinite(ref_img).any():
            raise InputDataError(f"{ctx.stack['path']}: stack '{ctx.name}' reference frame {ref} has no valid pixel; "
                                 "choose another align.reference_frame")
        prepared = al.registration_image(ref_img)
        points = spec.get("points")
        self.transforms, rows = [], []
        for i, img in frames():
            if i == ref:
                reg = al.Registration(al.Similarity(), float("inf"))
            elif points:
                reg = al.Registration(al.similarity_from_points(points), float("nan"))
            elif spec["transform"] == "similarity":
                reg = al.register_similarity(ref_img, img)
            else:
                reg = al.register_translation(ref_img, img, reference_prepared=prepared)
            t = reg.transform
            why = None
            if np.isfinite(reg.peak_ratio) and reg.peak_ratio < spec["min_peak_ratio"]:
                why = f"peak ratio below min_peak_ratio {spec['min_peak_ratio']:g}: registration failed"
            elif np.hypot(t.row_shift_px, t.col_shift_px) > spec["max_shift_px"]:
                why = f"shift beyond max_shift_px {spec['max_shift_px']:g}"
            self.transforms.append(None if why else t)
            row = {"frame": i, "row_shift_px": round(t.row_shift_px, 3), "col_shift_px": round(t.col_shift_px, 3),
                   "peak_ratio": round(reg.peak_ratio, 2) if np.isfinite(reg.peak_ratio) else None}
            if not t.is_translation:
                row.update(rotation_deg=round(t.rotation_deg, 4), scale=round(t.scale, 5))
            if why:
                row["rejected"] = why
            rows.append(row)
        rejected = [r["frame"] for r in rows if "rejected" in r]
        ctx.report["alignment"] = {
            "reference_frame": ref,
            "transform": "points" if points else spec["transform"],
            "sign_convention": "row_shift_px/col_shift_px: displacement of the frame's content relative to the "
                               "reference frame, positive down/right",
            "resampling": "bilinear, once per frame, in the signal domain, with the validity mask",
            "frames": rows, "rejected_frames": rejected}
        # the radiometric stage takes the resampled signal and runs its per-pixel plan
        ctx.alignment = list(self.transforms)
        self.counts = {v: 0 for v in al.ALIGN_REASONS.values()}

    def process(self, chunk, ctx):
        chunk.aligned_signal, chunk.aligned_reason = self.resample_chunk(chunk.raw, chunk.first)
        for c, label in al.ALIGN_REASONS.items():
            self.counts[label] += int(np.count_nonzero(chunk.aligned_reason == c))

    def resample_chunk(self, raw, frames):
        """Linearise and resample frames ``frames`` (first frame number, or one number per
        frame) of a chunk of raw values; returns (signal, reason codes). Pure given the
        registration done in ``start`` (the cluster runner calls it on its workers)."""
        s, reason = self.lin(raw)
        if np.ndim(frames) == 0:
            frames = np.arange(int(frames), int(frames) + s.shape[0])
        out = np.empty(s.shape, np.float64)
        code = np.empty(reason.shape, np.uint8)
        for k in range(s.shape[0]):
            t = self.transforms[int(frames[k])]
            if t is None:
                out[k] = np.nan
                code[k] = al.FRAME_REJECTED
                continue
            ok = reason[k] == VALID
            out[k], covered = al.resample(s[k], t, valid=ok)
            if t.is_identity:
                code[k] = reason[k]
                continue
            m = t.matrix if not t.is_translation else np.ones(2)
            near = ndimage.affine_transform(reason[k], m, offset=(t.row_shift_px, t.col_shift_px), order=0,
                                            mode="constant", cval=al.NOT_COVERED)
            code[k] = np.where(covered, VALID, np.where(near != VALID, near, al.NOT_COVERED))
        return out, code

    def finish(self, ctx):
        # the radiometric stage reports ctx.invalid in its own finish (after this one)
        for label, n in self.counts.items():
            ctx.invalid[label] = ctx.invalid.get(label, 0) + n
