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

import contextlib
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


def _report_picture(ctx, out_dir, outputs, entry=None):
    """What the report keeps of a stack to draw it: its pictures, encoded at once from the
    picture stage's result and the region masks (a few tens of kB; ``irpipe.report.
    stack_pictures``), or for a stack skipped by --resume the ones kept for its report
    ``entry`` (else read back from its temperature stack). None when there is nothing to
    draw."""
    from .report import stack_pictures

    pic = ctx.picture.as_dict() if ctx.picture is not None else None
    extra = {}                              # section data drawn by their own report modules
    if ctx.comparison_picture is not None:
        extra["compare"] = ctx.comparison_picture
    if (outputs or {}).get("u_value"):      # heat flow: the U map for the report
        from .io import read_u_value_map
        extra["u_value_map"] = (ctx.u_value_map if ctx.u_value_map is not None
                                else read_u_value_map(Path(out_dir) / outputs["u_value"]))
    return stack_pictures(out_dir, ctx.name, outputs, pic, dict(ctx.masks), entry, extra)


@dataclass
class _Outcome:
    """What a stack's run leaves behind (small: no arrays but the report picture)."""

    index: int
    name: str
    ok: bool
    report: dict | None = None
    error: Exception | None = None
    fingerprint: str | None = None
    hashes: dict | None = None
    outputs: dict = field(default_factory=dict)
    picture: dict | None = None


_WORKER = {}


def _worker_state(config_path):
    """Per-process config, camera models and material library (a job process runs many
    stacks; they are built once per process). A job process also keeps its BLAS to one
    thread: the jobs already use every core, and BLAS threads on top of them only contend
    (measured on 2 cores: a 4-frame stack with uncertainty took 0.8 s instead of 0.4 s)."""
    key = str(config_path)
    if "blas" not in _WORKER:
        from threadpoolctl import threadpool_limits
        _WORKER["blas"] = threadpool_limits(limits=1, user_api="blas")
    if _WORKER.get("key") != key:
        cfg = load_config(config_path)
        _WORKER.update(key=key, cfg=cfg, cameras={}, materials=load_materials(cfg))
        if _WORKER.get("forked_job"):       # a job process of this run's own pool
            from .buffers import tune_allocator
            tune_allocator()                # (the command line has set it before the fork)
            _freeze_heap()
    return _WORKER["cfg"], _WORKER["cameras"], _WORKER["materials"]


def _freeze_heap():
    """Exempt every object alive now (modules, config, material library) from the
    collector's scans (``gc.freeze``): the full collection after each stack of a survey
    (``_release_heap``) then looks at that stack's objects only (measured: 19 ms per stack
    for a full scan of the imported modules' objects, once per stack). Garbage is
    collected first, so that no unreachable cycle is frozen. Only in the run's own forked
    job processes, which end with the run: a frozen object that later becomes cyclic
    garbage is never freed, which a caller's process or a dask worker must not inherit."""
    import gc
    gc.collect()
    gc.freeze()


def _release_heap():
    """Free a finished stack's objects now (they form reference cycles, which Python's
    collector would reach only later) and give the heap memory back to the system (glibc
    ``malloc_trim``). ``buffers.tune_allocator`` raises glibc's trim threshold so that
    chunk buffers are reused within a stack; between stacks of a survey that would let the
    resident size creep up with every stack. Linux/glibc only."""
    import gc

    gc.collect()        # the stack's context and stages refer to each other: free them now
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):
        pass


def _one_blas_thread():
    """One BLAS thread while a stack is prepared and run: its BLAS calls are small, and
    idle BLAS threads spin on the cores the stage threads need (5-7 % of a long stack's
    CPU time in a profile)."""
    from threadpoolctl import threadpool_limits
    return threadpool_limits(limits=1, user_api="blas")


