"""The one chain runner: ``run_chain(chain, ctx, chunks)`` starts the stages, streams the
chunks through them in frame order and finishes them, or lets every stage clean up when
anything fails. Every way of running a stack uses it: the plain run (chunks read from
the stack file, ``local_chunks``), the cluster run (chunks whose pixel work was done on
dask workers, ``irpipe.parallel``) and the field commands.

Streaming: each stage that processes chunks runs in its own thread, with the reading of
the next chunks in another: stage *k* works on chunk *i* while stage *k+1* works on chunk
*i-1*. Every stage still sees every chunk in order and each chunk passes the stages in
chain order, so the results are those of the one-thread loop (``threads=False``). numpy
and file reads/writes release the GIL for most of the work, so two cores are both used,
and at most ``INFLIGHT`` chunks are alive at once (memory stays flat whatever the number
of frames).
"""
from __future__ import annotations

import queue
import sys
import threading

from .buffers import BufferPool
from .io import StackReader
from .stages.base import Chunk, processes_chunks

#: chunks alive at once in the threaded stream (reading, in stages, being written)
INFLIGHT = 3
#: GIL switch interval while stages run in threads [s]
SWITCH_INTERVAL = 0.0005

_END = object()


def local_chunks(ctx, size=None):
    """Chunks of the stack's raw frames read from its file, in frame order (a generator;
    the file is closed when it ends or is closed)."""
    size = size or ctx.frame_chunk
    n = ctx.shape[0]
    pool = BufferPool()                 # read buffers, reused once no stage holds them
    with StackReader(ctx.stack["path"], f"stack '{ctx.name}'") as reader:
        for first in range(0, n, size):
            stop = min(n, first + size)
            out = pool.empty((stop - first,) + tuple(ctx.shape[1:]), reader.dtype)
            yield Chunk(first, reader.read(first, stop, out=out))


def abort_chain(chain, ctx):
    """Let every stage release and delete what it made (a stack failed)."""
    for s in chain:
        try:
            s.abort(ctx)
        except Exception:
            pass


def run_chain(chain, ctx, chunks, progress=None, *, threads=True, started=False, skip=()):
    """Run a stack's chain over a chunk source.

    Parameters
    ----------
    chain : list of Stage
        From ``irpipe.stages.build_chain``.
    ctx : StackContext
    chunks : iterable of Chunk, or callable returning one
        Chunks in frame order. A callable is called after the stages have started (a
        source that needs the started stages, e.g. the cluster's).
    progress : callable(name, frames_done, frames_total) or None
    threads : bool
        False: one loop in the calling thread (same results).
    started : bool
        The stages were started by the caller.
    skip : tuple of str
        Names of stages whose per-chunk work the source has already done (the cluster
        source runs the pixel kernel on the workers); they still start and finish here.
    """
    try:
        if not started:
            for s in chain:
                s.start(ctx)
        source = chunks() if callable(chunks) else chunks
        try:
            active = [s for s in chain if processes_chunks(s) and s.name not in skip]
            stream_chain(active, ctx, source, progress, threads=threads)
        finally:
            close = getattr(source, "close", None)
            if close is not None:
                close()
        for s in chain:
            s.finish(ctx)
    except BaseException:
        abort_chain(chain, ctx)
        raise


def stream_chain(active, ctx, chunks, progress=None, *, threads=True, inflight=None):
    """Pass every chunk of ``chunks`` through the stages ``active`` (``s.process(chunk, ctx)``),
    in frame order; raises whatever a stage or the chunk source raised, after every thread
    has stopped."""
    total = ctx.shape[0]
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
