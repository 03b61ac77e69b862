"""The report an inspector hands over: ``regions.csv``, ``findings.csv`` and a
self-contained ``report.html``, from report.json's dict and the stacks' pictures.

``write_all(out_dir, report, pictures)`` writes the files, each atomically, and returns
their names. ``pictures[stack_name]`` is either a stack's *encoded* pictures (the small
dict of :func:`irpipe.report.pictures.render_stack_pictures`: PNG bytes and SVG text) or
its picture data, encoded on the way:

* ``mean_c``: (M, N) float32 frame-averaged corrected temperature [C], NaN invalid;
* ``hist_edges_c``, ``hist_counts``: histogram of all valid values of all frames;
* ``masks``: {region name: (M, N) bool}.

Two forms of report.html:

* up to ``PAGED_ABOVE_STACKS`` stacks: one page with every stack's section;
* more stacks: report.html is an index page (conditions, summary and numbered findings,
  one row per stack with a thumbnail) and every stack has its own self-contained page
  ``report_pages/<safe name>.html`` (:func:`page_file_names`), linked both ways. Stack
  pages of an earlier run that this run does not write are removed.

Pictures are meant to be encoded as soon as a stack is done (:func:`stack_pictures`), so
that nothing but a few tens of kilobytes per stack waits for the report. Each stack's
encoded pictures are also kept in ``.irpipe-pictures/`` in the output folder, keyed by the
size and modification time of the stack's output files: a stack skipped by ``--resume``
reuses them instead of re-reading its temperature stack.
"""
from __future__ import annotations

import contextlib
import hashlib
import re
from pathlib import Path

from ..io import atomic_path, write_text_atomic
from .tables import build_findings, findings_csv, region_rows, regions_csv

__all__ = ["write_all", "build_findings", "region_rows", "pictures_from_contexts", "picture_from_tiff",
           "stack_pictures", "page_file_names", "FILES", "PAGED_ABOVE_STACKS", "PAGES_DIR", "CACHE_DIR"]

FILES = ("regions.csv", "findings.csv", "report.html")
PAGED_ABOVE_STACKS = 50            # surveys with more stacks get an index page plus one page per stack
PAGES_DIR = "report_pages"         # stack pages, beside report.html
CACHE_DIR = ".irpipe-pictures"     # encoded pictures per stack, for --resume
_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def page_file_names(names) -> dict:
    """{stack name: "report_pages/<file>.html"}: letters, digits, '.', '_' and '-' kept,
    any other run of characters becomes '-', at most 60 characters, no leading dot; names
    that come out equal (ignoring case, for case-insensitive file systems) get -2, -3, ...
    in the order given."""
    out, taken = {}, set()
    for name in names:
        base = _SAFE.sub("-", str(name)).strip("-.")[:60].strip("-.") or "stack"
        cand, k = base, 1
        while cand.lower() in taken:
            k += 1
            cand = f"{base}-{k}"
        taken.add(cand.lower())
        out[name] = f"{PAGES_DIR}/{cand}.html"
    return out


def _encoded(pic):
    from .pictures import render_stack_pictures

    if pic is None or "thermogram_png" in pic:
        return pic
    return render_stack_pictures(pic, pic.get("masks"))


def write_all(out_dir: Path, report: dict, pictures: dict) -> list[str]:
    """Write regions.csv, findings.csv and report.html (and the stack pages of a large
    survey) into ``out_dir``; returns the file names written, relative to ``out_dir``.
    Every page is rendered before any file is written, and every file is written to a
    temporary file and renamed into place, so a failure leaves earlier complete files."""
    from . import html

    out_dir = Path(out_dir)
    findings = build_findings(report)
    enc = {name: _encoded(p) for name, p in (pictures or {}).items()}
    stacks = report.get("stacks", [])
    pages = {}
    # render first: a failure while drawing must not leave new CSVs next to an old HTML
    if len(stacks) > PAGED_ABOVE_STACKS:
        href = page_file_names([st.get("name") for st in stacks])
        files = [href[st.get("name")] for st in stacks]
        by_stack = {}
        for f in findings:
            by_stack.setdefault(f["stack"], []).append(f)
        for k, st in enumerate(stacks, 1):
            pages[files[k - 1]] = html.render_stack_page(
                report, k, st, enc.get(st.get("name")), by_stack.get(st.get("name"), []), "../report.html",
                "../" + files[k - 2] if k > 1 else None, "../" + files[k] if k < len(stacks) else None)
        page = html.render_index(report, enc, findings, href)
    else:
        page = html.render(report, enc, findings)
    write_text_atomic(out_dir / "regions.csv", regions_csv(report))
    write_text_atomic(out_dir / "findings.csv", findings_csv(findings))
    for rel, text in pages.items():
        write_text_atomic(out_dir / rel, text)
    write_text_atomic(out_dir / "report.html", page)
    _remove_stale_pages(out_dir, set(pages))
    _prune_cache(out_dir, [st.get("name") for st in stacks])
    return list(FILES) + list(pages)