def _run_one(cfg, cameras, materials, i, out, options, progress=None, want_picture=True) -> _Outcome:
    """Prepare and run stack ``i`` into ``out``; hashes its inputs alongside."""
    from concurrent.futures import ThreadPoolExecutor

    name = cfg.data["stacks"][i]["name"]
    # hashing a large stack costs about as much as reading it: do it on the side while the
    # stack is processed (hashlib releases the GIL)
    with ThreadPoolExecutor(1) as pool:
        pending = pool.submit(hash_files, stack_inputs(cfg, i))
        try:
            t0 = time.perf_counter()
            with _one_blas_thread() if "blas" not in _WORKER else contextlib.nullcontext():
                ctx = prepare_stack(cfg, i, out, cameras, materials, options)
                rep = run_stack(ctx, progress)
            rep["seconds"] = round(time.perf_counter() - t0, 3)
        except IrpipeError as exc:
            return _Outcome(i, name, False, error=exc, hashes=pending.result())
        hashes = pending.result()
    pic = _report_picture(ctx, out, ctx.outputs) if want_picture else None
    outputs = dict(ctx.outputs)
    ctx = None
    _release_heap()
    return _Outcome(i, name, True, report=rep, fingerprint=stack_fingerprint(cfg, i, hashes), hashes=hashes,
                    outputs=outputs, picture=pic)


def _job(config_path, i, stage_dir, options, want_picture):
    """One stack in a job process, into its own staging folder."""
    cfg, cameras, materials = _worker_state(config_path)
    Path(stage_dir).mkdir(parents=True, exist_ok=True)
    # one thread per job: the jobs already keep the cores busy, and stage threads on top
    # of them only contend (measured: a 4-frame stack took twice as long)
    return _run_one(cfg, cameras, materials, i, Path(stage_dir), dict(options, quiet=True, threads=False), None,
                    want_picture)


def default_jobs() -> int:
    """Stack processes by default: the machine's cores."""
    import os
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))


def run(config_path, out_dir=None, *, resume=False, keep_going=False, quiet=True, workers=None,
        scheduler=None, write_report=True, frame_chunk=None, jobs=None) -> RunResult:
    """Run a survey config; returns a RunResult. Raises ConfigError / InputDataError when
    the run cannot start or (without ``keep_going``) a stack fails.

    ``jobs``: stacks processed at once in separate processes (default: one; the command
    line defaults to the machine's cores). Outputs, manifest, report and exit code are
    those of the serial run: each job writes into a staging folder and its outputs are
    moved into place in config order, so that without ``keep_going`` a failed stack leaves
    no output of the stacks after it."""
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
    draw = write_report and cfg.data["output"].get("report", True)

    # (1) decide per stack: failed at the check, unchanged (--resume), or to run
    todo = []
    for item in checked:
        if isinstance(item, tuple):
            todo.append(("checkfail", item[0], item[1]))
            continue
        i, name = item.index, item.name
        prev = old_stacks.get(name)
        if resume and prev and prev.get("status") == "done":
            fp = stack_fingerprint(cfg, i, hash_files(stack_inputs(cfg, i)))
            if prev.get("fingerprint") == fp and all((out / f).exists() for f in prev.get("outputs", {}).values()):
                todo.append(("skip", i, prev))
                continue
        todo.append(("run", i, None))
    checked = None                      # keep nothing of the check: each stack is prepared anew

    def settle(o: _Outcome):
        """Record a finished stack in config order; raise when the run must stop."""
        if o.ok:
            from .fingerprint import pixel_fingerprint
            manifest["stacks"].append({"name": o.name, "status": "done", "fingerprint": o.fingerprint,
                                       "pixel_fingerprint": pixel_fingerprint(cfg, o.index, o.hashes),
                                       "inputs": o.hashes, "outputs": o.outputs, "report": o.report})
            results.append(o.report)
            if o.picture is not None:
                pictures[o.name] = o.picture
            return
        failed.append((o.name, str(o.error), o.error))
        manifest["stacks"].append({"name": o.name, "status": "failed", "error": str(o.error), "inputs": o.hashes})
        if not keep_going:
            write_manifest(out, manifest, old_manifest, partial=True)
            raise o.error
        results.append({"name": o.name, "status": "failed", "error": str(o.error)})

    def settle_other(kind, i, extra):
        name = cfg.data["stacks"][i]["name"]
        if kind == "checkfail":
            failed.append((name, str(extra), extra))
            manifest["stacks"].append({"name": name, "status": "failed", "error": str(extra)})
            results.append({"name": name, "status": "failed", "error": str(extra)})
            return
        skipped.append(name)
        manifest["stacks"].append(extra)
        results.append(extra["report"])
        if draw:
            ctx = prepare_stack(cfg, i, out, cameras, materials, options, with_model=False)
            pic = _report_picture(ctx, out, extra.get("outputs"), extra.get("report"))
            if pic is not None:
                pictures[name] = pic

    n_run = sum(1 for k, _, _ in todo if k == "run")
    jobs = max(1, int(jobs or 1))
    if any(isinstance((st.get("compare") or {}).get("baseline"), str) for st in cfg.data["stacks"]):
        # a comparison reads its baseline's mean frame from this run, so the stacks
        # of such a survey run one after another (whole-stack jobs would race)
        jobs, scheduler_jobs = 1, False
    else:
        scheduler_jobs = True
    if scheduler and n_run > 1 and scheduler_jobs:
        # a survey of many stacks on a cluster: whole stacks are the unit of work; the
        # workers read the inputs and write into the (shared) output folder
        _run_jobs(cfg, todo, out, dict(options, scheduler=None, workers=None), jobs, draw, settle, settle_other,
                  quiet, scheduler=scheduler)
    elif jobs > 1 and n_run > 1 and not (workers or scheduler):
        _run_jobs(cfg, todo, out, options, jobs, draw, settle, settle_other, quiet)
    else:
        progress = _progress(quiet)
        try:
            for kind, i, extra in todo:
                if kind != "run":
                    settle_other(kind, i, extra)
                    continue
                settle(_run_one(cfg, cameras, materials, i, out, options, progress, draw))
        finally:
            if progress is not None:
                progress.close()
    report = build_report(cfg, results)
    if write_report:
        write_reports(out, report, pictures, draw=draw)
    manifest["finished_utc"] = now_utc()
    write_manifest(out, manifest, old_manifest)
    return RunResult(report, failed, skipped, out)


