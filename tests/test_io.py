"""Tests for irpipe.io: TIFF stack reading and writing round trips, atomic outputs (the
destination is always the old complete file or the new complete one; no temporary file is
left), and one-line errors naming the file. The atomic-output rule is the project's own
contract (DEVELOPERS.md); the hash check uses the FIPS 180-2 example."""
import json
import os
from pathlib import Path

import numpy as np
import pytest
import tifffile

from irpipe.errors import InputDataError, StackError
from irpipe.io import (StackReader, StackWriter, atomic_path, read_map, read_spectral_response, sha256,
                       write_json_atomic, write_text_atomic, write_tiff_atomic)


def _leftovers(folder):
    return [p.name for p in Path(folder).iterdir() if p.name.endswith(".part")]


def test_reader_fast_path_and_fallbacks_agree(tmp_path):
    rng = np.random.default_rng(2)
    data = rng.integers(0, 65535, (9, 7, 5)).astype(np.uint16)
    tifffile.imwrite(tmp_path / "contig.tif", data, photometric="minisblack")
    tifffile.imwrite(tmp_path / "zlib.tif", data, photometric="minisblack", compression="zlib")
    with tifffile.TiffWriter(tmp_path / "pages.tif") as tw:      # IFDs between the pages
        for f in data:
            tw.write(f, contiguous=False, photometric="minisblack")
    with tifffile.TiffWriter(tmp_path / "big.tif", byteorder=">") as tw:
        tw.write(data, photometric="minisblack")
    for name, fast in (("contig", True), ("zlib", False), ("pages", True), ("big", False)):
        with StackReader(tmp_path / f"{name}.tif") as r:
            assert r.shape == data.shape
            np.testing.assert_array_equal(r.read(0, 9), data)
            np.testing.assert_array_equal(r.read(2, 7), data[2:7])
            assert (r._page_offsets() is not None) == fast, name


def test_writer_chunks_make_one_series(tmp_path):
    a = np.random.default_rng(3).normal(size=(11, 6, 8)).astype(np.float32)
    w = StackWriter(tmp_path / "t.tif", a.shape, '{"units": "degC"}')
    for s in range(0, 11, 4):
        w.write(a[s:s + 4])
    w.commit()
    with tifffile.TiffFile(tmp_path / "t.tif") as t:
        assert len(t.series) == 1 and t.series[0].shape == a.shape
        assert t.pages[0].description == '{"units": "degC"}'
        np.testing.assert_array_equal(t.asarray(), a)
    assert [p.name for p in tmp_path.iterdir()] == ["t.tif"]


@pytest.mark.parametrize("fsync", [False, True])
def test_writer_hands_data_to_write_back_as_it_goes(tmp_path, monkeypatch, fsync):
    # Performance behaviour, common practice (no published source): a long stack is queued
    # for write-back every WRITEBACK_BYTES with or without fsync, so its dirty pages never
    # pile up until the kernel throttles the writer; the bytes written stay the same.
    import irpipe.io as io
    calls = []
    monkeypatch.setattr(io, "_start_writeback", lambda fd: calls.append(fd))
    monkeypatch.setattr(StackWriter, "WRITEBACK_BYTES", 2 * 6 * 8 * 4)
    a = np.arange(10 * 6 * 8, dtype=np.float32).reshape(10, 6, 8)
    w = StackWriter(tmp_path / "t.tif", a.shape, fsync=fsync)
    for s in range(0, 10, 2):
        w.write(a[s:s + 2])
    w.commit()
    assert len(calls) == 5
    np.testing.assert_array_equal(tifffile.imread(tmp_path / "t.tif"), a)


def test_reader_chunks_cover_the_stack_in_order(tmp_path, write_stack):
    data = np.arange(7 * 3 * 4, dtype=np.uint16).reshape(7, 3, 4)
    write_stack(tmp_path / "s.tif", data)
    with StackReader(tmp_path / "s.tif") as r:
        parts = list(r.chunks(3))
    assert [s for s, _ in parts] == [0, 3, 6]
    np.testing.assert_array_equal(np.concatenate([c for _, c in parts]), data)


def test_tiff_round_trip_keeps_nan_dtype_and_description(tmp_path):
    a = np.random.default_rng(1).normal(20.0, 5.0, (3, 5, 6)).astype(np.float32)
    a[1, 2, 3] = np.nan
    write_tiff_atomic(tmp_path / "t.tif", a, description='{"units": "degC"}')
    with StackReader(tmp_path / "t.tif") as r:
        assert r.shape == a.shape and r.dtype == np.float32
        b = r.read(0, 3)
    np.testing.assert_array_equal(b, a)                 # NaN compares equal in this helper
    assert np.isnan(b[1, 2, 3])
    with tifffile.TiffFile(tmp_path / "t.tif") as t:
        assert t.pages[0].description == '{"units": "degC"}'
    assert _leftovers(tmp_path) == []


