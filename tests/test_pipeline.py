"""Tests for irpipe.pipeline: the path chosen per stack and its band transmittance, region
statistics against numpy over the written arrays, the manifest's hashes, and the outputs
a run leaves. End-to-end scenes with known truth are in test_end_to_end.py."""
import hashlib
import json

import numpy as np
import pytest
import tifffile

from forward_model import Camera
from irpipe.pipeline import run

K0 = 273.15


@pytest.fixture(scope="module")
def three_paths(tmp_path_factory, camera_yaml):
    """One scene, three stacks: a LOWTRAN7 path, no path, a forced flat path."""
    tmp = tmp_path_factory.mktemp("paths")
    cam = Camera(7.5, 14.0)
    r, c = np.mgrid[0:24, 0:32]
    t = 10.0 + 0.5 * r + 0.2 * c                                   # a smooth gradient [degC]
    rng = np.random.default_rng(3)
    frames = [np.rint(300.0 * cam.received(t + K0 + rng.normal(0, 0.05, t.shape), 0.93, 283.15, 293.15)
                      + 1000.0).astype(np.uint16) for _ in range(6)]
    tifffile.imwrite(tmp / "s.tif", np.array(frames), photometric="minisblack")
    (tmp / "c.yaml").write_text(f"""
camera: {camera_yaml}
conditions: {{emissivity: 0.93, reflected_temperature_c: 10, air_temperature_c: 20, relative_humidity_pct: 60}}
stacks:
  - {{name: lowtran, path: s.tif, conditions: {{distance_m: 10}},
     regions: [{{name: top, rect: [0, 0, 12, 32]}}, {{name: box, rect: [5, 7, 19, 23]}}]}}
  - {{name: none, path: s.tif, conditions: {{distance_m: 0}}}}
  - {{name: flat, path: s.tif, conditions: {{distance_m: 10, atmosphere: {{transmittance: 0.97}}}}}}
output: {{frame_chunk: 4}}
""")
    res = run(tmp / "c.yaml", tmp / "out", quiet=True)
    return tmp, res


def test_path_per_stack(three_paths):
    _, res = three_paths
    by = {s["name"]: s["conditions"] for s in res.report["stacks"]}
    # docs/references.md §4 [C]: LOWTRAN7 band-mean tau, 7.5-14 um, 300 K Planck weight,
    # 1013.25 hPa, 20 C / 60 % RH, 10 m: 0.9757 (0.002: the dossier sampled every 20 cm-1,
    # see test_atmosphere.py)
    assert by["lowtran"]["band_transmittance_300k"] == pytest.approx(0.9757, abs=0.002)
    assert by["lowtran"]["path"].startswith("LOWTRAN7-derived spectral transmittance, 10 m, 20 C, 60 % RH")
    # no path: tau = 1 exactly (Beer-Lambert with zero length)
    assert by["none"]["band_transmittance_300k"] == 1.0 and by["none"]["path"] == "no path (distance 0)"
    assert by["flat"]["band_transmittance_300k"] == 0.97
    assert by["flat"]["path"] == "forced flat transmittance 0.97"


def test_region_statistics_equal_numpy_over_the_written_array(three_paths):
    tmp, res = three_paths
    st = res.report["stacks"][0]
    arr = tifffile.imread(tmp / "out" / "lowtran.temperature.tif").astype(np.float64)
    rects = {"top": (0, 0, 12, 32), "box": (5, 7, 19, 23)}
    for reg in st["regions"]:
        r0, c0, r1, c1 = rects[reg["name"]]
        v = arr[:, r0:r1, c0:c1]
        v = v[np.isfinite(v)]
        # numpy as the independent computation over the written float32 values
        assert reg["valid_values"] == v.size
        assert reg["mean_c"] == pytest.approx(v.mean(), abs=1e-4), reg["name"]
        assert reg["min_c"] == pytest.approx(v.min(), abs=1e-6) and reg["max_c"] == pytest.approx(v.max(), abs=1e-6)
        assert reg["std_c"] == pytest.approx(v.std(), abs=1e-3)
        # percentiles: numpy.percentile, default (linear) method; 0.01 K
        assert reg["p05_c"] == pytest.approx(np.percentile(v, 5), abs=0.01), reg["name"]
        assert reg["p95_c"] == pytest.approx(np.percentile(v, 95), abs=0.01), reg["name"]


def test_more_path_means_a_warmer_correction(three_paths):
    tmp, _ = three_paths
    # same raw data: an object warmer than the air (the gradient tops 25.7 C, air 20 C) loses
    # signal on the path, so correcting for a path raises the hot end; at the cold end (10 C,
    # below the air) the path adds signal and the correction lowers it (measurement equation,
    # docs/references.md §3)
    none = tifffile.imread(tmp / "out" / "none.temperature.tif").mean(0)
    lowtran = tifffile.imread(tmp / "out" / "lowtran.temperature.tif").mean(0)
    assert lowtran[-1, -1] > none[-1, -1] and lowtran[0, 0] < none[0, 0]


def test_manifest_hashes_config_and_inputs(three_paths):
    tmp, res = three_paths
    man = json.loads((tmp / "out" / "manifest.json").read_text())
    assert man["config_sha256"] == hashlib.sha256((tmp / "c.yaml").read_bytes()).hexdigest()
    stack_hash = hashlib.sha256((tmp / "s.tif").read_bytes()).hexdigest()
    assert [s["name"] for s in man["stacks"]] == ["lowtran", "none", "flat"]
    for s in man["stacks"]:
        assert s["status"] == "done"
        assert list(s["inputs"].values()) == [stack_hash]
        for name in s["outputs"].values():
            assert (tmp / "out" / name).is_file()
    # three different paths: three different fingerprints (so --resume redoes a changed stack)
    assert len({s["fingerprint"] for s in man["stacks"]}) == 3


def test_outputs_of_a_run(three_paths):
    tmp, res = three_paths
    assert res.exit_code == 0
    names = sorted(p.name for p in (tmp / "out").iterdir())
    assert names == sorted(["flat.temperature.tif", "findings.csv", "lowtran.temperature.tif", "manifest.json",
                            "none.temperature.tif", "regions.csv", "report.html", "report.json"])
    rep = json.loads((tmp / "out" / "report.json").read_text())
    assert [s["name"] for s in rep["stacks"]] == ["lowtran", "none", "flat"]
