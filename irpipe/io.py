"""All file input and output: TIFF stacks and maps in, arrays and reports out.

Every output is written to a temporary file in its destination folder, flushed, synced and
renamed into place, so a failure never leaves a half-written file nor touches the
complete output of an earlier run. Physics modules never open files; this one does.
"""
from __future__ import annotations

import contextlib
import csv
import hashlib
import json
import os
import sys
import tempfile
import threading
from pathlib import Path

import numpy as np

from .errors import InputDataError, OutputError, StackError

_OPEN_LOCK = threading.RLock()
_SCANS = {}     # (path, size, mtime) -> page shapes, data ends, plain data offsets

TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")
#: TIFF flavours whose page description can declare more axes than (frames, rows, cols)
_SHAPED_KINDS = ("shaped", "imagej", "ome", "micromanager", "mmstack", "ndtiff", "lsm", "stk", "fluoview",
                 "scanimage", "nih")


# --- stacks -----------------------------------------------------------------------------

class StackReader:
    """A multi-frame TIFF stack opened for streaming, as (frames, rows, cols).

    Pages are read in chunks of frames; nothing beyond the current chunk is held.
    Raises StackError (one line, naming the file) for a missing, non-TIFF, truncated or
    wrongly shaped file.
    """

    def __init__(self, path, label="stack"):
        import tifffile

        self.path = Path(path)
        self.label = label
        _check_tiff_file(self.path, label)
        st = self.path.stat()
        size = st.st_size
        key = (str(self.path.resolve()), size, st.st_mtime_ns)
        with _TiffLog() as log:
            try:
                self._tif = tifffile.TiffFile(str(self.path))
                pages = self._tif.pages
                first = pages.first if hasattr(pages, "first") else pages[0]
                n = len(pages)
                # one pass over the page headers (tifffile does not cache them): shapes,
                # data ends, and where each page's data starts if it is stored plainly
                # (kept per file for the process: the plan and the run open each stack)
                scan = _SCANS.get(key)
                if scan is None or len(scan[0]) != n:
                    shapes, ends, offsets = [], [], []
                    for p in _iter_pages_light(self._tif, n):
                        shapes.append(p.shape)
                        ends.append(max((o + b for o, b in zip(p.dataoffsets, p.databytecounts)), default=0))
                        offsets.append(_plain_offset(p))
                    scan = (shapes, ends, offsets)
                shapes, ends, offsets = scan
            except Exception as exc:  # tifffile raises many kinds
                raise StackError(f"{self.path}: {label} is not a readable TIFF ({_short(exc)}); "
                                 "copy the file from the camera card again") from None
        if log.records or max(ends, default=0) > size:
            with contextlib.suppress(Exception):
                self._tif.close()
            why = log.records[0] if log.records else f"image data end beyond the file's {size} bytes"
            raise StackError(f"{self.path}: {label} is truncated or corrupt ({why}); "
                             "copy the file from the camera card again")
        shape = first.shape
        self._planar = None
        if n == 1 and len(shape) == 3 and getattr(first, "planarconfig", 1) == 2:
            # a 3- or 4-frame stack written without photometric hints is stored as one
            # page with planar samples: treat the samples as frames
            self._planar = True
            n, shape = shape[0], shape[1:]
        elif len(shape) != 2 or any(ps != shape for ps in shapes):
            self.close()
            if len(shape) == 3 and shape[-1] in (3, 4):
                raise StackError(f"{self.path}: {label} is a colour image {tuple(shape)}, not radiometric data; "
                                 "export the raw or temperature stack from the camera software")
            ndim = len(shape) + (1 if n > 1 else 0)
            raise StackError(f"{self.path}: {label} must be a stack of 2-D single-channel frames "
                             f"(frames, rows, cols); found {n} page(s) of shape {tuple(shape)} ({ndim}-D data)")
        # a plain multi-page file is (frames, rows, cols) by construction; only a file whose
        # description declares a shape (tifffile's own, ImageJ hyperstacks, OME) can hold
        # more axes in 2-D pages, so only then is the series (about 1 ms) worth building
        tif = self._tif
        declared = any(getattr(tif, f"is_{kind}", False) for kind in _SHAPED_KINDS)
        series = (tif.series[0] if tif.series else None) if declared else None
        if series is not None and len(series.shape) > 3 and len([d for d in series.shape if d > 1]) > 3:
            self.close()
            raise StackError(f"{self.path}: {label} has {len(series.shape)}-D data {tuple(series.shape)}; "
                             "expected (frames, rows, cols)")
        self.frames = n
        self._plain = offsets
        _SCANS[key] = scan
        while len(_SCANS) > 16:
            _SCANS.pop(next(iter(_SCANS)))
        self.shape = (n,) + tuple(shape)
        self.dtype = np.dtype(first.dtype)
        self.metadata = _page_description(first)

    def read(self, start, stop, out=None):
        """Frames [start, stop) as an ndarray of shape (stop-start, M, N).

        Uncompressed pages in native byte order (what cameras and this package write)
        are read straight into the result, one read per run of adjacent pages; anything
        else goes through tifffile page by page. ``out``, if given, receives the frames.
        """
        shape = (stop - start,) + self.shape[1:]
        if out is None:
            out = np.empty(shape, dtype=self.dtype)
        elif out.shape != shape or out.dtype != self.dtype or not out.flags.c_contiguous:
            raise ValueError(f"out: expected a C-contiguous {self.dtype} array of shape {shape}")
        i = start
        try:
            if self._planar:
                out[...] = self._tif.pages[0].asarray()[start:stop]
                return out
            runs = self._raw_runs(start, stop)
            if runs is not None:
                self._read_runs(runs, start, out)
                return out
            with _OPEN_LOCK:      # tifffile's file handle is not for concurrent use
                for k, i in enumerate(range(start, stop)):
                    self._tif.pages[i].asarray(out=out[k])
        except StackError:
            raise
        except Exception as exc:
            raise StackError(f"{self.path}: {self.label} frame {i} cannot be decoded ({_short(exc)}); "
                             "the file is probably truncated: copy it from the camera card again") from None
        return out

    # -- direct reads of uncompressed pages ------------------------------------------
    def _page_offsets(self):
        """File offset of each page's image data, or None when any page needs decoding."""
        if getattr(self, "_offsets", False) is not False:
            return self._offsets
        self._offsets = None
        frame_bytes = int(np.prod(self.shape[1:])) * self.dtype.itemsize
        native = (self._tif.byteorder == "<") == (sys.byteorder == "little") or self.dtype.itemsize == 1
        offs = getattr(self, "_plain", None)
        if not native or self._planar or offs is None or any(o is None for o in offs):
            return None
        if any(nb != frame_bytes or np.dtype(dt) != self.dtype for _, nb, dt in offs):
            return None
        self._offsets = np.asarray([o for o, _, _ in offs], np.int64)
        self._frame_bytes = frame_bytes
        return self._offsets

    def _raw_runs(self, start, stop):
        offs = self._page_offsets()
        if offs is None or stop <= start:
            return None
        o = offs[start:stop]
        breaks = np.flatnonzero(np.diff(o) != self._frame_bytes) + 1
        bounds = np.concatenate(([0], breaks, [o.size]))
        return [(int(a), int(b), int(o[a])) for a, b in zip(bounds[:-1], bounds[1:])]

    def _read_runs(self, runs, start, out):
        # positional reads (os.preadv): safe when threads share this reader
        if getattr(self, "_fh", None) is None:
            with _OPEN_LOCK:
                if getattr(self, "_fh", None) is None:
                    self._fh = open(self.path, "rb", buffering=0)
        fd = self._fh.fileno()
        buf = memoryview(out.reshape(-1).view(np.uint8))
        fb = self._frame_bytes
        for a, b, offset in runs:
            view = buf[a * fb:b * fb]
            got = 0
            while got < len(view):
                if hasattr(os, "preadv"):
                    n = os.preadv(fd, [view[got:]], offset + got)
                else:
                    with _OPEN_LOCK:
                        self._fh.seek(offset + got)
                        n = self._fh.readinto(view[got:])
                if not n:
                    bad = start + a + got // fb
                    raise StackError(f"{self.path}: {self.label} frame {bad} cannot be read (file ends "
                                     "early); the file is probably truncated: copy it from the camera "
                                     "card again")
                got += n

    def chunks(self, size):
        for s in range(0, self.frames, size):
            yield s, self.read(s, min(self.frames, s + size))

    def close(self):
        with contextlib.suppress(Exception):
            self._tif.close()
        fh = getattr(self, "_fh", None)
        if fh is not None:
            self._fh = None
            with contextlib.suppress(Exception):
                fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class _TiffLog:
    """Collect tifffile's logged errors (it logs, rather than raises, on a broken page chain)."""

    def __enter__(self):
        import logging

        self.records = []
        self.logger = logging.getLogger("tifffile")
        self.handler = logging.Handler(logging.WARNING)
        self.handler.emit = lambda rec: self.records.append(rec.getMessage().splitlines()[0][:120])
        self.logger.addHandler(self.handler)
        self._prop = self.logger.propagate
        self.logger.propagate = False
        return self

    def __exit__(self, *exc):
        self.logger.removeHandler(self.handler)
        self.logger.propagate = self._prop


