"""The report an inspector hands over: ``regions.csv``, ``findings.csv`` and a
self-contained ``report.html``, from report.json's dict and the stacks' pictures.

``write_all(out_dir, report, pictures)`` writes the three files, each atomically, and
returns their names. ``pictures[stack_name]`` is a dict with

* ``mean_c``: (M, N) float32 frame-averaged corrected temperature [C], NaN invalid;
* ``first_c``: the first frame [C];
* ``hist_edges_c``, ``hist_counts``: histogram of all valid values of all frames;
* ``masks``: {region name: (M, N) bool}.

The pipeline keeps one such dict per stack (the picture stage's ``ctx.picture`` plus the
region masks) or, for stacks skipped by ``--resume``, reads it back from the written
temperature stack with ``picture_from_tiff``.

Matplotlib is imported only while pictures are drawn.
"""
from __future__ import annotations

from pathlib import Path

from ..io import write_text_atomic
from .tables import build_findings, findings_csv, region_rows, regions_csv

__all__ = ["write_all", "build_findings", "region_rows", "picture_from_tiff", "FILES"]

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
    in chunks of frames; same binning as the picture stage (``irpipe.regions.picture_bins``)."""
    import numpy as np

    from ..io import StackReader
    from ..regions import PICTURE_BINS, histogram_extent, picture_bins

    with StackReader(path, "temperature stack") as r:
        total = np.zeros(r.shape[1:], np.float64)
        cnt = np.zeros(r.shape[1:], np.int64)
        hist = np.zeros(PICTURE_BINS, np.int64)
        first = None
        for _, t in r.chunks(chunk):
            t = t.astype(np.float32, copy=False)
            ok = np.isfinite(t)
            total += np.where(ok, t, 0.0).sum(0)
            cnt += ok.sum(0)
            if first is None:
                first = t[0].copy()
            hist += np.bincount(picture_bins(t[ok]), minlength=PICTURE_BINS)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, total / np.maximum(cnt, 1), np.nan).astype(np.float32)
    edges, counts = histogram_extent(hist)
    return {"mean_c": mean, "first_c": first, "hist_edges_c": edges, "hist_counts": counts}
