"""Reused chunk buffers (irpipe.buffers) can never overwrite data a stage still holds:
unit checks of the pool, and a run whose extra stage keeps every chunk's arrays, against
the written temperature stack and the raw file. Common practice, no source: the
guarantee is the reference count, so these checks are of the mechanism itself."""
import numpy as np
import tifffile

from irpipe.buffers import BufferPool


def test_a_buffer_returns_only_when_nothing_else_holds_it():
    pool = BufferPool(keep=4)
    a = pool.empty((3, 4), np.float32)
    b = pool.empty((3, 4), np.float32)
    assert b is not a                        # a is still held
    first = id(a)
    del a
    c = pool.empty((3, 4), np.float32)
    assert id(c) == first                    # free again: reused
    view = c[1:]
    del c
    d = pool.empty((3, 4), np.float32)
    assert id(d) != first                    # a view keeps its buffer out of the pool
    assert np.shares_memory(view, view)      # (the view is still alive here)
    e = pool.empty((2, 4), np.float32)       # another shape: a new buffer
    assert e.shape == (2, 4) and e.dtype == np.float32


def test_a_full_pool_still_hands_out_new_arrays():
    pool = BufferPool(keep=1)
    held = [pool.empty((5,), np.uint16) for _ in range(3)]
    assert len({id(h) for h in held}) == 3


def test_stages_that_keep_chunks_see_their_own_data(tmp_path, small_survey):
    """A stage keeping every chunk's raw and temperature arrays (as a field command's
    collector may) gets exactly the written stack and the raw file back: the pools never
    reused a held buffer. Chunks of 2 frames, so the stack passes many chunks."""
    from irpipe.config import load_config
    from irpipe.pipeline import plan
    from irpipe.prepare import prepare_stack
    from irpipe.runner import local_chunks, run_chain
    from irpipe.stages import Stage, build_chain

    cfg_path = small_survey(tmp_path, chunk=2)
    cfg = load_config(cfg_path)
    cameras, materials, _ = plan(cfg, tmp_path / "out", {"frame_chunk": 2}, with_model=False)

    class Keep(Stage):
        name = "keep"
        requires = ("chunk.temperature_c", "chunk.raw")

        def start(self, ctx):
            self.kept = []

        def process(self, chunk, ctx):
            self.kept.append((chunk.first, chunk.raw, chunk.temperature_c))

    (tmp_path / "out").mkdir()
    ctx = prepare_stack(cfg, 0, tmp_path / "out", cameras, materials, {"frame_chunk": 2})
    keep = Keep()
    run_chain(build_chain(ctx, extra=[keep]), ctx, local_chunks(ctx))
    assert ctx.report["plan"] == "lookup" and len(keep.kept) > 2
    written = tifffile.imread(tmp_path / "out" / ctx.outputs["temperature"])
    raw = tifffile.imread(ctx.stack["path"])
    for first, r, t in keep.kept:
        np.testing.assert_array_equal(t, written[first:first + t.shape[0]])
        np.testing.assert_array_equal(r, raw[first:first + r.shape[0]])
    assert sum(t.shape[0] for _, _, t in keep.kept) == written.shape[0]
