"""Small surveys for the inspect tests, generated with the independent forward model
(tests/forward_model.py): no path (distance 0), linear counts."""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import tifffile
import yaml

from forward_model import Camera

K0 = 273.15
ROOT = Path(__file__).parents[1]


def library_emissivity(name):
    """A material's emissivity read from configs/materials.yaml with plain YAML."""
    return yaml.safe_load((ROOT / "configs" / "materials.yaml").read_text())[name]["emissivity"]


def pane_scene(folder: Path, frames=3, title="Pane test", extra_regions="", rows=48, cols=64, seed=5):
    """A wall at 6 C (emissivity 0.95) with a glass pane at 9 C whose true emissivity is the
    library's glass-uncoated; the config knows only 0.95 everywhere."""
    folder.mkdir(parents=True, exist_ok=True)
    cam = Camera(7.5, 14.0)
    t = np.full((rows, cols), 6.0)
    e = np.full((rows, cols), 0.95)
    t[10:30, 20:50] = 9.0
    e[10:30, 20:50] = library_emissivity("glass-uncoated")
    rad = cam.received(t + K0, e, -5 + K0, 5 + K0)
    rng = np.random.default_rng(seed)
    drift = np.linspace(-0.3, 0.3, frames)[:, None, None]        # a slow drift of a few counts
    raw = np.rint(250.0 * rad + 2000.0)[None] + np.rint(drift * 25) + rng.integers(-1, 2, (frames, rows, cols))
    tifffile.imwrite(folder / "pane.tif", raw.astype(np.uint16), photometric="minisblack")
    text = f"""# pane survey: comments and key order outside the edited blocks must survive
survey:
  title: {title!s}
  site: test bench   # a trailing comment
camera:
  spectral_band_um: [7.5, 14.0]
  calibration: {{model: linear, gain: 250.0, offset_counts: 2000.0}}
conditions:
  emissivity: 0.95
  reflected_temperature_c: -5
  air_temperature_c: 5
  distance_m: 0
uncertainty: {{emissivity: 0.02, reflected_temperature_k: 2.0}}
stacks:
  - name: pane
    path: pane.tif
    regions:
      - {{name: wall, rect: [34, 2, 46, 60]}}   # keep me
{extra_regions}    hotspots: {{above_reference_k: 1.5, reference: wall, min_area_px: 4}}
output:
  dir: out
"""
    (folder / "survey.yaml").write_text(text)
    return folder / "survey.yaml", t


def demo_copy(folder: Path):
    """The shipped demo survey copied into ``folder``."""
    shutil.copytree(ROOT / "demo_frames", folder)
    return folder / "survey.yaml"


def big_scene(folder: Path, rows=512, cols=640, frames=10):
    """A large stack for the page-size and time-to-ready figures (no truth needed):
    a smooth 5-11 C field as linear counts with +-2 counts of noise."""
    from irpipe.radiometry import SpectralResponse

    folder.mkdir(parents=True, exist_ok=True)
    band = SpectralResponse.rectangular(7.5e-6, 14e-6)
    rr, cc = np.mgrid[0:rows, 0:cols]
    t = K0 + 5.0 + 4.0 * rr / rows + 2.0 * np.sin(cc / 40.0)
    grid = np.linspace(t.min() - 1, t.max() + 1, 2001)
    lum = np.interp(t, grid, band.band_radiance(grid))
    rng = np.random.default_rng(1)
    raw = np.rint(2000.0 + 250.0 * lum)[None] + rng.integers(-2, 3, (frames, rows, cols))
    tifffile.imwrite(folder / "big.tif", raw.astype(np.uint16), photometric="minisblack")
    (folder / "survey.yaml").write_text(f"""camera:
  spectral_band_um: [7.5, 14.0]
  calibration: {{model: linear, gain: 250.0, offset_counts: 2000.0}}
conditions: {{emissivity: 0.93, reflected_temperature_c: 0, air_temperature_c: 5, distance_m: 0}}
uncertainty: {{emissivity: 0.02, reflected_temperature_k: 2.0}}
stacks:
  - name: big
    path: big.tif
    regions:
      - {{name: wall, rect: [10, 10, {rows // 2}, {cols // 2}]}}
      - {{name: corner, polygon: [[0, {cols - 100}], [0, {cols - 1}], [100, {cols - 1}]]}}
output: {{dir: out}}
""")
    return folder / "survey.yaml"
