"""The report an inspector hands over: ``regions.csv``, ``findings.csv`` and a
self-contained ``report.html``, from report.json's dict and the stacks' pictures.

``write_all(out_dir, report, pictures)`` writes the three files, each atomically, and
returns their names. ``pictures[stack_name]`` is a dict with

* ``mean_c``: (M, N) float32 frame-averaged corrected temperature [C], NaN invalid;
* ``first_c``: the first frame [C];
* ``hist_edges_c``, ``hist_counts``: histogram of all valid values of all frames;
* ``masks``: {region name: (M, N) bool}.

``pictures_from_contexts`` builds it from the pipeline's stack contexts (the picture
stage's ``ctx.shared["picture"]`` plus ``ctx.masks``), reading the written temperature
stack for stacks that were skipped by ``--resume``.

Matplotlib is imported only while pictures are drawn.
"""
from __future__ import annotations

from pathlib import Path

from ..io import write_text_atomic
from .tables import build_findings, findings_csv, region_rows, regions_csv

__all__ = ["write_all", "build_findings", "region_rows", "pictures_from_contexts", "picture_from_tiff",
           "FILES"]

FILES = ("regions.csv", "findings.csv", "report.html")


def write_all(out_dir: Path, report: dict, pictures: dict) -> list[str]:
    """Write regions.csv, findings.csv and report.html into ``out_dir``; returns the
    file names written. Every file is written to a temporary file and renamed into place,
    so a failure leaves any earlier complete file untouched."""
    from .html import render

    out_dir = Path(out_dir)
    findings = build_findings(report)
    # render first: a failure while drawing must not leave new CSVs next to an old HTML
    page = render(report, pictures or {}, findings)
    write_text_atomic(out_dir / "regions.csv", regions_csv(report))
    write_text_atomic(out_dir / "findings.csv", findings_csv(findings))
    write_text_atomic(out_dir / "report.html", page)
    return list(FILES)


def picture_from_tiff(path, chunk=16):
    """A picture dict (without masks) from a written ``<stack>.temperature.tif``, streamed
    in chunks of frames; same binning as the picture stage."""
    import numpy as np

    from ..io import StackReader
    from ..stages.picture import HIST_HI_C, HIST_LO_C, HIST_STEP

    nb = int(round((HIST_HI_C - HIST_LO_C) / HIST_STEP))
    with StackReader(path, "temperature stack") as r:
        total = np.zeros(r.shape[1:], np.float64)
        cnt = np.zeros(r.shape[1:], np.int64)
        hist = np.zeros(nb, np.int64)
        first = None
        for _, t in r.chunks(chunk):
            t = t.astype(np.float32, copy=False)
            ok = np.isfinite(t)
            total += np.where(ok, t, 0.0).sum(0)
            cnt += ok.sum(0)
            if first is None:
                first = t[0].copy()
            b = np.clip(((t[ok] - HIST_LO_C) / HIST_STEP).astype(np.int64), 0, nb - 1)
            hist += np.bincount(b, minlength=nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, total / np.maximum(cnt, 1), np.nan).astype(np.float32)
    nz = np.flatnonzero(hist)
    return {"mean_c": mean, "first_c": first,
            "hist_edges_c": (HIST_LO_C + HIST_STEP * np.arange(nz[0], nz[-1] + 2)) if nz.size else np.array([]),
            "hist_counts": hist[nz[0]:nz[-1] + 1] if nz.size else np.array([], np.int64)}


def pictures_from_contexts(contexts, report=None, out_dir=None) -> dict:
    """``pictures`` for :func:`write_all` from the pipeline's stack contexts.

    ``contexts`` is the list from ``pipeline.plan`` (failed entries, tuples, are ignored).
    A context without a picture (stack skipped by ``--resume``) gets one read from its
    temperature stack in ``out_dir``, named by the stack's ``outputs`` in ``report``."""
    outputs = {s.get("name"): s.get("outputs") or {} for s in (report or {}).get("stacks", [])}
    pics = {}
    for ctx in contexts:
        if isinstance(ctx, tuple):
            continue
        pic = ctx.shared.get("picture")
        if pic is None and out_dir is not None:
            f = outputs.get(ctx.name, {}).get("temperature")
            if f and (Path(out_dir) / f).is_file():
                try:
                    pic = picture_from_tiff(Path(out_dir) / f)
                except Exception:       # a picture is not worth failing the report for
                    pic = None
        if pic is None:
            continue
        pics[ctx.name] = {**pic, "masks": dict(ctx.masks)}
    return pics
