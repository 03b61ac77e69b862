"""Scale-out and streaming: the threaded stream, the dask.distributed run, the lazy dask
graph, and the fast paths of the stack reader/writer give the results of the plain
one-thread loop (these are equivalence tests of this package's own code paths)."""
import json

import numpy as np
import pytest
import tifffile

from irpipe import parallel, pipeline, runner
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
    tables = ctx.tables

    class Count(Callback):
        n = 0

        def _pretask(self, key, dask, state):
            Count.n += 1

    with Count():
        raw = parallel.lazy_stack(ctx.stack["path"], ctx.shape, ctx.dtype, 5)
        t, side = parallel.lazy_temperature(raw, tables)
        assert t.dims == ("frame", "row", "col") and t.chunks[0] == (5, 5, 5, 5, 3)
        assert t.attrs["units"] == "degC"
        assert Count.n == 0                        # building the graph ran no task
        block = t.isel(frame=slice(5, 10)).compute(scheduler="sync")
        assert Count.n > 0
    with StackReader(ctx.stack["path"]) as r:
        raw_np = r.read(5, 10)
    want = tables.lut_c.ravel().take(tables.index_of(raw_np))
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
        runner.stream_chain([Boom(), seen], Ctx(), chunks)
    # in order and nothing from the failed chunk on; chunks already queued behind the
    # failure may or may not have reached the later stage when the threads stop
    assert seen.firsts == [0, 2, 4][:len(seen.firsts)]


