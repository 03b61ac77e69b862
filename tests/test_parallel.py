"""Scale-out and streaming: the threaded stream, the dask.distributed run, the lazy dask
graph, and the fast paths of the stack reader/writer give the results of the plain
one-thread loop (these are equivalence tests of this package's own code paths)."""
import json

import numpy as np
import pytest
import tifffile

from irpipe import parallel, pipeline
from irpipe.config import load_config
from irpipe.io import StackReader


def _stack_report(res):
    rep = dict(res.report["stacks"][0])
    rep.pop("seconds", None)
    return rep


@pytest.fixture(scope="module")
def survey(tmp_path_factory, small_survey):
    folder = tmp_path_factory.mktemp("survey")
    cfg = small_survey(folder)
    plain = pipeline.run(cfg, folder / "plain", quiet=True)
    return folder, cfg, plain


def test_plain_run_counts_invalid_pixels_by_reason(survey, small_survey):
    _, _, plain = survey
    inv = _stack_report(plain)["invalid_pixels"]
    assert inv["saturated"] == len(range(1, small_survey.frames, 4))
    assert inv["outside_calibration_range"] == len(range(2, small_survey.frames, 6))


def test_threaded_stream_equals_one_thread_loop(survey, tmp_path):
    folder, cfg, plain = survey
    c = load_config(cfg)
    opts = {"frame_chunk": 5, "formats": ["tiff"], "threads": False}
    _, _, ctxs = pipeline.plan(c, tmp_path, opts)
    rep = pipeline.run_stack(ctxs[0])
    want = _stack_report(plain)
    rep.pop("seconds", None)
    assert json.dumps(rep, sort_keys=True, default=str) == json.dumps(want, sort_keys=True, default=str)
    a = tifffile.imread(tmp_path / "wall.temperature.tif")
    b = tifffile.imread(folder / "plain" / "wall.temperature.tif")
    np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("per_pixel, with_u", [(False, False), (False, True), (True, True)],
                         ids=["lookup", "lookup+uncertainty", "per-pixel+uncertainty"])
def test_local_cluster_run_equals_plain_run(survey, small_survey, tmp_path, per_pixel, with_u):
    distributed = pytest.importorskip("distributed")
    folder, cfg, plain = survey
    if with_u and not per_pixel:
        folder = tmp_path / "lu"
        folder.mkdir()
        cfg = small_survey(folder, uncertainty=True)
        plain = pipeline.run(cfg, folder / "plain", quiet=True)
        rep = _stack_report(plain)
        assert rep["plan"] == "lookup" and "uncertainty" in rep["outputs"]
    if per_pixel:
        folder = tmp_path / "pp"
        folder.mkdir()
        cfg = small_survey(folder, per_pixel=True)
        plain = pipeline.run(cfg, folder / "plain", quiet=True)
        rep = _stack_report(plain)
        assert rep["plan"] == "per-pixel" and len(rep["reflected_temperature_series_c"]) == small_survey.frames
        assert "uncertainty" in rep["outputs"]
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        res = pipeline.run(cfg, tmp_path / "dist", quiet=True, scheduler=cluster.scheduler_address)
    a = tifffile.imread(tmp_path / "dist" / "wall.temperature.tif")
    b = tifffile.imread(folder / "plain" / "wall.temperature.tif")
    np.testing.assert_array_equal(a, b)            # same kernel, same tables: exactly equal
    got, want = _stack_report(res), _stack_report(plain)
    for key in ("plan", "reflected_temperature_series_c", "uncertainty", "outputs"):
        assert got.get(key) == want.get(key), key
    for name in got["outputs"].values():
        if name.endswith(".tif"):
            np.testing.assert_array_equal(tifffile.imread(tmp_path / "dist" / name),
                                          tifffile.imread(folder / "plain" / name))
    assert got["invalid_pixels"] == want["invalid_pixels"]
    assert got["findings"] == want["findings"]
    for ra, rb in zip(got["regions"], want["regions"]):
        for key in ("min_c", "max_c", "mean_c", "std_c", "p05_c", "p95_c", "valid_values"):
            assert ra[key] == pytest.approx(rb[key], abs=1e-6), (ra["name"], key)
        assert ra["frames"] == rb["frames"]
        assert ra.get("expanded_uncertainty_k") == rb.get("expanded_uncertainty_k")


