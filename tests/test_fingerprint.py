"""Pixel fingerprint vs. whole-run fingerprint (irpipe.fingerprint): drawing a region that
does not change pixel values must not change the pixel fingerprint (common practice, no
source: cache keys cover exactly the inputs of the cached value)."""
import json

import numpy as np
import tifffile

from irpipe.config import load_config
from irpipe.fingerprint import pixel_fingerprint, stack_fingerprint
from irpipe.manifest import hash_files, stack_inputs
from irpipe.pipeline import run


def survey(tmp_path, regions, emissivity="0.95"):
    tifffile.imwrite(tmp_path / "s.tif", np.full((2, 10, 12), 3000, np.uint16), photometric="minisblack")
    text = f"""camera: {{spectral_band_um: [7.5, 14.0], calibration: {{model: linear, gain: 250.0, offset_counts: 2000.0}}}}
conditions: {{reflected_temperature_c: 5, air_temperature_c: 5, distance_m: 0}}
stacks:
  - name: s
    path: s.tif
    conditions: {{emissivity: {emissivity}}}
    regions: {regions}
"""
    p = tmp_path / "survey.yaml"
    p.write_text(text)
    cfg = load_config(p)
    hashes = hash_files(stack_inputs(cfg, 0))
    return cfg, pixel_fingerprint(cfg, 0, hashes), stack_fingerprint(cfg, 0, hashes)


def test_drawing_a_plain_region_keeps_the_pixel_fingerprint(tmp_path):
    _, p0, s0 = survey(tmp_path, "[]")
    _, p1, s1 = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4]}]")
    _, p2, s2 = survey(tmp_path, "[{name: b, rect: [1, 1, 5, 6]}]")
    assert p0 == p1 == p2
    assert len({s0, s1, s2}) == 3


def test_regions_that_change_pixels_change_it(tmp_path):
    by_region = "{regions: {a: 0.8}, default: 0.95}"
    _, p1, _ = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4]}]", by_region)
    _, p2, _ = survey(tmp_path, "[{name: a, rect: [0, 0, 5, 4]}]", by_region)
    _, p3, _ = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4], view_angle_deg: 40}]")
    _, p4, _ = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4]}]")
    _, p5, _ = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4]}]", "0.9")
    assert len({p1, p2, p3, p4, p5}) == 5


def test_manifest_records_both(tmp_path):
    cfg, p, s = survey(tmp_path, "[{name: a, rect: [0, 0, 4, 4]}]")
    run(tmp_path / "survey.yaml", tmp_path / "out", write_report=False)
    entry = json.loads((tmp_path / "out" / "manifest.json").read_text())["stacks"][0]
    assert entry["pixel_fingerprint"] == p and entry["fingerprint"] == s
