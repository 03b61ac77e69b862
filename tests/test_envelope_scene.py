"""Interior envelope scene end to end: temperature factor, mould and condensation risk.

Truth: f_Rsi = (theta_si,min - theta_e)/(theta_i - theta_e) (ISO 13788:2012 / ISO 10211:2017);
mould risk at surface RH >= 80 % and condensation at or below the dew point (ISO 13788);
indoor 20 C / 60 % RH, outdoor 0 C: theta_si for 80 % surface RH is 15.43 C and the dew point
12.00 C (docs/references.md §6, AERK formula). Scene from tests/forward_model.py."""
import json

import numpy as np
import pytest
import tifffile

from forward_model import Camera
from irpipe.pipeline import run

K0 = 273.15


def test_interior_wall_corner_reveal(tmp_path, camera_yaml):
    rows, cols = 80, 120
    r, c = np.mgrid[0:rows, 0:cols]
    t = np.full((rows, cols), 18.4)                                # plain wall, f = 0.92
    corner = np.clip((c - 90) / 29.0, 0, 1)                        # cold corner toward col 119
    t = t - 7.4 * corner**2                                        # min 11.0 C: below dew point 12.0
    reveal = (c >= 50) & (c < 62) & (r >= 20) & (r < 60)
    t[reveal] = 14.6                                               # 15.43 > 14.6 > 12.0: mould, no condensation
    eps = 0.92
    cam = Camera(7.5, 14.0)
    l = cam.received(t + K0, eps, 19.0 + K0, 20.0 + K0)
    tapp = cam.apparent(l)
    rng = np.random.default_rng(11)
    frames = np.stack([tapp + rng.normal(0, 0.05, tapp.shape) for _ in range(4)])  # 50 mK NETD
    grid = np.linspace(250.0, 330.0, 8001)
    counts = np.rint(300.0 * np.interp(frames, grid, cam.band(grid)) + 1000.0).astype(np.uint16)
    tifffile.imwrite(tmp_path / "room.tif", counts)
    cfg = tmp_path / "c.yaml"
    cfg.write_text(
        "survey: {indoor_air_c: 20, outdoor_air_c: 0, indoor_relative_humidity_pct: 60}\n"
        f"camera: {camera_yaml}\n"
        "conditions: {emissivity: 0.92, reflected_temperature_c: 19, air_temperature_c: 20, distance_m: 0}\n"
        "stacks:\n  - name: room\n    path: room.tif\n    regions:\n"
        "      - {name: wall, rect: [10, 5, 70, 45]}\n"
        "      - {name: corner, rect: [0, 100, 80, 120]}\n"
        "      - {name: reveal, rect: [20, 50, 60, 62]}\n")
    run(cfg, tmp_path / "o")
    rep = json.loads((tmp_path / "o" / "report.json").read_text())
    reg = {x["name"]: x for x in rep["stacks"][0]["regions"]}
    truth = {"wall": (18.4, False, False), "corner": (11.0, True, True), "reveal": (14.6, True, False)}
    for name, (tmin, mould, cond) in truth.items():
        f_true = (tmin - 0.0) / (20.0 - 0.0)                       # ISO 13788 definition
        assert reg[name]["temperature_factor"] == pytest.approx(f_true, abs=0.012), name   # brief tolerance
        assert reg[name]["mould_risk"] is mould, name
        assert reg[name]["condensation_risk"] is cond, name
    assert rep["survey"]["indoor_dew_point_c"] == pytest.approx(12.00, abs=0.01)   # docs/references.md §6
    assert rep["warnings"] == []          # 20 K difference: no survey-condition warning


def test_small_difference_warns(tmp_path, camera_yaml):
    tifffile.imwrite(tmp_path / "s.tif", np.full((1, 8, 8), 20000, np.uint16))
    cfg = tmp_path / "c.yaml"
    cfg.write_text("survey: {indoor_air_c: 20, outdoor_air_c: 14}\n"
                   f"camera: {camera_yaml}\n"
                   "conditions: {emissivity: 0.92, reflected_temperature_c: 19, air_temperature_c: 20}\n"
                   "stacks: [{name: s, path: s.tif, regions: [{name: w, rect: [0, 0, 8, 8]}]}]\n")
    res = run(cfg, tmp_path / "o")
    # envelope surveys need about 10 K across the envelope (EN 13187 / EN ISO 6781-1 practice; common practice)
    assert any("10 K" in w for w in res.report["warnings"])