def test_lazy_graph_computes_nothing_until_asked(survey):
    pytest.importorskip("xarray")
    from dask.callbacks import Callback

    folder, cfg, _ = survey
    c = load_config(cfg)
    _, _, ctxs = pipeline.plan(c, folder / "lazy", {"frame_chunk": 5, "formats": ["tiff"]})
    ctx = ctxs[0]
    from irpipe.stages import build_chain

    chain = build_chain(ctx)
    for s in chain[:2]:
        s.start(ctx)
    rad = chain[[s.name for s in chain].index("radiometric")]

    class Count(Callback):
        n = 0

        def _pretask(self, key, dask, state):
            Count.n += 1

    with Count():
        raw = parallel.lazy_stack(ctx.stack["path"], ctx.shape, ctx.dtype, 5)
        t, side = parallel.lazy_temperature(raw, parallel.PixelKernel([], rad))
        assert t.dims == ("frame", "row", "col") and t.chunks[0] == (5, 5, 5, 5, 3)
        assert t.attrs["units"] == "degC"
        assert Count.n == 0                        # building the graph ran no task
        block = t.isel(frame=slice(5, 10)).compute(scheduler="sync")
        assert Count.n > 0
    with StackReader(ctx.stack["path"]) as r:
        raw_np = r.read(5, 10)
    want = rad.lut_flat.take(np.add(raw_np, rad.offsets, dtype=np.int64) if rad.offsets is not None else raw_np)
    np.testing.assert_array_equal(block.values, want)


def test_stream_chain_reraises_a_stage_error_after_stopping_threads():
    from irpipe.stages import Chunk, Stage

    class Boom(Stage):
        name = "boom"

        def process(self, chunk, ctx):
            if chunk.first == 6:
                raise RuntimeError("boom at 6")

    class Seen(Stage):
        name = "seen"

        def __init__(self):
            self.firsts = []

        def process(self, chunk, ctx):
            self.firsts.append(chunk.first)

    class Ctx:
        shape = (20, 2, 2)
        name = "s"

    seen = Seen()
    chunks = (Chunk(k, np.zeros((2, 2, 2))) for k in range(0, 20, 2))
    with pytest.raises(RuntimeError, match="boom at 6"):
        parallel.stream_chain([Boom(), seen], Ctx(), chunks)
    assert seen.firsts == [0, 2, 4]                # in order, nothing after the failure


def test_stream_chain_keeps_frame_order_in_every_stage():
    from irpipe.stages import Chunk, Stage

    class Rec(Stage):
        def __init__(self, name):
            self.name, self.firsts = name, []

        def process(self, chunk, ctx):
            self.firsts.append(chunk.first)
            chunk.extras[self.name] = True

    class Ctx:
        shape = (300, 1, 1)
        name = "s"

    stages = [Rec(f"s{k}") for k in range(5)]
    done = []
    parallel.stream_chain(stages, Ctx(), (Chunk(k, np.zeros((3, 1, 1))) for k in range(0, 300, 3)),
                          progress=lambda name, d, n: done.append(d))
    for s in stages:
        assert s.firsts == list(range(0, 300, 3))
    assert done == list(range(3, 301, 3))


def test_picture_histogram_from_table_counts_equals_binning_pixels(survey, tmp_path):
    from irpipe.report import picture_from_tiff

    folder, cfg, _ = survey
    c = load_config(cfg)
    _, _, ctxs = pipeline.plan(c, tmp_path, {"frame_chunk": 5, "formats": ["tiff"]})
    rep = pipeline.run_stack(ctxs[0])
    assert rep["plan"] == "lookup"
    got = ctxs[0].shared["picture"]
    want = picture_from_tiff(tmp_path / "wall.temperature.tif")
    np.testing.assert_array_equal(got["hist_counts"], want["hist_counts"])
    np.testing.assert_array_equal(got["hist_edges_c"], want["hist_edges_c"])
    # (the mean image's float32 sums run over other frame groups: equal to rounding)
    np.testing.assert_allclose(got["mean_c"], want["mean_c"], rtol=0, atol=1e-4)
