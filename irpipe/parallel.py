"""Running a stack's pixel work on a dask cluster.

``irpipe run --workers N`` (a dask.distributed LocalCluster) or ``--scheduler ADDRESS``
(an existing cluster): the stack is a dask array made of per-chunk delayed reads of the
TIFF pages, wrapped in an xarray DataArray; the pure pixel kernel (``irpipe.kernel``:
bad-pixel fill and radiometric correction with the stack's frozen tables) is mapped over
the chunks with ``xarray.apply_ufunc(..., dask="parallelized")``; the computed chunks are
the chunk source of the one chain runner (``irpipe.runner.run_chain``), which feeds them
to the accumulating and writing stages in frame order on the client, so reports and
outputs are those of the plain run.

dask, distributed and xarray are imported only here.
"""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from .calibration import BadPixelFiller
from .correction import REASONS
from .errors import InputDataError
from .alignment import ALIGN_REASONS
from .kernel import correct, correct_signal, count_values
from .runner import run_chain
from .stages.base import Chunk
from .stages.radiometric import RadiometricStage

#: reason codes in the order of the first columns of a block's side output
CODES = tuple(sorted(REASONS))

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


def pixel_block(raw, frames=None, *, tables, bad_pixel_mask=None, want_signal=False, want_index=False, align=None):
    """The pixel kernel on one block of raw frames (runs on a worker).

    Returns ``(temperature_c, side[, aux])``: temperature (F, M, N) float32; ``side``
    (F, len(CODES) + 1) float64 with the block's invalid pixels by reason code (columns in
    the order of ``CODES``, counted in the block's first frame) and, in the last column,
    the reflector method's reflected temperature of each frame [K] (NaN when not used);
    ``aux`` the signal or lookup index when asked for."""
    raw = np.array(raw, copy=True, order="C")
    if bad_pixel_mask is not None:
        BadPixelFiller(bad_pixel_mask).fill(raw)
    if align is not None:           # the align stage's resampling, then the per-pixel plan
        s, code = align.resample_chunk(raw, frames)
        res = correct_signal(s, code, tables, want_signal=want_signal)
        side = np.zeros((raw.shape[0], len(CODES) + 1 + len(ALIGN_REASONS)))
        side[0, len(CODES) + 1:] = [np.count_nonzero(code == c) for c in ALIGN_REASONS]
    else:
        res = correct(raw, tables, want_signal=want_signal, want_index=want_index)
        side = np.zeros((raw.shape[0], len(CODES) + 1))
    side[:, len(CODES)] = np.nan
    side[0, :len(CODES)] = [res.invalid_counts[c] for c in CODES]
    if res.reflected_temperature_k is not None:
        side[:, len(CODES)] = res.reflected_temperature_k
    if want_signal or want_index:
        return res.temperature_c, side, (res.signal if want_signal else res.lookup_index)
    return res.temperature_c, side


def block_counts(raw, *, tables, bad_pixel_mask=None):
    """The (tally group, raw value) counts of one block of raw frames (runs on a worker,
    from the same read as ``pixel_block``): ``(first column, (groups, span) counts)``."""
    raw = np.array(raw, copy=True, order="C")
    if bad_pixel_mask is not None:
        BadPixelFiller(bad_pixel_mask).fill(raw)
    return count_values(raw, tables)


def lazy_temperature(raw, tables, bad_pixel_mask=None, want_signal=False, want_index=False, align=None):
    """Map ``pixel_block`` over the chunks of ``raw`` (from ``lazy_stack``) with
    ``xarray.apply_ufunc(..., dask="parallelized")``; returns the lazy outputs as
    DataArrays ``(temperature_c, side[, aux])``. Nothing is computed."""
    import xarray as xr

    out_dims = [["row", "col"], ["side"]]
    dtypes = [np.float32, np.float64]
    aux = want_signal or want_index
    if aux:
        out_dims.append(["row", "col"])
        dtypes.append(np.float64 if want_signal else np.int32)
    args, core = [raw], [["row", "col"]]
    if align is not None:           # the frame numbers travel with the chunks
        import dask.array as da
        args.append(xr.DataArray(da.from_array(np.arange(raw.shape[0]), chunks=(raw.data.chunks[0],)),
                                 dims=("frame",)))
        core.append([])
    n_side = len(CODES) + 1 + (len(ALIGN_REASONS) if align is not None else 0)
    res = xr.apply_ufunc(pixel_block, *args, kwargs={"tables": tables, "bad_pixel_mask": bad_pixel_mask,
                                                     "want_signal": want_signal, "want_index": want_index,
                                                     "align": align},
                         input_core_dims=core, output_core_dims=out_dims,
                         dask="parallelized", output_dtypes=dtypes,
                         dask_gufunc_kwargs={"output_sizes": {"side": n_side}})
    t = res[0].rename("temperature")
    t.attrs.update(units="degC", long_name="surface temperature", standard_name="surface_temperature")
    return (t,) + tuple(res[1:])