def test_atomic_path_keeps_the_old_file_on_failure(tmp_path):
    dest = tmp_path / "report.json"
    dest.write_text("old")
    with pytest.raises(RuntimeError, match="killed"):
        with atomic_path(dest) as tmp:
            tmp.write_text("half of the new")
            raise RuntimeError("killed")
    assert dest.read_text() == "old"
    assert _leftovers(tmp_path) == []
    with atomic_path(dest) as tmp:
        assert tmp.parent == dest.parent and tmp.name.startswith(".report.json.") and tmp.name.endswith(".part")
        tmp.write_text("new")
        assert dest.read_text() == "old"                # not visible before the block ends
    assert dest.read_text() == "new"
    umask = os.umask(0)
    os.umask(umask)
    assert dest.stat().st_mode & 0o777 == 0o666 & ~umask   # an ordinary file, not mkstemp's 0600


def test_stack_writer_abort_leaves_nothing(tmp_path):
    w = StackWriter(tmp_path / "t.tif", (4, 2, 2))
    w.write(np.zeros((2, 2, 2)))
    w.abort()
    assert list(tmp_path.iterdir()) == []


def test_json_atomic_converts_numpy_and_nan(tmp_path):
    obj = {"a": np.float32(1.5), "b": np.int64(3), "c": np.array([1, 2]), "d": np.float32(np.nan),
           "e": tmp_path / "x"}
    write_json_atomic(tmp_path / "r.json", obj)
    back = json.loads((tmp_path / "r.json").read_text())
    assert back == {"a": 1.5, "b": 3, "c": [1, 2], "d": None, "e": str(tmp_path / "x")}
    write_json_atomic(tmp_path / "m.json", {"k": [1, 2]}, compact=True)
    assert (tmp_path / "m.json").read_text() == '{"k":[1,2]}\n'
    with pytest.raises(TypeError, match="not JSON serialisable: object"):
        write_json_atomic(tmp_path / "bad.json", {"x": object()})
    assert not (tmp_path / "bad.json").exists() and _leftovers(tmp_path) == []


def test_text_atomic_overwrites(tmp_path):
    write_text_atomic(tmp_path / "a.csv", "x\n")
    write_text_atomic(tmp_path / "a.csv", "y\n")
    assert (tmp_path / "a.csv").read_text() == "y\n" and _leftovers(tmp_path) == []


def test_sha256_fips_example(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    (tmp_path / "abc").write_bytes(b"abc")
    assert sha256(tmp_path / "abc", bufsize=2) == \
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_read_map_checks_shape_frames_and_labels(tmp_path, write_stack):
    write_stack(tmp_path / "m.tif", np.full((4, 5), 0.9, np.float32))
    np.testing.assert_array_equal(read_map(tmp_path / "m.tif", (4, 5), "emissivity map"), np.full((4, 5), 0.9, np.float32))
    with pytest.raises(InputDataError, match=r"m\.tif: emissivity map has shape 4x5 \(rows x cols\) but the stack is 6x5"):
        read_map(tmp_path / "m.tif", (6, 5), "emissivity map")
    with pytest.raises(InputDataError, match="must hold whole-number labels"):
        read_map(tmp_path / "m.tif", (4, 5), "label image", kind="int")
    write_stack(tmp_path / "two.tif", np.zeros((2, 4, 5), np.float32))
    with pytest.raises(InputDataError, match=r"two\.tif: emissivity map has 2 frames; expected a single-frame map"):
        read_map(tmp_path / "two.tif", (4, 5), "emissivity map")


def test_spectral_response_round_trip_and_errors(tmp_path):
    (tmp_path / "r.csv").write_text("wavelength_um,response\n7.5,0.2\n10,1.0\n14,0.3\n")
    wl, resp = read_spectral_response(tmp_path / "r.csv")
    np.testing.assert_allclose(wl, [7.5e-6, 10e-6, 14e-6], rtol=1e-12)
    np.testing.assert_allclose(resp, [0.2, 1.0, 0.3])
    (tmp_path / "bad.csv").write_text("lambda,r\n7.5,0.2\n")
    with pytest.raises(InputDataError, match=r"bad\.csv: spectral response needs a header line 'wavelength_um,response'"):
        read_spectral_response(tmp_path / "bad.csv")


def test_reader_errors_name_the_file(tmp_path):
    with pytest.raises(StackError, match=r"nope\.tif: stack not found"):
        StackReader(tmp_path / "nope.tif")
    (tmp_path / "p.tif").write_bytes(b"\x89PNG\r\n\x1a\n" + b"0" * 64)
    with pytest.raises(StackError, match=r"p\.tif: stack is not a TIFF file"):
        StackReader(tmp_path / "p.tif")
    (tmp_path / "e.tif").write_bytes(b"II*")
    with pytest.raises(StackError, match=r"e\.tif: stack is empty or truncated \(3 bytes\)"):
        StackReader(tmp_path / "e.tif")