def _plain_offset(page):
    """(data offset, bytes, dtype) of a page stored uncompressed in one run, else None."""
    try:
        if (page.compression != 1 or page.predictor != 1 or page.fillorder != 1 or page.is_tiled
                or page.sampleformat == 5 or page.bitspersample not in (8, 16, 32, 64)):
            return None
        offs, counts = page.dataoffsets, page.databytecounts
        if not offs or sum(counts) != page.nbytes:
            return None
        if any(offs[i] + counts[i] != offs[i + 1] for i in range(len(offs) - 1)):
            return None
        return int(offs[0]), int(page.nbytes), page.dtype
    except Exception:
        return None


def _iter_pages_light(tif, n):
    # page shapes without decoding image data
    for i in range(n):
        yield tif.pages[i]


def _page_description(page):
    try:
        return page.description or ""
    except Exception:
        return ""


def _short(exc):
    return str(exc).splitlines()[0][:160] if str(exc) else type(exc).__name__


def _check_tiff_file(path: Path, label):
    if not path.exists():
        raise StackError(f"{path}: {label} not found; check the path (relative to the config file)")
    if not path.is_file():
        raise StackError(f"{path}: {label} is not a regular file")
    try:
        with path.open("rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise StackError(f"{path}: {label} cannot be read ({exc.strerror})") from None
    if len(head) < 8:
        raise StackError(f"{path}: {label} is empty or truncated ({len(head)} bytes); copy it again")
    if head[:4] not in TIFF_MAGIC:
        raise StackError(f"{path}: {label} is not a TIFF file (starts with {head[:4]!r}); "
                         "export the stack as multi-frame TIFF")


def read_map(path, shape, label, kind="float"):
    """Read a single-frame TIFF map and check its (rows, cols) against the stack's."""
    with StackReader(path, label) as r:
        if r.frames != 1:
            raise InputDataError(f"{path}: {label} has {r.frames} frames; expected a single-frame map")
        a = r.read(0, 1)[0]
    if tuple(a.shape) != tuple(shape):
        raise InputDataError(f"{path}: {label} has shape {a.shape[0]}x{a.shape[1]} (rows x cols) but the "
                             f"stack is {shape[0]}x{shape[1]}; make the map for this stack")
    if kind == "int" and not np.issubdtype(a.dtype, np.integer):
        if not np.all(np.isfinite(a)) or np.any(a != np.round(a)):
            raise InputDataError(f"{path}: {label} must hold whole-number labels; found fractional or NaN values")
        a = a.astype(np.int64)
    return a


def read_spectral_response(path):
    """CSV with header columns wavelength_um, response -> (wavelength [m], response)."""
    path = Path(path)
    try:
        with path.open(newline="") as fh:
            rows = list(csv.DictReader(fh))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputDataError(f"{path}: spectral response cannot be read ({exc}); give a CSV file") from None
    if not rows or not {"wavelength_um", "response"} <= set(rows[0]):
        raise InputDataError(f"{path}: spectral response needs a header line 'wavelength_um,response'")
    try:
        wl = np.array([float(r["wavelength_um"]) for r in rows]) * 1e-6
        resp = np.array([float(r["response"]) for r in rows])
    except (TypeError, ValueError) as exc:
        raise InputDataError(f"{path}: spectral response has a non-numeric value ({exc})") from None
    return wl, resp


def sha256(path, bufsize=1 << 20):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for blk in iter(lambda: fh.read(bufsize), b""):
            h.update(blk)
    return h.hexdigest()


# --- atomic outputs ---------------------------------------------------------------------

@contextlib.contextmanager
def atomic_path(dest, fsync=True):
    """Yield a temporary path beside ``dest``; rename it onto ``dest`` only on success.

    With ``fsync`` the data are forced to disk before the rename (durable across a power
    loss); without, the rename still guarantees that ``dest`` is either the old complete
    file or the new complete one for any failure of the process itself."""
    dest = Path(dest)
    dest.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".part", dir=dest.parent)
    os.close(fd)
    tmp = Path(tmp)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)          # mkstemp makes 0600; outputs are ordinary files
    try:
        yield tmp
        if fsync and tmp.is_file():
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        _replace(tmp, dest)
    except BaseException:
        with contextlib.suppress(Exception):
            if tmp.is_dir():
                import shutil
                shutil.rmtree(tmp)
            else:
                tmp.unlink()
        raise


