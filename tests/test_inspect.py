"""irpipe inspect, Python side: the page's data, reuse of current outputs, nothing written
into output.dir, YAML spans (checks: common practice, no source)."""
import json
import os

import numpy as np
import pytest
import tifffile

from inspect_scenes import demo_copy, pane_scene
from irpipe.cli import main
from irpipe.errors import ConfigError
from irpipe.inspect import build, colour_table, write_page, yaml_spans
from irpipe.pipeline import run


def _listing(d):
    return sorted((p.name, p.stat().st_mtime_ns, p.stat().st_size) for p in d.iterdir()) if d.exists() else None


def test_spans_cover_the_blocks(tmp_path):
    cfg = demo_copy(tmp_path / "demo")
    text = cfg.read_text()
    lines = text.split("\n")
    spans = yaml_spans(text)
    import yaml
    assert len(spans) == len(yaml.safe_load(text)["stacks"])      # one per stack
    reg = spans[0]["keys"]["regions"]
    assert lines[reg["start"]].strip() == "regions:"
    assert lines[reg["end"] - 1].strip().startswith("- {name: window,")
    assert lines[reg["end"]].strip().startswith("hotspots:")
    em = spans[0]["conditions"]["emissivity"]
    assert lines[em["start"]].strip() == "emissivity:" and lines[em["end"] - 1].strip().startswith("values:")
    assert spans[1]["conditions"]["emissivity"]["end"] - spans[1]["conditions"]["emissivity"]["start"] == 1
    assert all(s["item"]["ok"] for s in spans)


def test_page_is_self_contained_and_writes_only_itself(tmp_path):
    cfg, _ = pane_scene(tmp_path / "s")
    out_dir = tmp_path / "s" / "out"
    before = _listing(tmp_path / "s")
    dest, notes = write_page(cfg, tmp_path / "page.html")
    after = _listing(tmp_path / "s")
    assert before == after and not out_dir.exists()
    html = dest.read_text()
    assert "processed now" in notes[0]
    # no external fetches: nothing loaded by URL
    for bad in ("http://", "https://", "src=\"", "<link", "@import"):
        assert bad not in html, bad
    assert len(colour_table()) == 256 * 6


def test_reuses_current_outputs_and_stays_out_of_output_dir(tmp_path):
    cfg, _ = pane_scene(tmp_path / "s")
    run(cfg, write_report=False)
    out_dir = tmp_path / "s" / "out"
    before = _listing(out_dir)
    payload, notes = build(cfg)
    assert "earlier run" in notes[0] and "findings shown are from that run" not in notes[0]
    assert _listing(out_dir) == before
    # the page's mean frame is the written TIFF's NaN-ignoring mean
    import base64
    got = np.frombuffer(base64.b64decode(payload["stacks"][0]["temperature"]), np.float32).reshape(48, 64)
    want = np.nanmean(tifffile.imread(out_dir / "pane.temperature.tif").astype(np.float64), axis=0)
    assert np.abs(got - want).max() < 1e-4
    # a new region that does not change pixels: outputs still reused (pixel fingerprint)
    text = cfg.read_text().replace("# keep me\n", "# keep me\n      - {name: extra, rect: [0, 0, 5, 5]}\n")
    cfg.write_text(text)
    _, notes = build(cfg)
    assert "earlier run" in notes[0] and "findings shown are from that run" in notes[0]
    # a new emissivity changes pixels: processed again
    cfg.write_text(text.replace("emissivity: 0.95", "emissivity: 0.9"))
    _, notes = build(cfg)
    assert "processed now" in notes[0]


def test_unknown_stack_and_cli(tmp_path, capsys):
    cfg, _ = pane_scene(tmp_path / "s")
    with pytest.raises(ConfigError, match=r"--stack 'nope' is not a stack of this survey; stacks: pane"):
        build(cfg, stacks=["nope"])
    assert main(["inspect", str(cfg), "--out", str(tmp_path / "p.html"), "--stack", "pane"]) == 0
    assert "page written to" in capsys.readouterr().out and (tmp_path / "p.html").is_file()


def test_config_text_cannot_break_out_of_the_data_element(tmp_path):
    cfg, _ = pane_scene(tmp_path / "s", title='"</script><script>window.x=1</script>"')
    dest, _ = write_page(cfg, tmp_path / "page.html")
    html = dest.read_text()
    assert html.count("</script>") == 2          # the data element's and the script's own
    assert "\\u003c/script\\u003e" in html


def test_page_stays_within_its_size_budget(tmp_path):
    from irpipe.inspect import page_budget
    cfg, _ = pane_scene(tmp_path / "s", frames=5)
    dest, _ = write_page(cfg, tmp_path / "p.html")
    size = dest.stat().st_size
    assert size <= page_budget(48, 64, 5)
    # and the frames are what grows with the stack: 16 bits per pixel per frame, base64
    cfg2, _ = pane_scene(tmp_path / "t", frames=1)
    dest2, _ = write_page(cfg2, tmp_path / "q.html")
    assert abs((size - dest2.stat().st_size) - 5 * 48 * 64 * 2 * 4 / 3) < 2000
