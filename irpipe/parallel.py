"""Running a stack's stage chain in parallel.

Two levels:

* ``stream_chain``: the plain run. Chunks of frames flow through the chain in frame
  order, but each stage that processes chunks runs in its own thread, with the reading
  of the next chunks in another: stage *k* works on chunk *i* while stage *k+1* works on
  chunk *i-1*. Every stage still sees every chunk in order and each chunk passes the
  stages in chain order, so the results are those of the one-thread loop. numpy and the
  file reads/writes release the GIL for most of the work, so the two cores of a small
  machine are both used, and at most ``inflight`` chunks are alive at once (memory stays
  flat whatever the number of frames).
* ``run_stack_distributed``: ``irpipe run --workers N`` (a dask.distributed LocalCluster)
  or ``--scheduler ADDRESS`` (an existing cluster). The stack is a dask array made of
  per-chunk delayed reads of the TIFF pages, wrapped in an xarray DataArray; the
  radiometric stage's pure per-pixel kernel, with its prepared tables, is mapped over the
  chunks with ``xarray.apply_ufunc(..., dask="parallelized")``; the accumulating stages
  then consume the computed chunks in frame order on the client (``stream_chain``
  again), so the results are identical to the plain run.

dask, distributed and xarray are imported only by the distributed path.
"""
from __future__ import annotations

import os
import queue
import sys
import threading
from pathlib import Path

import numpy as np

#: chunks alive at once in the threaded stream (reading, in stages, being written)
INFLIGHT = 3
#: GIL switch interval while stages run in threads [s]
SWITCH_INTERVAL = 0.0005

_END = object()


def _processing(chain):
    from .stages import Stage

    return [s for s in chain if type(s).process is not Stage.process]


def stream_chain(chain, ctx, chunks, progress=None, *, threads=True, inflight=None):
    """Pass every chunk of ``chunks`` through ``chain`` (``s.process(chunk, ctx)``).

    Parameters
    ----------
    chain : list of Stage
        Started stages, in chain order.
    ctx : StackContext
    chunks : iterable of Chunk
        Chunks in frame order; consumed lazily in a reader thread (so a generator that
        reads the stack reads ahead, at most ``inflight`` chunks).
    progress : callable(name, frames_done, frames_total) or None
        Called from the calling thread after each chunk has passed every stage.
    threads : bool
        False: one loop in the calling thread (same results).
    inflight : int, optional
        Chunks alive at once (default ``INFLIGHT``).

    Raises whatever a stage or the chunk source raised, after every thread has stopped.
    """
    total = ctx.shape[0]
    active = _processing(chain)
    if not threads or not active:
        done = 0
        for chunk in chunks:
            for s in active:
                s.process(chunk, ctx)
            done += chunk.n
            if progress:
                progress(ctx.name, done, total)
        return

    stop = threading.Event()
    errors = []
    slots = threading.Semaphore(max(1, int(INFLIGHT if inflight is None else inflight)))
    qs = [queue.Queue(maxsize=1) for _ in range(len(active) + 1)]

    def put(q, item):
        while not stop.is_set():
            try:
                q.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def get(q):
        while not stop.is_set():
            try:
                return q.get(timeout=0.05)
            except queue.Empty:
                continue
        return _END

    def fail(exc):
        errors.append(exc)
        stop.set()

    def feed():
        try:
            it = iter(chunks)
            while True:
                while not slots.acquire(timeout=0.05):
                    if stop.is_set():
                        return
                if stop.is_set():
                    return
                chunk = next(it, _END)
                end = chunk is _END
                ok = put(qs[0], chunk)
                chunk = None
                if not ok or end:
                    return
        except BaseException as exc:        # noqa: BLE001 - re-raised in the caller
            fail(exc)

    def work(k, stage):
        try:
            while True:
                chunk = get(qs[k])
                if chunk is _END:
                    put(qs[k + 1], _END)
                    return
                stage.process(chunk, ctx)
                ok = put(qs[k + 1], chunk)
                chunk = None          # hold no chunk while waiting for the next
                if not ok:
                    return
        except BaseException as exc:        # noqa: BLE001 - re-raised in the caller
            fail(exc)

    # stages hand the GIL over between numpy calls: a short switch interval keeps a
    # stage that waits for it (the radiometric stage, which feeds all others) from
    # waiting the default 5 ms behind another stage's Python code
    interval = sys.getswitchinterval()
    sys.setswitchinterval(min(interval, SWITCH_INTERVAL))
    workers = [threading.Thread(target=feed, name="irpipe-read", daemon=True)]
    workers += [threading.Thread(target=work, args=(k, s), name=f"irpipe-{s.name}", daemon=True)
                for k, s in enumerate(active)]
    for w in workers:
        w.start()
    done = 0
    try:
        while True:
            chunk = get(qs[-1])
            if chunk is _END:
                break
            done += chunk.n
            chunk = None
            slots.release()
            if progress:
                progress(ctx.name, done, total)
    except BaseException as exc:
        fail(exc)
    finally:
        stop.set()
        for w in workers:
            w.join()
        sys.setswitchinterval(interval)
    if errors:
        raise errors[0]


