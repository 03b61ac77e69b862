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

The pipeline encodes a stack's pictures as soon as the stack is done
(:func:`stack_pictures`, also in a job process), so that nothing but a few tens of
kilobytes per stack waits for the report. :func:`write_all` keeps each stack's encoded
pictures in ``.irpipe-pictures/`` in the output folder, keyed by the stack's report entry
(:func:`entry_key`; the same bytes whoever ran the stack): a stack skipped by
``--resume`` reuses them instead of re-reading its temperature stack.
"""
from __future__ import annotations

import contextlib
import hashlib
import json
import re
from pathlib import Path

from ..io import atomic_path, write_text_atomic
from .tables import build_findings, findings_csv, region_rows, regions_csv

__all__ = ["write_all", "build_findings", "region_rows", "picture_from_tiff", "stack_pictures", "entry_key", "page_file_names",
           "FILES", "PAGED_ABOVE_STACKS", "PAGES_DIR", "CACHE_DIR"]

FILES = ("regions.csv", "findings.csv", "report.html")
PAGED_ABOVE_STACKS = 50            # surveys with more stacks get an index page plus one page per stack
PAGES_DIR = "report_pages"         # stack pages, beside report.html
CACHE_DIR = ".irpipe-pictures"     # encoded pictures per stack, for --resume
#: picture-dict keys of report sections that draw their own pictures (heat flow, comparison);
#: passed through to them as they are, never cached
SECTION_KEYS = ("masks", "u_value_map", "compare")
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
    enc = render_stack_pictures(pic, pic.get("masks"))
    extra = {k: pic[k] for k in SECTION_KEYS if pic.get(k) is not None}
    return {**enc, **extra}


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
        # hundreds of pages drawn from the outputs again by any later run: renamed into
        # place complete, but not forced to disk one by one (as the stacks without
        # output.fsync); report.html, the tables and report.json are
        write_text_atomic(out_dir / rel, text, fsync=False)
    write_text_atomic(out_dir / "report.html", page)
    _remove_stale_pages(out_dir, set(pages))
    _store_cache(out_dir, stacks, enc)
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


def entry_key(entry):
    """SHA-256 of a stack's report.json entry without its ``seconds``: the pictures of a
    stack are those of this entry (same inputs, conditions, regions and software give the
    same entry and the same pictures; ``--resume`` skips a stack on the same grounds)."""
    blob = json.dumps({k: v for k, v in (entry or {}).items() if k != "seconds"}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def _load_cached(out_dir, name, key):
    from .pictures import loads

    try:
        enc = loads(_cache_file(out_dir, name).read_text(encoding="utf-8"))
    except OSError:
        return None
    if enc is None or enc.get("entry_key") != key:
        return None
    return enc              # with its entry_key: write_all need not store it again


def _store_cache(out_dir, stacks, enc):
    """Keep the encoded pictures of each done stack whose cached copy is missing or stale."""
    from .pictures import dumps

    for st in stacks:
        e = enc.get(st.get("name"))
        if e is None or st.get("status", "done") != "done":
            continue
        key = entry_key(st)
        if e.get("entry_key") == key:
            continue
        try:         # a cache: written atomically but without fsync, and never worth failing for
            with atomic_path(_cache_file(out_dir, st.get("name")), fsync=False) as tmp:
                # section data are not kept: the pipeline gives them anew (the U map from the
                # stack's outputs, the masks from the config)
                kept = {k: v for k, v in e.items() if k not in SECTION_KEYS}
                tmp.write_text(dumps({**kept, "entry_key": key}), encoding="utf-8")
        except OSError:
            pass


def stack_pictures(out_dir, name, outputs, picture=None, masks=None, entry=None, extra=None):
    """The encoded pictures of one finished stack (small; what the report keeps of it).

    Parameters
    ----------
    out_dir : path
        The folder holding the stack's outputs (a job's staging folder is fine).
    name : str
        Stack name.
    outputs : dict
        The stack's ``outputs`` entry of report.json (file names relative to ``out_dir``).
    picture : dict, optional
        The picture stage's data of a stack processed in this run; without it (a stack
        skipped by ``--resume``) the pictures kept in ``.irpipe-pictures/`` for the
        stack's report entry ``entry`` are used, else the picture is read back from its
        temperature stack.
    masks : dict, optional
        Region masks, {name: (M, N) bool}.
    entry : dict, optional
        The stack's report.json entry (of the earlier run, for a skipped stack).
    extra : dict, optional
        Data of report sections that draw their own pictures (``SECTION_KEYS``: a heat-flow
        stack's ``u_value_map``, a comparison's ``compare``): kept as they are, with the
        masks, and not written to the cache.

    Returns
    -------
    dict or None
        :func:`irpipe.report.pictures.render_stack_pictures`'s dict; None when there is
        nothing to draw from.
    """
    from .pictures import render_stack_pictures

    extra = {k: v for k, v in (extra or {}).items() if v is not None}
    if extra:
        extra["masks"] = dict(masks or {})
    if picture is None and out_dir is not None:
        enc = _load_cached(out_dir, name, entry_key(entry)) if entry is not None else None
        if enc is not None:
            return {**enc, **extra}
        f = (outputs or {}).get("temperature")
        if f and (Path(out_dir) / f).is_file():
            try:
                picture = picture_from_tiff(Path(out_dir) / f)
            except Exception:        # a picture is not worth failing the report for
                picture = None
    if picture is None:
        return None
    return {**render_stack_pictures(picture, masks), **extra}


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
