"""Region statistics at any stack length: percentiles over every frame, in both plans of
the radiometric kernel, against numpy over the written arrays."""
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
output: {{frame_chunk: 32, report: false}}
"""


@pytest.mark.parametrize("plan", ["lookup", "per-pixel"])
def test_percentiles_of_a_600_frame_stack_match_numpy(tmp_path, plan, camera_yaml):
    """Done-when figure of the restructuring: P05 and P95 of a 600-frame stack agree within
    0.01 K with numpy.percentile (default, linear) over the valid values of the written
    arrays (the method's bound is half a 0.01 K bin)."""
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
    else:
        tifffile.imwrite(tmp_path / "eps.tif", np.full((24, 32), 0.93, np.float32))
        eps = "{map: eps.tif}"
    (tmp_path / "s.yaml").write_text(CONFIG.format(camera=camera_yaml, emissivity=eps))
    res = run(tmp_path / "s.yaml", tmp_path / "out", quiet=True)
    st = res.report["stacks"][0]
    assert st["plan"] == plan
    assert "percentiles_from_every_nth_chunk" not in st
    t = tifffile.imread(tmp_path / "out" / "long.temperature.tif")
    regions = {"all": {"rect": [0, 0, 24, 32]}, "blob": {"ellipse": {"center": [12, 20], "radii": [6, 8]}}}
    for reg in st["regions"]:
        m = region_mask((24, 32), regions[reg["name"]])
        v = t[:, m]
        v = v[np.isfinite(v)].astype(np.float64)
        assert reg["valid_values"] == v.size
        for q, key in ((5, "p05_c"), (95, "p95_c")):
            err = abs(reg[key] - np.percentile(v, q))
            print(f"{plan} {reg['name']} {key}: error {err * 1000:.2f} mK")
            assert err <= 0.01, (reg["name"], key, reg[key], np.percentile(v, q))