def test_stream_chain_keeps_frame_order_in_every_stage():
    from irpipe.stages import Chunk, Stage

    class Rec(Stage):
        def __init__(self, name):
            self.name, self.firsts = name, []

        def process(self, chunk, ctx):
            self.firsts.append(chunk.first)

    class Ctx:
        shape = (300, 1, 1)
        name = "s"

    stages = [Rec(f"s{k}") for k in range(5)]
    done = []
    runner.stream_chain(stages, Ctx(), (Chunk(k, np.zeros((3, 1, 1))) for k in range(0, 300, 3)),
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
    got = ctxs[0].picture.as_dict()
    want = picture_from_tiff(tmp_path / "wall.temperature.tif")
    np.testing.assert_array_equal(got["hist_counts"], want["hist_counts"])
    np.testing.assert_array_equal(got["hist_edges_c"], want["hist_edges_c"])
    # (the mean image's float32 sums run over other frame groups: equal to rounding)
    np.testing.assert_allclose(got["mean_c"], want["mean_c"], rtol=0, atol=1e-4)


# --- one kernel, every way of running it -------------------------------------------------

def test_lookup_and_per_pixel_plans_give_the_same_temperatures(survey, tmp_path):
    """The same scene through both plans of the one pixel kernel: the label emissivity as
    labels (lookup plan, float64 tables) and as an equal float map (per-pixel plan,
    float32 arithmetic). Tolerance: the per-pixel plan's float32 working precision,
    documented as within 0.01 K of float64 (irpipe.kernel)."""
    from irpipe.emissivity import material_emissivity
    from irpipe.prepare import load_materials

    folder, cfg, plain = survey
    labels = tifffile.imread(folder / "labels.tif")
    lib = load_materials(load_config(cfg))
    eps = {1: "brick-common", 2: "glass-uncoated", 3: "galvanised-steel-weathered"}
    emap = np.zeros(labels.shape, np.float32)
    for k, name in eps.items():
        emap[labels == k] = material_emissivity(name, lib)
    tifffile.imwrite(folder / "emissivity_map.tif", emap)
    text = cfg.read_text()
    start = text.index("  emissivity:")
    end = text.index("  reflected_temperature_c")
    (folder / "map.yaml").write_text(text[:start] + "  emissivity: {map: emissivity_map.tif}\n" + text[end:])
    res = pipeline.run(folder / "map.yaml", tmp_path / "map", quiet=True)
    assert _stack_report(res)["plan"] == "per-pixel" and _stack_report(plain)["plan"] == "lookup"
    a = tifffile.imread(tmp_path / "map" / "wall.temperature.tif")
    b = tifffile.imread(folder / "plain" / "wall.temperature.tif")
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    ok = np.isfinite(a)
    assert np.abs(a[ok] - b[ok]).max() < 0.01
    assert _stack_report(res)["invalid_pixels"] == _stack_report(plain)["invalid_pixels"]


def test_field_command_reads_the_signal_the_run_corrects(survey, small_survey):
    """measure_regions (irpipe emissivity) runs the stack's own chain: the region signal it
    returns, put through the measurement equation with the stack's emissivity, gives the
    run's frame-averaged temperatures (equal in signal units; frames averaged in signal)."""
    from irpipe.cli_field import measure_regions
    from irpipe.constants import ZERO_CELSIUS

    folder, cfg, plain = survey
    m = measure_regions(cfg, "wall", ["field"])
    sig = m["signal"]["field"]
    from irpipe.prepare import load_materials
    from irpipe.emissivity import material_emissivity
    eps = material_emissivity("brick-common", load_materials(load_config(cfg)))
    t_mean_signal = m["model"].object_temperature(sig, eps, m["reflected_temperature_k"],
                                                  m["air_temperature_k"]) - ZERO_CELSIUS
    temp = tifffile.imread(folder / "plain" / "wall.temperature.tif")[:, 20:38, 2:30].reshape(small_survey.frames, -1)
    # the run's temperatures turned back into signal and averaged over frames
    model = m["model"]
    g_refl, path = model.background(eps, m["reflected_temperature_k"], m["air_temperature_k"])
    s_run = eps * model.path_signal(temp.astype(np.float64) + ZERO_CELSIUS) + (1 - eps) * g_refl + path
    want = model.object_temperature(np.nanmean(s_run, axis=0), eps, m["reflected_temperature_k"],
                                    m["air_temperature_k"]) - ZERO_CELSIUS
    np.testing.assert_allclose(t_mean_signal, want, atol=2e-3)


@pytest.mark.parametrize("edit, key", [
    (("hotspots: {above_reference_k: 1.0, reference: median, min_area_px: 2}", "hotspots: {min_area_px: 2}"),
     "hotspots: no threshold"),
    (("hotspots: {above_reference_k: 1.0, reference: median, min_area_px: 2}",
      "hotspots: {above_reference_k: 1.0, min_area_px: 2}"), "above_reference_k is relative to a reference"),
    (("      - {name: overlap, rect: [8, 20, 30, 50]}",
      "      - {name: overlap, rect: [8, 20, 30, 50], role: component, reference: nowhere}"),
     "'nowhere' is not a region of this stack"),
    (("reflected_temperature_c: -8.0", "reflected_temperature_c: {reflector: field, reflector_emissivity: 0.6}"),
     "a reflector of emissivity 0.6 is not a reflector"),
], ids=["spot-without-threshold", "relative-without-reference", "unknown-electrical-reference",
        "reflector-emissivity"])
def test_validate_rejects_late_config_errors(tmp_path, edit, key, small_survey):
    """Each error a stage could once raise mid-run is caught by `irpipe validate`: one
    line naming the file and key, exit 2, and `irpipe run` writes no output."""
    import subprocess
    import sys

    cfg = small_survey(tmp_path)
    text = cfg.read_text()
    assert edit[0] in text
    cfg.write_text(text.replace(edit[0], edit[1]))
    r = subprocess.run([sys.executable, "-m", "irpipe.cli", "validate", str(cfg)], capture_output=True, text=True)
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "survey.yaml" in lines[0] and key in lines[0], r.stderr
    r = subprocess.run([sys.executable, "-m", "irpipe.cli", "run", str(cfg), "--out", str(tmp_path / "out"),
                        "--quiet"], capture_output=True, text=True)
    assert r.returncode == 2
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())
