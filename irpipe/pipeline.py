"""The pipeline: run a survey config's stacks through their stage chains and write the
outputs, the manifest and the report.

Order of work: (1) the whole config is validated and every input is opened and checked
before any output is written (``plan``); (2) stacks run one after another, each prepared
when it starts and writing only temporary files until it completes, and each leaving only
its small report entry and report picture behind; (3) the report and the run manifest are
written last, atomically.

Model building from the config lives in ``irpipe.prepare``, the chain runner in
``irpipe.runner``, the manifest in ``irpipe.manifest`` and report.json's survey document
in ``irpipe.report.survey``; their public names stay importable from here.
"""
from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from . import __version__
from .config import Config, load_config
from .defaults import FRAME_CHUNK
from .errors import InputDataError, IrpipeError
from .io import remove_stale_parts, sha256, write_json_atomic
from .manifest import MANIFEST, hash_files, read_manifest, stack_fingerprint, stack_inputs, write_manifest
from .prepare import (camera_model, load_materials, path_transmittance, prepare_stack,  # noqa: F401 (public)
                      resolve_emissivity, spectral_response)
from .report.survey import CAUTIONS, REPORT_SCHEMA, build_report, now_utc  # noqa: F401 (public)
from .runner import abort_chain, local_chunks, run_chain  # noqa: F401 (public)
from .stages import StackContext, build_chain

__all__ = ["run", "plan", "run_stack", "RunResult", "write_reports", "build_report", "MANIFEST", "REPORT_SCHEMA",
           "CAUTIONS", "prepare_stack", "load_materials"]


@dataclass
class RunResult:
    report: dict
    failed: list = field(default_factory=list)   # (stack name, message, exception)
    skipped: list = field(default_factory=list)  # names of stacks skipped by --resume
    out_dir: Path | None = None

    @property
    def exit_code(self):
        if not self.failed:
            return 0
        return max(getattr(e, "exit_code", 1) for _, _, e in self.failed)


def plan(cfg: Config, out_dir: Path, options=None, with_model=True):
    """Prepare every stack of a config (``irpipe.prepare.prepare_stack``) before any work;
    returns ``(cameras, materials, contexts)``. Without ``options["keep_going"]`` the first
    input-data error is raised; with it, a failed stack's entry is ``(index, error)``.
    ``with_model=False`` checks everything but builds no measurement model (``run``
    prepares each stack again, fully, when it starts)."""
    options = options or {}
    cameras = {}
    materials = load_materials(cfg)
    contexts = []
    for i in range(len(cfg.data["stacks"])):
        try:
            ctx = prepare_stack(cfg, i, out_dir, cameras, materials, options, with_model=with_model)
        except InputDataError as exc:
            if not options.get("keep_going"):
                raise
            contexts.append((i, exc))
            continue
        contexts.append(ctx)
    return cameras, materials, contexts


def run_stack(ctx: StackContext, progress=None) -> dict:
    """Stream one stack through its stage chain (``irpipe.runner.run_chain``), with the
    pixel work local or on a dask cluster; returns its report entry."""
    chain = build_chain(ctx)
    if ctx.options.get("workers") or ctx.options.get("scheduler"):
        from .parallel import run_stack_distributed
        run_stack_distributed(ctx, chain, progress)
    else:
        run_chain(chain, ctx, local_chunks(ctx), progress, threads=ctx.options.get("threads", True))
    rep = {"name": ctx.name, "status": "done", "path": str(ctx.stack["path"].name), "frames": ctx.shape[0],
           "rows": ctx.shape[1], "cols": ctx.shape[2], "assessment": ctx.stack.get("assessment", "general")}
    rep.update(ctx.report)
    rep["outputs"] = dict(ctx.outputs)
    return rep


def _report_picture(ctx, out_dir, outputs):
    """What the report keeps of a stack to draw it: the picture stage's result, or (a stack
    skipped by --resume) one read back from its written temperature stack; with its region
    masks. None when there is nothing to draw."""
    pic = ctx.picture.as_dict() if ctx.picture is not None else None
    if pic is None:
        f = (outputs or {}).get("temperature")
        if f and (Path(out_dir) / f).is_file():
            from .report import picture_from_tiff
            try:
                pic = picture_from_tiff(Path(out_dir) / f)
            except Exception:       # a picture is not worth failing the report for
                pic = None
    if pic is None:
        return None
    pic = {**pic, "masks": dict(ctx.masks)}
    if (outputs or {}).get("u_value"):      # heat flow: the U map for the report
        from .io import read_u_value_map
        pic["u_value_map"] = (ctx.u_value_map if ctx.u_value_map is not None
                              else read_u_value_map(Path(out_dir) / outputs["u_value"]))
    return pic


