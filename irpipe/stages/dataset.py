"""Dataset writer stage: the corrected temperature as CF-annotated NetCDF and/or Zarr,
streamed chunk by chunk (memory stays flat) and made visible atomically on success.

* ``<name>.temperature.nc``: NetCDF-3 (64-bit offset), readable by xarray with its
  built-in scipy engine, so no NetCDF library is needed. The frame dimension is the
  unlimited (record) dimension: the header (dimensions, coordinates, attributes) is
  written by ``scipy.io.netcdf_file``, the records are then appended as each chunk
  arrives and the record count is set at the end.
* ``<name>.temperature.zarr``: a Zarr (format 2, consolidated metadata) store written
  through xarray (metadata and coordinates), its temperature chunks (one per frame chunk) filled as chunks arrive;
  needs the ``zarr`` package (extra ``cluster``).

Both hold ``temperature(frame, row, col)`` float32 [degC] (NaN where invalid) with the
CF attributes units, long_name, standard_name, the coordinates frame, row, col, and as
global attributes the software version and the stack's measurement conditions
(``condition_<key>``, plus all of them as JSON in ``irpipe_conditions``).

References
----------
.. [1] NetCDF Climate and Forecast (CF) Metadata Conventions, version 1.8 (2020),
   sect. 2.6 (attributes), 3.1-3.3 (units, long_name, standard_name).
.. [2] NetCDF classic and 64-bit offset file format specification (Unidata), for the
   record layout that is appended here.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import OutputError
from .base import Stage

CF_CONVENTIONS = "CF-1.8"
TEMPERATURE_ATTRS = {"units": "degC", "long_name": "surface temperature",
                     "standard_name": "surface_temperature"}


def dataset_attributes(ctx):
    """Global attributes: software, stack, conditions (NetCDF-3-safe values only)."""
    cond = ctx.report.get("conditions", {}) or {}
    attrs = {"Conventions": CF_CONVENTIONS, "title": f"irpipe surface temperature, stack {ctx.name}",
             "source": f"irpipe {__version__}", "software": "irpipe", "software_version": __version__,
             "history": f"{_dt.datetime.now(_dt.timezone.utc).isoformat(timespec='seconds')} "
                        f"created by irpipe {__version__}",
             "stack": ctx.name, "stack_source_file": str(Path(ctx.stack["path"]).name),
             "irpipe_conditions": json.dumps(cond, default=str, sort_keys=True)}
    for k, v in cond.items():
        if isinstance(v, bool):
            v = int(v)
        if isinstance(v, (int, float, str)) and not (isinstance(v, float) and not np.isfinite(v)):
            attrs[f"condition_{k}"] = v
        elif v is not None:
            attrs[f"condition_{k}"] = json.dumps(v, default=str, sort_keys=True)
    return attrs


class _NetCDFWriter:
    """Stream (F, M, N) float32 frames into a NetCDF-3 64-bit-offset file at ``tmp``."""

    def __init__(self, tmp, shape, attrs):
        from scipy.io import netcdf_file

        f, rows, cols = shape
        nc = netcdf_file(str(tmp), "w", version=2)
        try:
            for k, v in attrs.items():
                setattr(nc, k, v)
            nc.createDimension("frame", None)
            nc.createDimension("row", rows)
            nc.createDimension("col", cols)
            for name, n, long_name in (("row", rows, "image row"), ("col", cols, "image column")):
                v = nc.createVariable(name, "i4", (name,))
                v[:] = np.arange(n, dtype=np.int32)
                v.long_name = long_name
                v.units = "1"
            fr = nc.createVariable("frame", "i4", ("frame",))
            fr.long_name = "frame index in the stack"
            fr.units = "1"
            t = nc.createVariable("temperature", "f4", ("frame", "row", "col"))
            for k, v in TEMPERATURE_ATTRS.items():
                setattr(t, k, v)
            t._FillValue = np.float32(np.nan)
            # one placeholder record, so that the header gets the record sizes; the
            # records are then written from the start of this one
            fr[0] = 0
            t[0] = np.full((rows, cols), np.nan, np.float32)
        finally:
            nc.close()
        self.record = np.dtype([("frame", ">i4"), ("temperature", ">f4", (rows, cols))])
        self.fh = open(tmp, "r+b")
        self.start = os.path.getsize(tmp) - self.record.itemsize
        self.fh.seek(self.start)
        self.frames = 0

    def write(self, first, t):
        rec = np.empty(t.shape[0], self.record)
        rec["frame"] = np.arange(first, first + t.shape[0], dtype=np.int32)
        rec["temperature"] = t
        self.fh.write(rec.data)
        self.frames += t.shape[0]

    def close(self):
        self.fh.seek(4)                     # numrecs, big-endian int32 after the magic
        self.fh.write(np.array([self.frames], ">i4").tobytes())
        self.fh.flush()
        os.fsync(self.fh.fileno())
        self.fh.close()

    def abort(self):
        with contextlib.suppress(Exception):
            self.fh.close()


class _ZarrWriter:
    """Stream frames into a Zarr store at ``tmp`` laid out by xarray (CF metadata)."""

    def __init__(self, tmp, shape, attrs, chunk):
        import dask.array as da
        import xarray as xr

        f, rows, cols = shape
        chunk = max(1, min(int(chunk), f))
        data = da.full(shape, np.nan, dtype=np.float32, chunks=(chunk, rows, cols))
        ds = xr.Dataset({"temperature": (("frame", "row", "col"), data, dict(TEMPERATURE_ATTRS))},
                        coords={"frame": np.arange(f, dtype=np.int32), "row": np.arange(rows, dtype=np.int32),
                                "col": np.arange(cols, dtype=np.int32)}, attrs=attrs)
        ds["frame"].attrs.update(long_name="frame index in the stack", units="1")
        ds["row"].attrs.update(long_name="image row", units="1")
        ds["col"].attrs.update(long_name="image column", units="1")
        ds.to_zarr(str(tmp), mode="w", compute=False, zarr_format=2, consolidated=True,
                   encoding={"temperature": {"chunks": (chunk, rows, cols), "_FillValue": np.float32(np.nan)}})
        import zarr
        self.array = zarr.open_group(str(tmp), mode="r+")["temperature"]

    def write(self, first, t):
        self.array[first:first + t.shape[0]] = t

    def close(self):
        pass

    def abort(self):
        pass


def _commit(tmp: Path, dest: Path):
    """Rename ``tmp`` onto ``dest`` (a file or a directory), replacing an older one."""
    if tmp.is_dir():
        old = None
        if dest.exists():
            old = dest.with_name(f".{dest.name}.old.{os.getpid()}")
            os.replace(dest, old)
        os.replace(tmp, dest)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True) if old.is_dir() else old.unlink()
    else:
        os.replace(tmp, dest)


def _remove(p: Path):
    with contextlib.suppress(Exception):
        shutil.rmtree(p) if p.is_dir() else p.unlink()


class DatasetWriterStage(Stage):
    name = "write_dataset"

    @classmethod
    def applies(cls, ctx):
        formats = ctx.options.get("formats") or []
        return "netcdf" in formats or "zarr" in formats

    requires = ("chunk.temperature_c",)

    def start(self, ctx):
        formats = ctx.options.get("formats") or []
        attrs = dataset_attributes(ctx)
        self.items = []    # (kind, dest, tmp, writer)
        try:
            if "netcdf" in formats:
                dest = Path(ctx.out_dir) / f"{ctx.name}.temperature.nc"
                tmp = self._tmp(dest, directory=False)
                self.items.append(("temperature_netcdf", dest, tmp, None))
                self.items[-1] = ("temperature_netcdf", dest, tmp, _NetCDFWriter(tmp, ctx.shape, attrs))
            if "zarr" in formats:
                dest = Path(ctx.out_dir) / f"{ctx.name}.temperature.zarr"
                tmp = self._tmp(dest, directory=True)
                self.items.append(("temperature_zarr", dest, tmp, None))
                chunk = ctx.frame_chunk
                self.items[-1] = ("temperature_zarr", dest, tmp, _ZarrWriter(tmp, ctx.shape, attrs, chunk))
        except ImportError as exc:
            self.abort(ctx)
            raise OutputError(f"output.formats zarr needs the zarr package ({exc}); install irpipe[cluster] "
                              "or remove zarr from output.formats") from None
        except OSError as exc:
            self.abort(ctx)
            raise OutputError(f"{ctx.out_dir}: cannot write ({exc.strerror}); free disk space or choose "
                              "another --out") from None

    @staticmethod
    def _tmp(dest: Path, directory: bool) -> Path:
        dest.parent.mkdir(parents=True, exist_ok=True)
        if directory:
            return Path(tempfile.mkdtemp(prefix=f".{dest.name}.", suffix=".part", dir=dest.parent))
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".part", dir=dest.parent)
        os.close(fd)
        return Path(tmp)

    def process(self, chunk, ctx):
        t = np.ascontiguousarray(chunk.temperature_c, dtype=np.float32)
        try:
            for _, _, _, w in self.items:
                w.write(chunk.first, t)
        except OSError as exc:
            self.abort(ctx)
            raise OutputError(f"{ctx.out_dir}: cannot write the dataset ({exc.strerror}); free disk space or "
                              "choose another --out") from None

    def finish(self, ctx):
        try:
            for kind, dest, tmp, w in self.items:
                w.close()
                _commit(tmp, dest)
                ctx.outputs[kind] = dest.name
        except OSError as exc:
            self.abort(ctx)
            raise OutputError(f"{ctx.out_dir}: cannot write the dataset ({exc.strerror})") from None
        self.items = []

    def abort(self, ctx):
        for _, _, tmp, w in getattr(self, "items", []):
            if w is not None:
                w.abort()
            _remove(tmp)
        self.items = []