# --- distributed --------------------------------------------------------------------

_READERS = {}


def _read_frames(path, start, stop, label):
    """Frames [start, stop) of a stack (one reader per stack and process, kept open)."""
    from .io import StackReader

    st = os.stat(path)
    key = (str(path), st.st_size, st.st_mtime_ns)
    r = _READERS.get(key)
    if r is None:
        for k in [k for k in _READERS if k[0] == key[0]]:
            _READERS.pop(k).close()
        r = _READERS[key] = StackReader(path, label)
    return r.read(start, stop)


def lazy_stack(path, shape, dtype, frame_chunk, label="stack"):
    """The raw stack as a dask-backed ``xarray.DataArray`` (frame, row, col): one delayed
    read of the TIFF pages per chunk of ``frame_chunk`` frames. Nothing is read until a
    chunk is computed."""
    import dask
    import dask.array as da
    import xarray as xr

    n, rows, cols = shape
    size = max(1, int(frame_chunk))
    token = dask.base.tokenize(str(path), os.stat(path).st_mtime_ns, shape, str(dtype), size)
    blocks = []
    for first in range(0, n, size):
        stop = min(n, first + size)
        d = dask.delayed(_read_frames, pure=True)(str(path), first, stop, label,
                                                  dask_key_name=f"irpipe-read-{token}-{first}")
        blocks.append(da.from_delayed(d, (stop - first, rows, cols), dtype=np.dtype(dtype)))
    data = da.concatenate(blocks, axis=0) if len(blocks) > 1 else blocks[0]
    return xr.DataArray(data, dims=("frame", "row", "col"), name="raw",
                        coords={"frame": np.arange(n), "row": np.arange(rows), "col": np.arange(cols)},
                        attrs={"source": Path(path).name})