def cluster_chunks(ctx, client, rad, align=None):
    """Chunk source for ``run_chain``: the stack's chunks with their pixel work done on the
    cluster, in frame order, a few chunks ahead being computed meanwhile."""
    size = ctx.frame_chunk
    tables = ctx.tables
    want_signal = rad.want_signal and not tables.lookup
    want_index = rad.want_index and tables.lookup
    raw = lazy_stack(ctx.stack["path"], ctx.shape, ctx.dtype, size, label=f"stack '{ctx.name}'")
    outs = lazy_temperature(raw, tables, ctx.bad_pixel_mask, want_signal, want_index, align)
    blocks = [o.data.to_delayed().reshape(-1) for o in outs]
    # the lookup plan's (group, raw) counts, from the same reads (one task per block)
    counted = rad.count and tables.lookup and align is None
    if counted:
        import dask

        blocks.append([dask.delayed(block_counts, pure=False)(b, tables=tables, bad_pixel_mask=ctx.bad_pixel_mask)
                       for b in raw.data.to_delayed().reshape(-1)])
    else:
        ctx.lookup_counts = None            # the picture and region stages bin the temperatures
    ahead = max(2, 2 * len(client.nthreads() or {0: 1}))
    pending = {}
    for k in range(len(blocks[0])):
        for j in range(k, min(len(blocks[0]), k + ahead)):
            if j not in pending:
                pending[j] = client.compute([b[j] for b in blocks])
        res = [f.result() for f in pending.pop(k)]
        t, side = res[0], res[1]
        chunk = Chunk(k * size, None)
        refl = side[:, len(CODES)]
        inv = {c: int(side[:, j].sum()) for j, c in enumerate(CODES)}
        extra = {}
        if align is not None:       # the align stage's reasons, counted on the workers
            extra = {c: int(side[:, len(CODES) + 1 + j].sum()) for j, c in enumerate(ALIGN_REASONS)}
            for c, n in extra.items():
                align.counts[ALIGN_REASONS[c]] += n

        class _Result:          # the kernel result as the radiometric stage takes it
            temperature_c, invalid_counts = t, inv
            value_counts = res[-1] if counted else None
            signal = res[2] if want_signal else None
            lookup_index = res[2] if want_index else None
            reflected_temperature_k = refl.copy() if np.isfinite(refl).any() else None

        rad.add_result(chunk, _Result, ctx)
        if extra:
            chunk.invalid_counts = {**inv, **extra}
        yield chunk


def run_stack_distributed(ctx, chain, progress=None):
    """Run a stack's chain with its pixel work on a dask.distributed cluster:
    ``--workers N`` starts a LocalCluster of N single-threaded worker processes,
    ``--scheduler ADDRESS`` uses a running one."""
    try:
        import dask  # noqa: F401
        import xarray  # noqa: F401
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise InputDataError(f"--workers/--scheduler need dask.distributed and xarray ({exc}); "
                             "install irpipe[cluster]") from None
    rad = next(s for s in chain if isinstance(s, RadiometricStage))
    cluster = client = None
    try:
        if ctx.options.get("scheduler"):
            client = Client(ctx.options["scheduler"], set_as_default=False)
        else:
            cluster = LocalCluster(n_workers=int(ctx.options["workers"]), threads_per_worker=1,
                                   processes=bool(ctx.options.get("processes", True)),
                                   dashboard_address=None)
            client = Client(cluster, set_as_default=False)
        align = next((s for s in chain if s.name == "align"), None)
        run_chain(chain, ctx, lambda: cluster_chunks(ctx, client, rad, align), progress,
                  skip=("bad_pixels", "align", "radiometric"))
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