def _remove_stale_pages(out_dir, keep):
    folder = out_dir / PAGES_DIR
    if not folder.is_dir():
        return
    for p in folder.glob("*.html"):
        if f"{PAGES_DIR}/{p.name}" not in keep:
            with contextlib.suppress(OSError):
                p.unlink()
    with contextlib.suppress(OSError):
        folder.rmdir()              # only when empty


# --- encoded pictures per stack, kept for --resume -----------------------------------------

def _cache_file(out_dir, name):
    safe = _SAFE.sub("-", str(name)).strip("-.")[:60]
    return Path(out_dir) / CACHE_DIR / f"{safe}-{hashlib.sha1(str(name).encode()).hexdigest()[:10]}.json"


def _prune_cache(out_dir, names):
    folder = Path(out_dir) / CACHE_DIR
    if not folder.is_dir():
        return
    keep = {_cache_file(out_dir, n).name for n in names}
    for p in folder.glob("*.json"):
        if p.name not in keep:
            with contextlib.suppress(OSError):
                p.unlink()


def _outputs_key(out_dir, outputs):
    """Name, size and modification time of each output file of a stack: the pictures of a
    stack are valid as long as these are unchanged."""
    key = []
    for kind, f in sorted((outputs or {}).items()):
        try:
            s = (Path(out_dir) / f).stat()
        except OSError:
            return None
        key.append([kind, str(f), s.st_size, s.st_mtime_ns])
    return key or None


def _load_cached(out_dir, name, key):
    from .pictures import loads

    try:
        enc = loads(_cache_file(out_dir, name).read_text(encoding="utf-8"))
    except OSError:
        return None
    if enc is None or enc.get("outputs_key") != key:
        return None
    enc.pop("outputs_key", None)
    return enc


def _store_cached(out_dir, name, enc, key):
    from .pictures import dumps

    try:             # a cache: written atomically but without fsync, and never worth failing for
        with atomic_path(_cache_file(out_dir, name), fsync=False) as tmp:
            tmp.write_text(dumps({**enc, "outputs_key": key}), encoding="utf-8")
    except OSError:
        pass


def stack_pictures(out_dir, name, outputs, picture=None, masks=None):
    """The encoded pictures of one finished stack, and keep them for ``--resume``.

    Parameters
    ----------
    out_dir : path
        The output folder (the stack's outputs, and the ``.irpipe-pictures`` cache, in it).
    name : str
        Stack name.
    outputs : dict
        The stack's ``outputs`` entry of report.json (file names relative to ``out_dir``).
    picture : dict, optional
        The picture stage's data of a stack processed in this run; without it (a stack
        skipped by ``--resume``) the cached pictures are used if the outputs are unchanged,
        else the picture is read back from the temperature stack.
    masks : dict, optional
        Region masks, {name: (M, N) bool}.

    Returns
    -------
    dict or None
        :func:`irpipe.report.pictures.render_stack_pictures`'s dict; None when there is
        nothing to draw from.
    """
    from .pictures import render_stack_pictures

    key = _outputs_key(out_dir, outputs) if out_dir is not None else None
    if picture is None and key is not None:
        enc = _load_cached(out_dir, name, key)
        if enc is not None:
            return enc
        f = (outputs or {}).get("temperature")
        if f and (Path(out_dir) / f).is_file():
            try:
                picture = picture_from_tiff(Path(out_dir) / f)
            except Exception:        # a picture is not worth failing the report for
                picture = None
    if picture is None:
        return None
    enc = render_stack_pictures(picture, masks)
    if key is not None:
        _store_cached(out_dir, name, enc, key)
    return enc


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
    """Encoded ``pictures`` for :func:`write_all` from the pipeline's stack contexts.

    ``contexts`` is the list from ``pipeline.plan`` (failed entries, tuples, are ignored).
    A context without a picture (stack skipped by ``--resume``) gets its cached pictures,
    or pictures read from its temperature stack in ``out_dir`` (:func:`stack_pictures`)."""
    outputs = {s.get("name"): s.get("outputs") or {} for s in (report or {}).get("stacks", [])}
    pics = {}
    for ctx in contexts:
        if isinstance(ctx, tuple):
            continue
        enc = stack_pictures(out_dir, ctx.name, outputs.get(ctx.name, {}), ctx.shared.get("picture"),
                             dict(ctx.masks))
        if enc is not None:
            pics[ctx.name] = enc
    return pics