class PixelKernel:
    """The per-pixel part of a stack's chain as a pure function of a chunk of raw values:
    the stages up to and including the radiometric stage (bad-pixel fill, radiometric
    correction), with the tables those stages prepared in ``start``.

    ``kernel(raw)`` returns ``(temperature_c, side[, aux])``: the temperature (F, M, N)
    float32, ``side`` (F, 5) float64 = per frame the invalid pixels by reason code 1..4
    and the reflector-method reflected temperature [K] (NaN when not used), and ``aux``
    the per-pixel input the uncertainty stage reads (lookup index or signal) when it is
    in the chain. The object holds only numpy tables and models, so it pickles to the
    workers of a cluster.
    """

    SIDE = 5

    def __init__(self, pre, radiometric, ctx=None):
        import copy

        # what the stages' process() may read of the context (names and conditions for
        # messages, the config for errors)
        self.ctx_info = {} if ctx is None else {"name": ctx.name, "index": ctx.index, "cfg": ctx.cfg,
                                                 "conditions": ctx.conditions}
        self.pre = list(pre)
        rad = copy.copy(radiometric)
        if rad.lookup:   # accumulators are the client's; each call starts its own
            rad.hist = rad.hist2d = None
        self.rad = rad
        self.aux = rad.export_index
        # issue 12: an align stage needs the stack's frame numbers and reports its own
        # invalid-pixel reasons (two more side columns)
        self.frames = any(getattr(s, "name", "") == "align" for s in self.pre)
        self.side = self.SIDE + (2 if self.frames else 0)
        self.aux_dtype = None
        if self.aux:
            self.aux_dtype = np.int32 if rad.lookup else np.float64

    def __call__(self, raw, frames=None):
        from .correction import REASONS
        from .stages import Chunk

        import copy

        raw = np.array(raw, copy=True, order="C")
        f = raw.shape[0]
        side = np.zeros((f, self.side))
        side[:, 4] = np.nan
        st = copy.copy(self.rad)
        codes = sorted(REASONS)
        aux = np.empty(raw.shape, self.aux_dtype) if self.aux else None
        kctx = _KernelContext(**self.ctx_info)
        if st.lookup:
            st.hist = np.zeros(st.lut.size, np.int64)
            st.hist2d = st.hist.reshape(st.lut.shape)
            st.window = None
            reason_flat = st.reason_lut.ravel()
        out = np.empty(raw.shape, np.float32)
        for k in range(f):
            chunk = Chunk(k if frames is None else int(frames[k]), raw[k:k + 1])
            for s in self.pre:
                s.process(chunk, kctx)
            before = dict(kctx.invalid)
            st.process(chunk, kctx)
            out[k] = chunk.temperature_c[0]
            if st.lookup:
                if chunk.extras.get("invalid_count"):
                    bad = np.isnan(out[k])
                    r = chunk.raw[0][bad].astype(np.int64) - st.base
                    if st.index is not None:
                        r += st.index[bad].astype(np.int64) * st.nv
                    side[k, :4] = np.bincount(reason_flat[r], minlength=max(codes) + 1)[codes]
            else:
                side[k, :4] = [kctx.invalid[REASONS[c]] - before[REASONS[c]] for c in codes]
            refl = chunk.extras.get("reflected_temperature_k")
            if refl is not None:
                side[k, 4] = float(np.asarray(refl).reshape(-1)[0])
            if self.frames:          # issue 12: align stage's reasons
                side[k, self.SIDE:] = list(chunk.extras.get("align_invalid", {}).values())
            if aux is not None:
                aux[k] = chunk.extras["lookup_index" if st.lookup else "signal"][0]
        return (out, side, aux) if aux is not None else (out, side)


class _KernelContext:
    """The little of a StackContext that the per-pixel stages' process() touches."""

    def __init__(self, name="stack", index=0, cfg=None, conditions=None):
        from .correction import REASONS

        self.invalid = {v: 0 for v in REASONS.values()}
        self.shared = {}
        self.name, self.index, self.cfg, self.conditions = name, index, cfg, conditions or {}


def lazy_temperature(raw, kernel):
    """Map ``kernel`` (a PixelKernel) over the chunks of ``raw`` (from ``lazy_stack``) with
    ``xarray.apply_ufunc(..., dask="parallelized")``; returns the lazy outputs as
    DataArrays ``(temperature_c, side[, aux])``. Nothing is computed."""
    import xarray as xr

    out_dims = [["row", "col"], ["side"]]
    dtypes = [np.float32, np.float64]
    if kernel.aux:
        out_dims.append(["row", "col"])
        dtypes.append(kernel.aux_dtype)
    args, core = [raw], [["row", "col"]]
    if getattr(kernel, "frames", False):     # issue 12: the frame numbers travel with the chunks
        import dask.array as da
        args.append(xr.DataArray(da.from_array(np.arange(raw.shape[0]), chunks=(raw.data.chunks[0],)),
                                 dims=("frame",)))
        core.append([])
    res = xr.apply_ufunc(kernel, *args, input_core_dims=core, output_core_dims=out_dims,
                         dask="parallelized", output_dtypes=dtypes,
                         dask_gufunc_kwargs={"output_sizes": {"side": getattr(kernel, "side", PixelKernel.SIDE)}})
    t = res[0].rename("temperature")
    t.attrs.update(units="degC", long_name="surface temperature", standard_name="surface_temperature")
    return (t,) + tuple(res[1:])


