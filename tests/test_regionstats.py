"""Region statistics at any stack length: percentiles over every frame, in both plans of
the radiometric kernel, against numpy over the written arrays.

Reference: numpy.percentile's default (linear) method, Hyndman & Fan (1996) definition 7,
and numpy.std (population); the truth is numpy over the written temperature arrays."""
import numpy as np
import pytest
import tifffile

from irpipe.pipeline import run

CONFIG = """
camera: {camera}
conditions:
  emissivity: {emissivity}
  reflected_temperature_c: 5.0
  air_temperature_c: 5.0
stacks:
  - name: long
    path: long.tif
    regions:
      - {{name: all, rect: [0, 0, 24, 32]}}
      - {{name: blob, ellipse: {{center: [12, 20], radii: [6, 8]}}}}
      - {{name: band, rect: [8, 0, 16, 32]}}
output: {{frame_chunk: 32, report: false}}
"""


@pytest.mark.parametrize("plan", ["lookup", "lookup-labels", "per-pixel"])
def test_percentiles_of_a_600_frame_stack_match_numpy(tmp_path, plan, camera_yaml):
    """P05, P95 and the standard deviation of a 600-frame stack against numpy over the
    valid values of the written arrays. Lookup plan (one emissivity, or a label image
    whose materials the overlapping regions cut across): exact, from the tally of
    (group, raw value) pairs. Per-pixel plan: within half a 0.01 K bin (the streaming
    histogram's bound)."""
    from irpipe.regions import region_mask

    rng = np.random.default_rng(600)
    r, c = np.mgrid[0:24, 0:32]
    frames = 600
    drift = 150 * np.sin(np.arange(frames) / 40.0)[:, None, None]      # slow scene change
    raw = 17000 + 20 * r + 10 * c + drift + rng.normal(0, 15, (frames, 24, 32))
    raw[::97, 3, 3] = 65535                                             # a few saturated values
    tifffile.imwrite(tmp_path / "long.tif", np.rint(raw).astype(np.uint16), photometric="minisblack")
    if plan == "lookup":
        eps = "0.93"
    elif plan == "lookup-labels":
        tifffile.imwrite(tmp_path / "labels.tif", (1 + (c >= 12)).astype(np.uint8), photometric="minisblack")
        eps = "{labels: labels.tif, values: {1: brick-common, 2: timber}}"
    else:
        tifffile.imwrite(tmp_path / "eps.tif", np.full((24, 32), 0.93, np.float32))
        eps = "{map: eps.tif}"
    (tmp_path / "s.yaml").write_text(CONFIG.format(camera=camera_yaml, emissivity=eps))
    res = run(tmp_path / "s.yaml", tmp_path / "out", quiet=True)
    st = res.report["stacks"][0]
    assert st["plan"] == ("lookup" if plan.startswith("lookup") else plan)
    assert "percentiles_from_every_nth_chunk" not in st
    t = tifffile.imread(tmp_path / "out" / "long.temperature.tif")
    regions = {"all": {"rect": [0, 0, 24, 32]}, "blob": {"ellipse": {"center": [12, 20], "radii": [6, 8]}},
               "band": {"rect": [8, 0, 16, 32]}}
    bound = 0.0 if plan.startswith("lookup") else 0.005          # exact / half a 0.01 K bin
    for reg in st["regions"]:
        m = region_mask((24, 32), regions[reg["name"]])
        v = t[:, m]
        v = v[np.isfinite(v)].astype(np.float64)
        assert reg["valid_values"] == v.size
        for q, key in ((5, "p05_c"), (95, "p95_c")):
            err = abs(reg[key] - np.percentile(v, q))
            print(f"{plan} {reg['name']} {key}: error {err * 1000:.2f} mK")
            assert err <= bound + 1e-12, (reg["name"], key, reg[key], np.percentile(v, q))
        assert reg["std_c"] == pytest.approx(v.std(), rel=1e-9 if bound == 0 else 1e-6, abs=1e-9)
        assert reg["mean_c"] == pytest.approx(v.mean(), abs=1e-6)