def _run_jobs(cfg, todo, out, options, jobs, draw, settle, settle_other, quiet, scheduler=None):
    """Run the stacks of ``todo`` in ``jobs`` processes (or on the workers of the dask
    cluster at ``scheduler``); settle them in config order and move each stack's outputs
    from its staging folder into ``out`` as it is settled."""
    import multiprocessing
    import shutil
    import tempfile
    from concurrent.futures import ProcessPoolExecutor

    stage_root = Path(tempfile.mkdtemp(prefix=".irpipe-jobs.", suffix=".part", dir=out))
    # fork: the job processes start with irpipe already imported (no import per stack)
    ctx = multiprocessing.get_context("fork") if "fork" in multiprocessing.get_all_start_methods() else None
    bar = None
    if not quiet and sys.stderr.isatty():
        from tqdm import tqdm
        bar = tqdm(total=sum(1 for k, _, _ in todo if k == "run"), desc="stacks", unit="stack", file=sys.stderr)
    if scheduler:
        try:
            from distributed import Client
        except ImportError as exc:
            raise InputDataError(f"--scheduler needs dask.distributed ({exc}); install irpipe[cluster]") from None
        pool = Client(scheduler, set_as_default=False)
    else:
        # the parent lets go of the tables its check built before the job processes are
        # forked: a forked process starts with its parent's resident pages, and the peak of
        # the summed resident size came at that moment (886 MB for 200 stacks, 3 x 300 MB).
        # Each job builds its own tables once (a fixed cost of about 0.3 s per process).
        from . import modeltables
        modeltables.clear()
        _release_heap()
        # the job processes, forked from here, know they are disposable: they may freeze
        # their heap (``_freeze_heap``); a dask worker process may not
        _WORKER["forked_job"] = True
        pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx)
    try:
        futures = {}
        for kind, i, _ in todo:
            if kind == "run":
                opts = {k: v for k, v in options.items()}
                futures[i] = pool.submit(_job, str(cfg.path.resolve()), i, str(stage_root.resolve() / str(i)), opts,
                                         draw, **({"pure": False} if scheduler else {}))
        for kind, i, extra in todo:
            if kind != "run":
                settle_other(kind, i, extra)
                continue
            o = futures.pop(i).result()
            if bar is not None:
                bar.update(1)
            if o.ok:
                for f in o.outputs.values():
                    dest = out / f
                    if dest.is_dir() and not dest.is_symlink():
                        shutil.rmtree(dest)
                    (stage_root / str(i) / f).replace(dest)
                if o.picture is not None:
                    o.picture = None if not draw else o.picture
            try:
                settle(o)
            except BaseException:
                for fut in futures.values():
                    fut.cancel()
                raise
    finally:
        if scheduler:
            pool.close()
        else:
            pool.shutdown(wait=True, cancel_futures=True)
            _WORKER.pop("forked_job", None)
        if bar is not None:
            bar.close()
        shutil.rmtree(stage_root, ignore_errors=True)


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