def run(config_path, out_dir=None, *, resume=False, keep_going=False, quiet=True, workers=None,
        scheduler=None, write_report=True, frame_chunk=None) -> RunResult:
    """Run a survey config; returns a RunResult. Raises ConfigError / InputDataError when
    the run cannot start or (without ``keep_going``) a stack fails."""
    started = time.time()
    cfg = load_config(config_path)
    out = Path(out_dir) if out_dir else (cfg.base_dir / cfg.data["output"]["dir"])
    options = {"keep_going": keep_going, "quiet": quiet, "workers": workers, "scheduler": scheduler,
               "frame_chunk": frame_chunk or cfg.data["output"]["frame_chunk"] or FRAME_CHUNK,
               "formats": cfg.data["output"]["formats"]}
    cameras, materials, checked = plan(cfg, out, options, with_model=False)
    out.mkdir(parents=True, exist_ok=True)
    remove_stale_parts(out, before=started)
    old_manifest = read_manifest(out)
    old_stacks = {s["name"]: s for s in (old_manifest or {}).get("stacks", [])}
    manifest = {"software": "irpipe", "version": __version__, "config": str(cfg.path.name),
                "config_sha256": sha256(cfg.path), "started_utc": now_utc(), "stacks": []}
    results, failed, skipped, pictures = [], [], [], {}
    progress = _progress(quiet)
    try:
        for item in checked:
            if isinstance(item, tuple):
                i, exc = item
                name = cfg.data["stacks"][i]["name"]
                failed.append((name, str(exc), exc))
                manifest["stacks"].append({"name": name, "status": "failed", "error": str(exc)})
                results.append({"name": name, "status": "failed", "error": str(exc)})
                continue
            i, name = item.index, item.name
            item = None                 # keep nothing of the check: the stack is prepared anew
            files = stack_inputs(cfg, i)
            prev = old_stacks.get(name)
            pending = hashes = None
            if resume and prev and prev.get("status") == "done":
                hashes = hash_files(files)
                fp = stack_fingerprint(cfg, i, hashes)
                if prev.get("fingerprint") == fp and all((out / f).exists() for f in prev.get("outputs", {}).values()):
                    skipped.append(name)
                    manifest["stacks"].append(prev)
                    results.append(prev["report"])
                    if write_report:
                        ctx = prepare_stack(cfg, i, out, cameras, materials, options, with_model=False)
                        pic = _report_picture(ctx, out, prev.get("outputs"))
                        if pic is not None:
                            pictures[name] = pic
                    continue
            else:
                # hashing a large stack costs about as much as reading it: do it on the side
                # while the stack is processed (hashlib releases the GIL)
                from concurrent.futures import ThreadPoolExecutor
                pool = ThreadPoolExecutor(1)
                pending = pool.submit(hash_files, files)
                pool.shutdown(wait=False)
            try:
                t0 = time.perf_counter()
                ctx = prepare_stack(cfg, i, out, cameras, materials, options)
                rep = run_stack(ctx, progress)
                rep["seconds"] = round(time.perf_counter() - t0, 3)
            except IrpipeError as exc:
                hashes = pending.result() if pending is not None else hashes
                failed.append((name, str(exc), exc))
                manifest["stacks"].append({"name": name, "status": "failed", "error": str(exc), "inputs": hashes})
                if not keep_going:
                    write_manifest(out, manifest, old_manifest, partial=True)
                    raise
                results.append({"name": name, "status": "failed", "error": str(exc)})
                continue
            if pending is not None:
                hashes = pending.result()
                fp = stack_fingerprint(cfg, i, hashes)
            manifest["stacks"].append({"name": name, "status": "done", "fingerprint": fp, "inputs": hashes,
                                       "outputs": dict(ctx.outputs), "report": rep})
            results.append(rep)
            if write_report:
                pic = _report_picture(ctx, out, ctx.outputs)
                if pic is not None:
                    pictures[name] = pic
            ctx = None
    finally:
        if progress is not None:
            progress.close()
    report = build_report(cfg, results)
    if write_report:
        write_reports(out, report, pictures, draw=cfg.data["output"].get("report", True))
    manifest["finished_utc"] = now_utc()
    write_manifest(out, manifest, old_manifest)
    return RunResult(report, failed, skipped, out)


class _Progress:
    """Progress bar on stderr (tqdm), one bar per stack, updated after each chunk of frames."""

    def __init__(self, stream):
        from tqdm import tqdm

        self._tqdm, self._stream, self._bar, self._name = tqdm, stream, None, None

    def __call__(self, name, done, total):
        if name != self._name:
            self.close()
            self._name = name
            self._bar = self._tqdm(total=total, desc=name[:22], unit="frame", file=self._stream, leave=True,
                                   dynamic_ncols=True)
        self._bar.update(done - self._bar.n)

    def close(self):
        if self._bar is not None:
            self._bar.close()
            self._bar = None
        self._name = None


def _progress(quiet, stream=None):
    """A progress callable(name, frames_done, frames_total) drawing a bar per stack on
    stderr; None (no output) with --quiet or when stderr is not a terminal."""
    stream = stream or sys.stderr
    if quiet or not stream.isatty():
        return None
    return _Progress(stream)


def write_reports(out: Path, report: dict, pictures: dict, draw=True):
    """report.json, then (``draw``) the tables and the HTML report with the stacks'
    ``pictures`` (stack name -> picture dict, see ``irpipe.report``)."""
    write_json_atomic(out / "report.json", report)
    if draw:
        from .report import write_all
        write_all(out, report, pictures)