def write_text_atomic(dest, text, fsync=True):
    try:
        with atomic_path(dest, fsync=fsync) as tmp:
            tmp.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"{dest}: cannot write ({exc.strerror}); free disk space or choose another --out") from None


def write_json_atomic(dest, obj, compact=False):
    """JSON, atomically; ``compact`` for machine-only files (the run manifest)."""
    if compact:
        text = json.dumps(obj, separators=(",", ":"), default=_json_default)
    else:
        text = json.dumps(obj, indent=1, default=_json_default)
    write_text_atomic(dest, text + "\n")


def _json_default(o):
    if isinstance(o, (np.floating,)):
        return None if not np.isfinite(o) else float(o)
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def _replace(tmp, dest):
    """Atomic rename of ``tmp`` onto ``dest``. A large file being replaced is first given
    a second name, so that freeing its data (the kernel drops its cached pages on the last
    unlink, ~0.3 s per GB) happens in a background thread, not on the run's critical path."""
    old = None
    try:
        if dest.is_file() and dest.stat().st_size > (64 << 20):
            old = dest.with_name(f".{dest.name}.{os.getpid()}.old")
            os.link(dest, old)
    except OSError:
        old = None
    os.replace(tmp, dest)
    if old is not None:
        import threading
        threading.Thread(target=_unlink_quietly, args=(old,), daemon=False).start()