def run_stack_distributed(ctx, progress=None):
    """``run_stack`` on a dask.distributed cluster: ``--workers N`` starts a LocalCluster
    of N single-threaded worker processes, ``--scheduler ADDRESS`` uses a running one.

    The per-pixel kernel runs on the workers; the accumulating and writing stages take
    the computed chunks in frame order on the client, a few chunks ahead being computed
    meanwhile, so reports and outputs are those of the plain run."""
    from .correction import REASONS
    from .errors import InputDataError
    from .stages import Chunk, build_chain

    try:
        import dask  # noqa: F401
        import xarray  # noqa: F401
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise InputDataError(f"--workers/--scheduler need dask.distributed and xarray ({exc}); "
                             "install irpipe[cluster]") from None
    size = int(ctx.options.get("frame_chunk") or 32)
    n, rows, cols = ctx.shape
    chain = build_chain(ctx)
    names = [s.name for s in chain]
    k_rad = names.index("radiometric")
    rad = chain[k_rad]
    cluster = client = None
    try:
        for s in chain:
            s.start(ctx)
            if s is rad:
                # the client sees temperatures, not the table counts: the picture stage
                # bins the temperatures (same bins), invalid counts come from the kernel
                ctx.shared.pop("lookup_histogram", None)
        kernel = PixelKernel(chain[:k_rad], rad, ctx)
        raw = lazy_stack(ctx.stack["path"], ctx.shape, ctx.dtype, size, label=f"stack '{ctx.name}'")
        outs = lazy_temperature(raw, kernel)
        ctx.shared["temperature_dataarray"] = outs[0]
        if ctx.options.get("scheduler"):
            client = Client(ctx.options["scheduler"], set_as_default=False)
        else:
            cluster = LocalCluster(n_workers=int(ctx.options["workers"]), threads_per_worker=1,
                                   processes=bool(ctx.options.get("processes", True)),
                                   dashboard_address=None)
            client = Client(cluster, set_as_default=False)
        blocks = [o.data.to_delayed().reshape(-1) for o in outs]
        ahead = max(2, 2 * len(client.nthreads() or {0: 1}))
        codes = sorted(REASONS)

        aux_key = "lookup_index" if rad.lookup else "signal"   # read before rad.lookup is reset below

        def computed():
            pending = {}
            for k in range(len(blocks[0])):
                for j in range(k, min(len(blocks[0]), k + ahead)):
                    if j not in pending:
                        pending[j] = client.compute([b[j] for b in blocks])
                res = [f.result() for f in pending.pop(k)]
                t, side = res[0], res[1]
                first = k * size
                chunk = Chunk(first, np.empty((t.shape[0], 0, 0), ctx.dtype), temperature_c=t)
                for c, label in zip(codes, (REASONS[c] for c in codes)):
                    ctx.invalid[label] += int(side[:, codes.index(c)].sum())
                chunk.extras["invalid_count"] = int(side[:, :4].sum())
                if side.shape[1] > PixelKernel.SIDE:      # issue 12: align stage's reasons
                    from .alignment import ALIGN_REASONS
                    for j, label in enumerate(ALIGN_REASONS.values()):
                        ctx.invalid[label] = ctx.invalid.get(label, 0) + int(side[:, PixelKernel.SIDE + j].sum())
                    chunk.extras["invalid_count"] += int(side[:, PixelKernel.SIDE:].sum())
                if np.isfinite(side[:, 4]).any():
                    chunk.extras["reflected_temperature_k"] = side[:, 4].copy()
                    ctx.shared.setdefault("reflected_series_k", []).extend(side[:, 4].tolist())
                if len(res) > 2:
                    chunk.extras[aux_key] = res[2]
                yield chunk

        rad.lookup = False        # its finish reports ctx.invalid as accumulated above
        stream_chain(chain[k_rad + 1:], ctx, computed(), progress)
        for s in chain:
            s.finish(ctx)
    except BaseException:
        from .pipeline import abort_chain
        abort_chain(chain, ctx)
        raise
    finally:
        ctx.shared.pop("temperature_dataarray", None)
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    rep = {"name": ctx.name, "status": "done", "path": str(ctx.stack["path"].name), "frames": n,
           "rows": rows, "cols": cols, "assessment": ctx.stack.get("assessment", "general")}
    rep.update(ctx.report)
    rep["outputs"] = dict(ctx.outputs)
    ctx.shared.pop("reader", None)
    return rep