def _unlink_quietly(p):
    with contextlib.suppress(OSError):
        os.unlink(p)


class StackWriter:
    """Streaming float32 TIFF writer for (F, M, N) results, atomic on ``commit``.

    Frames are appended as one contiguous series, in writes of at most ``PIECE_BYTES``
    (but whole frames); ``description`` (JSON text) goes into the first page's
    ImageDescription. Written data is handed to the operating system for write-back as it
    goes, with or without ``fsync``: the sync at ``commit`` then does not have to flush the
    whole stack at once, and without it the dirty pages of a long stack do not pile up
    until the kernel throttles the writer (measured on the 2-core VM of benchmarks/, 600
    frames 640x512: closing the file took 0.3 s without write-back, 0.0 s with it).
    """

    #: start write-back after this many bytes since the last time [bytes]
    WRITEBACK_BYTES = 64 << 20
    #: bytes per write call. One write of a whole 32-frame chunk (42 MB) took the kernel 6
    #: to 10 times as long to copy into the page cache as the same bytes in frame-sized
    #: writes (measured on the 2-core Linux VM of benchmarks/: 1.3-2.2 s against 0.2 s for
    #: 800 MB), and it adds nothing elsewhere
    PIECE_BYTES = 2 << 20

    def __init__(self, dest, shape, description="", dtype=np.float32, fsync=True):
        import tifffile

        self.dest = Path(dest)
        self.shape = shape
        self.dtype = np.dtype(dtype)
        self.fsync = fsync
        self._ctx = atomic_path(self.dest, fsync=fsync)
        self.tmp = self._ctx.__enter__()
        try:
            self._tw = tifffile.TiffWriter(str(self.tmp), bigtiff=_needs_bigtiff(shape, self.dtype))
        except OSError as exc:
            self.abort()
            raise OutputError(f"{self.dest}: cannot write ({exc.strerror}); free disk space or choose another --out") from None
        self._written = 0
        self._description = description
        self._pending = 0

    def write(self, chunk):
        chunk = np.ascontiguousarray(chunk, dtype=self.dtype)
        if chunk.ndim == 2:
            chunk = chunk[None]
        if chunk.shape[0] == 0:
            return
        try:
            per = max(1, self.PIECE_BYTES // max(1, chunk[0].nbytes))
            for k in range(0, chunk.shape[0], per):
                kw = {"description": self._description} if self._written == 0 else {}
                piece = chunk[k:k + per]
                self._tw.write(piece, contiguous=True, metadata=None, photometric="minisblack", **kw)
                self._written += piece.shape[0]
            self._pending += chunk.nbytes
            if self._pending >= self.WRITEBACK_BYTES:
                self._pending = 0
                self._writeback()
        except OSError as exc:
            self.abort()
            raise OutputError(f"{self.dest}: cannot write ({exc.strerror}); free disk space or choose another --out") from None

    def _writeback(self):
        """Start (not wait for) write-back of what is written so far (Linux; else a no-op)."""
        fh = getattr(self._tw, "_fh", None)
        try:
            fh.flush()
            fd = fh._fh.fileno()
        except Exception:
            return
        _start_writeback(fd)

    def commit(self):
        try:
            self._tw.close()
        except OSError as exc:
            self.abort()
            raise OutputError(f"{self.dest}: cannot write ({exc.strerror}); free disk space or choose another --out") from None
        self._ctx.__exit__(None, None, None)

    def abort(self):
        with contextlib.suppress(Exception):
            self._tw.close()
        with contextlib.suppress(BaseException):
            self._ctx.__exit__(RuntimeError, RuntimeError("aborted"), None)


_SYNC_FILE_RANGE = []


def _start_writeback(fd):
    """``sync_file_range(fd, 0, 0, SYNC_FILE_RANGE_WRITE)``: queue the file's dirty pages for
    writing without waiting (Linux). Elsewhere, or if it fails, nothing happens: the final
    fsync of ``atomic_path`` remains what makes the file durable."""
    if not _SYNC_FILE_RANGE:
        fn = None
        if sys.platform.startswith("linux"):
            with contextlib.suppress(Exception):
                import ctypes
                libc = ctypes.CDLL(None, use_errno=True)
                fn = libc.sync_file_range
                fn.argtypes = [ctypes.c_int, ctypes.c_longlong, ctypes.c_longlong, ctypes.c_uint]
                fn.restype = ctypes.c_int
        _SYNC_FILE_RANGE.append(fn)
    fn = _SYNC_FILE_RANGE[0]
    if fn is not None:
        with contextlib.suppress(Exception):
            fn(fd, 0, 0, 2)   # SYNC_FILE_RANGE_WRITE


def _needs_bigtiff(shape, dtype):
    return int(np.prod(shape)) * dtype.itemsize > 3_900_000_000


def write_tiff_atomic(dest, array, description=""):
    w = StackWriter(dest, array.shape, description, dtype=array.dtype)
    w.write(array if array.ndim == 3 else array[None])
    w.commit()


# --- heat flow: frame times and air logs (CSV) -------------------------------------------

def _read_csv_rows(path, label, needed):
    path = Path(path)
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            reader = csv.DictReader(fh)
            rows = list(reader)
            header = [h.strip() for h in (reader.fieldnames or [])]
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputDataError(f"{path}: {label} cannot be read ({exc}); give a UTF-8 CSV file") from None
    missing = [c for c in needed if c not in header]
    if missing:
        raise InputDataError(f"{path}: {label} lacks column(s) {', '.join(missing)} (header: "
                             f"{', '.join(header) or 'none'}); the first line must name the columns, "
                             f"e.g. {','.join(needed)}")
    if not rows:
        raise InputDataError(f"{path}: {label} has a header but no data rows")
    return [{(k or "").strip(): (v or "").strip() for k, v in r.items()} for r in rows]


def read_frame_times(path):
    """CSV with a column ``time`` (ISO 8601), one row per frame -> list of text times."""
    return [r["time"] for r in _read_csv_rows(path, "frame-time file", ["time"])]


AIR_LOG_COLUMNS = ("indoor_air_c", "outdoor_air_c")
AIR_LOG_OPTIONAL = ("wind_speed_m_s", "radiant_temperature_c", "contact_surface_c")


def read_air_log(path):
    """Air-temperature log CSV with columns ``time`` (ISO 8601), ``indoor_air_c``,
    ``outdoor_air_c`` and optionally ``wind_speed_m_s``, ``radiant_temperature_c``,
    ``contact_surface_c``.

    Returns
    -------
    (times, columns) : list of str, dict of name -> ndarray (L,) float
        Optional columns present in the header are included; an empty cell is NaN only in
        an optional column.
    """
    path = Path(path)
    rows = _read_csv_rows(path, "air log", ["time", *AIR_LOG_COLUMNS])
    present = [c for c in AIR_LOG_OPTIONAL if c in rows[0]]
    cols = {c: np.empty(len(rows)) for c in (*AIR_LOG_COLUMNS, *present)}
    for i, r in enumerate(rows):
        for c in cols:
            v = r.get(c, "")
            if v == "" and c in AIR_LOG_OPTIONAL:
                cols[c][i] = np.nan
                continue
            try:
                cols[c][i] = float(v)
            except ValueError:
                raise InputDataError(f"{path}: air log row {i + 2}, column {c}: '{v}' is not a number") from None
            if not np.isfinite(cols[c][i]):
                raise InputDataError(f"{path}: air log row {i + 2}, column {c}: '{v}' is not a finite number")
    return [r["time"] for r in rows], cols


def remove_stale_parts(folder, before: float) -> list:
    """Remove temporary outputs that a killed run left in ``folder``: files and folders
    named ``.<name>.<random>.part`` (``atomic`` writes, Zarr folders) last modified before
    ``before`` (a ``time.time()`` stamp, the start of this run), so that a writer running
    in parallel is never disturbed. Returns the names removed."""
    import shutil

    removed = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for e in entries:
        if not (e.name.startswith(".") and e.name.endswith(".part")):
            continue
        try:
            if e.stat(follow_symlinks=False).st_mtime >= before:
                continue
            if e.is_dir(follow_symlinks=False):
                shutil.rmtree(e.path)
            else:
                os.unlink(e.path)
            removed.append(e.name)
        except OSError:
            pass
    return removed


def read_u_value_map(path):
    """A written ``<name>.u_value.tif`` as (M, N) float32, or None if it cannot be read
    (a picture is not worth failing the report for)."""
    try:
        with StackReader(path, "U-value map") as r:
            return r.read(0, 1)[0].astype(np.float32)
    except (InputDataError, OSError):
        return None
