"""The demo survey: an invented site, frames synthesised from the forward model.

Scenario (all invented): "Larchgate Mews, no. 7", a 1930s brick end-terrace surveyed on a
still winter evening, 1 C outside and 20 C inside, plus its garden workshop's
distribution board under load, and a three-day time-lapse of a bedroom's external wall. Five stacks:

* ``rear-elevation``: brick wall with a timber-framed window, a concrete lintel that is a
  thermal bridge, a patch of missing cavity insulation, and a weathered galvanised gutter
  reflecting the cold sky; raw counts, linear calibration, label-map emissivity, 9 m path.
* ``landing-bedroom``: interior wall with a cold external corner and a window reveal;
  raw counts from the same camera, 6 frames.
* ``workshop-board``: distribution board with one overheating connection; the camera's
  apparent-temperature export (centikelvin), 6 frames as the load settles.
* ``porch-reflector``: a painted door with crumpled-foil reflector in the scene, so that
  the reflected temperature is taken from the frames (ASTM E1862 reflector method).

* ``bedroom-wall-72h``: 72 h time-lapse (144 frames at 30 min, 48 x 64 px) of the inside of
  an external wall with a partly insulated field, a lintel strip without insulation and an
  uninsulated solid-brick part, with the room's air log (``bedroom_air_log.csv``); surface
  temperatures from a one-dimensional finite-difference wall under periodic outdoor air.

``write_demo(folder)`` writes the TIFF stacks, label maps and ``survey.yaml``; the frames
shipped in ``demo_frames/`` were made by ``scripts/make_demo_frames.py`` with it.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .constants import ZERO_CELSIUS as K0

ROWS, COLS = 120, 160
OUTDOOR_C, INDOOR_C, INDOOR_RH = 1.0, 20.0, 60.0
SKY_REFLECTED_C = -12.0

SURVEY_YAML = """\
# Demo survey (invented site). Run:  irpipe demo   or   irpipe run demo_frames/survey.yaml
survey:
  title: "Larchgate Mews no. 7 - winter envelope and workshop survey (demo data)"
  site: "Larchgate Mews 7 (invented)"
  date: "2026-01-14"
  operator: "demo"
  indoor_air_c: 20.0
  outdoor_air_c: 1.0
  indoor_relative_humidity_pct: 60
  building_use: dwelling
  air_log: bedroom_air_log.csv
  heating_degree_days_kd: 2600
  heating_degree_days_base_c: 15.5
camera:
  spectral_band_um: [7.5, 14.0]
  input: counts
  calibration: {model: linear, gain: 300.0, offset_counts: 1000.0}
conditions:
  emissivity: 0.93
  reflected_temperature_c: -12.0
  air_temperature_c: 1.0
  relative_humidity_pct: 85
  distance_m: 9
uncertainty: {emissivity: 0.02, reflected_temperature_k: 3.0, air_temperature_k: 1.0, relative_humidity_pct: 5, distance_m: 0.5, camera_k: 0.5}
stacks:
  - name: rear-elevation
    path: rear_elevation.tif
    assessment: envelope
    view_from: outside
    conditions:
      emissivity:
        labels: rear_elevation_labels.tif
        values: {1: brick-common, 2: timber, 3: glass-uncoated, 4: galvanised-steel-weathered, 5: concrete}
    regions:
      - {name: brick-field, rect: [60, 10, 100, 50]}
      - {name: lintel, rect: [28, 58, 36, 122]}
      - {name: insulation-gap, ellipse: {center: [78, 130], radii: [10, 14]}}
      - {name: glazing, rect: [42, 66, 80, 114]}
      - {name: gutter, rect: [4, 0, 10, 160]}
      - {name: masonry, rect: [14, 0, 120, 160]}
      - {name: window, rect: [38, 60, 84, 120]}
    hotspots: {above_reference_k: 1.0, reference: brick-field, within: [masonry], exclude: [window], min_area_px: 6}
  - name: landing-bedroom
    path: landing_bedroom.tif
    assessment: envelope
    conditions:
      emissivity: gypsum-plaster
      reflected_temperature_c: 19.5
      air_temperature_c: 20.0
      relative_humidity_pct: 60
      distance_m: 2.5
    regions:
      - {name: plain-wall, rect: [40, 20, 100, 70]}
      - {name: external-corner, polygon: [[0, 120], [0, 159], [119, 159], [119, 140]]}
      - {name: window-reveal, rect: [30, 90, 90, 104]}
    coldspots: {below_reference_k: 2.0, reference: plain-wall, min_area_px: 8}
  - name: workshop-board
    path: workshop_board.tif
    assessment: electrical
    camera: {input: apparent_temperature, raw_scale: 0.01, raw_offset: 0.0}
    load_pct: 65
    ambient_c: 14.0
    conditions:
      emissivity: 0.95
      reflected_temperature_c: 14.0
      air_temperature_c: 14.0
      relative_humidity_pct: 55
      distance_m: 1.2
    regions:
      - {name: breaker-L1, rect: [40, 30, 80, 50], role: component, reference: breaker-L2}
      - {name: breaker-L2, rect: [40, 70, 80, 90], role: component, reference: breaker-L3}
      - {name: breaker-L3, rect: [40, 110, 80, 130], role: component, reference: breaker-L2}
      - {name: enclosure, rect: [95, 10, 115, 150], role: reference}
    hotspots: {above_reference_k: 10, reference: enclosure, min_area_px: 4}
  - name: porch-door
    path: porch_door.tif
    assessment: general
    view_from: outside
    conditions:
      emissivity: paint-non-metallic
      reflected_temperature_c: {reflector: foil}
      distance_m: 3
    regions:
      - {name: door-panel, rect: [20, 30, 110, 90]}
      - {name: foil, rect: [20, 120, 40, 140], role: reflector}
  - name: bedroom-wall-72h
    path: bedroom_wall_72h.tif
    assessment: envelope
    frame_times: {start: "2026-01-11T18:00:00", interval_s: 1800}
    conditions:
      emissivity: gypsum-plaster
      reflected_temperature_c: 20.0
      air_temperature_c: 20.0
      relative_humidity_pct: 55
      distance_m: 2.3
    camera: {horizontal_fov_deg: 45.0}
    heat_flow:
      side: inside
      reference: insulated-wall
      areal_heat_capacity_kj_m2k: 180
      radiant_temperature_uncertainty_k: 0.3
    regions:
      - {name: insulated-wall, rect: [22, 4, 44, 30], role: reference}
      - {name: lintel, rect: [4, 4, 18, 44], thermal_bridge: {length_m: 1.2}}
      - {name: solid-wall, rect: [22, 46, 44, 62]}
output:
  dir: out
"""


def _bands():
    from .radiometry import SpectralResponse
    return SpectralResponse.rectangular(7.5e-6, 14e-6)


def _model(distance, air_c, rh_pct, camera=None):
    from .atmosphere import spectral_transmittance
    from .correction import CameraModel, MeasurementModel

    cam = camera or CameraModel(_bands())
    tau = spectral_transmittance(cam.response.wavelength, distance, air_c + K0, rh_pct / 100) if distance else 1.0
    return MeasurementModel(cam, tau, coarse_path=False)     # scenes drawn on every table node


def _smooth_noise(rng, shape, scale, sigma=6.0):
    from scipy.ndimage import gaussian_filter
    return gaussian_filter(rng.normal(size=shape), sigma) * scale * sigma


def rear_elevation(rng):
    """Truth temperature [C] and label image of the brick elevation at dusk."""
    r, c = np.mgrid[0:ROWS, 0:COLS]
    labels = np.ones((ROWS, COLS), np.uint8)                   # brick
    t = 2.6 + 0.004 * (ROWS - r) + _smooth_noise(rng, (ROWS, COLS), 0.05)
    labels[40:82, 62:118] = 2                                  # timber frame
    t[40:82, 62:118] = 3.2
    labels[42:80, 66:114] = 3                                  # glazing
    t[42:80, 66:114] = 5.5 - 0.01 * (r[42:80, 66:114] - 42)
    labels[28:36, 58:122] = 5                                  # concrete lintel (thermal bridge)
    t[28:36, 58:122] = 4.4
    labels[2:12, :] = 4                                        # galvanised gutter
    t[2:12, :] = 1.4
    gap = ((r - 78) / 10.0) ** 2 + ((c - 130) / 14.0) ** 2 <= 1.0  # missing insulation: warm patch
    t[gap & (labels == 1)] += 1.8
    return t, labels


def landing_bedroom(rng, frames=6):
    r, c = np.mgrid[0:ROWS, 0:COLS]
    base = 18.6 + _smooth_noise(rng, (ROWS, COLS), 0.03)
    corner = np.clip((c - 110) / 49.0, 0, 1) ** 2 * 5.2        # cold external corner
    reveal = np.where((c >= 90) & (c < 104) & (r >= 30) & (r < 90), 1.6, 0.0)
    t = base - corner - reveal
    drift = np.linspace(0, -0.15, frames)[:, None, None]       # heating cycling off slowly
    return t[None] + drift


def workshop_board(rng, frames=6):
    r, c = np.mgrid[0:ROWS, 0:COLS]
    t = np.full((ROWS, COLS), 16.0) + _smooth_noise(rng, (ROWS, COLS), 0.05)
    for c0 in (30, 70, 110):
        t[40:80, c0:c0 + 20] = 21.0
    hot = np.exp(-(((r - 46) / 3.0) ** 2 + ((c - 40) / 3.0) ** 2))  # loose terminal on L1
    t = t[None] + 0.0 * np.arange(frames)[:, None, None]
    settle = np.linspace(0.85, 1.0, frames)[:, None, None]
    return t + 41.0 * hot[None] * settle


def porch_door(rng, frames=4):
    t = np.full((ROWS, COLS), 4.5) + _smooth_noise(rng, (ROWS, COLS), 0.05)
    t[20:110, 30:90] = 6.0
    return np.repeat(t[None], frames, 0)


def write_demo(folder) -> Path:
    """Synthesise the demo stacks into ``folder``; returns the path of survey.yaml."""
    import tifffile

    from .pipeline import load_materials

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20260114)
    netd = 0.04   # detector noise [K], applied at the apparent temperature
    lib = load_materials(type("C", (), {"data": {}})())
    em = {1: lib["brick-common"]["emissivity"], 2: lib["timber"]["emissivity"],
          3: lib["glass-uncoated"]["emissivity"], 4: lib["galvanised-steel-weathered"]["emissivity"],
          5: lib["concrete"]["emissivity"]}

    # rear elevation, linear counts
    t, labels = rear_elevation(rng)
    m = _model(9.0, OUTDOOR_C, 85.0)
    eps = np.vectorize(em.get)(labels).astype(float)
    frames = []
    for _ in range(3):
        s = m.received_signal(t + K0, eps, SKY_REFLECTED_C + K0, OUTDOOR_C + K0)
        tapp = m.apparent_temperature(s) + rng.normal(0, netd, s.shape)
        frames.append(np.rint(300.0 * m.signal_table.forward(tapp) + 1000.0))
    tifffile.imwrite(folder / "rear_elevation.tif", np.array(frames).astype(np.uint16))
    tifffile.imwrite(folder / "rear_elevation_labels.tif", labels)

    # landing bedroom: same camera, so its counts follow the same linear calibration
    t = landing_bedroom(rng)
    m = _model(2.5, INDOOR_C, INDOOR_RH)
    e = lib["gypsum-plaster"]["emissivity"]
    s = m.received_signal(t + K0, e, 19.5 + K0, INDOOR_C + K0)
    tapp = m.apparent_temperature(s) + rng.normal(0, netd, s.shape)
    tifffile.imwrite(folder / "landing_bedroom.tif",
                     np.rint(300.0 * m.signal_table.forward(tapp) + 1000.0).astype(np.uint16))

    # workshop board: apparent-temperature export in centikelvin
    t = workshop_board(rng)
    m = _model(1.2, 14.0, 55.0)
    s = m.received_signal(t + K0, 0.95, 14.0 + K0, 14.0 + K0)
    tapp = m.apparent_temperature(s) + rng.normal(0, netd, s.shape)
    tifffile.imwrite(folder / "workshop_board.tif", np.rint(tapp * 100.0).astype(np.uint16))

    # porch door with a foil reflector; reflected (sky + street) temperature drifts per frame
    t = porch_door(rng)
    m = _model(3.0, OUTDOOR_C, 85.0)
    refl = np.array([-9.0, -8.0, -7.5, -10.0])[:, None, None] + K0
    e = np.full(t.shape, lib["paint-non-metallic"]["emissivity"])
    e[:, 20:40, 120:140] = 1e-9          # ideal diffuse reflector
    s = m.received_signal(t + K0, e, refl, OUTDOOR_C + K0)
    tapp = m.apparent_temperature(s) + rng.normal(0, netd, s.shape)
    tifffile.imwrite(folder / "porch_door.tif", np.rint(300.0 * m.signal_table.forward(tapp) + 1000.0).astype(np.uint16))

    _write_wall_72h(folder, np.random.default_rng(20260111), netd)

    cfg = folder / "survey.yaml"
    cfg.write_text(SURVEY_YAML)
    return cfg


# --- the 72 h inside-wall time-lapse (heat flow) ------------------------------------------
WALL_ROWS, WALL_COLS, WALL_FRAMES = 48, 64, 144
# (thickness m, conductivity W/(m K), density kg/m3, specific heat J/(kg K)): typical design
# values as in ISO 10456 / CIBSE Guide A tables, given from memory (invented wall)
_PLASTER, _BRICK = (0.013, 0.57, 1300.0, 1000.0), (0.1025, 0.77, 1750.0, 840.0)
_WALLS = {"insulated": [_PLASTER, (0.10, 0.21, 600.0, 1000.0), (0.05, 0.035, 30.0, 1030.0), _BRICK],
          "lintel": [_PLASTER, (0.2525, 1.7, 2300.0, 1000.0)],
          "solid": [_PLASTER, (0.215, 0.77, 1750.0, 840.0)]}


def _indoor_c(t):
    return 20.0 + 0.3 * np.sin(2 * np.pi * t / 5400.0)        # thermostat cycling


def _outdoor_c(t):
    return 3.0 + 4.0 * np.sin(2 * np.pi * (t - 9 * 3600.0) / 86400.0)


def _wall_surface(layers, times, h_c=2.5, eps_h=0.86, h_e=25.0, dt=300.0, spinup=3 * 86400.0):
    """Inside surface temperature [C] of a 1D wall (implicit finite volumes) at ``times`` [s]."""
    from scipy.linalg import solve_banded

    from .constants import SIGMA
    k, cap, dx = [], [], []
    for d, lam, rho, c in layers:
        n = max(2, int(round(d / 0.005)))
        k += [lam] * n
        cap += [rho * c * d / n] * n
        dx += [d / n] * n
    k, cap, dx = map(np.array, (k, cap, dx))
    g = 1.0 / (dx[:-1] / (2 * k[:-1]) + dx[1:] / (2 * k[1:]))
    g_in, g_out = 2 * k[0] / dx[0], 1.0 / (dx[-1] / (2 * k[-1]) + 1.0 / h_e)
    temp = np.full(k.size, 12.0 + K0)
    ts = 18.0 + K0
    out, t, j = [], -spinup, 0
    while j < len(times):
        if t >= times[j] - 1e-6:
            out.append(ts - K0)
            j += 1
            continue
        t += dt
        ta, tr = _indoor_c(t) + K0, 20.0 + K0
        hr = 4 * eps_h * SIGMA * ts ** 3
        src = h_c * ta + eps_h * SIGMA * (tr ** 4 - ts ** 4) + hr * ts
        a_s = h_c + hr
        diag = cap / dt
        diag = diag + np.concatenate([g, [0]]) + np.concatenate([[0], g])
        diag[0] += g_in * a_s / (a_s + g_in)
        diag[-1] += g_out
        ab = np.zeros((3, k.size))
        ab[0, 1:], ab[1], ab[2, :-1] = -g, diag, -g
        rhs = cap / dt * temp
        rhs[0] += g_in * src / (a_s + g_in)
        rhs[-1] += g_out * (_outdoor_c(t) + K0)
        temp = solve_banded((1, 1), ab, rhs)
        ts = (src + g_in * temp[0]) / (a_s + g_in)
    return np.array(out)


def _write_wall_72h(folder, rng, netd):
    import datetime as dt

    import tifffile

    from .pipeline import load_materials
    times = np.arange(WALL_FRAMES) * 1800.0
    surf = {key: _wall_surface(layers, times) for key, layers in _WALLS.items()}
    t = np.empty((WALL_FRAMES, WALL_ROWS, WALL_COLS))
    t[:] = surf["insulated"][:, None, None]
    t[:, :, 46:] = surf["solid"][:, None, None]
    t[:, 8:14, :46] = surf["lintel"][:, None, None]
    m = _model(2.3, INDOOR_C, 55.0)
    e = load_materials(type("C", (), {"data": {}})())["gypsum-plaster"]["emissivity"]
    s = m.received_signal(t + K0, e, 20.0 + K0, INDOOR_C + K0)
    tapp = m.apparent_temperature(s) + rng.normal(0, netd, s.shape)
    tifffile.imwrite(folder / "bedroom_wall_72h.tif",
                     np.rint(300.0 * m.signal_table.forward(tapp) + 1000.0).astype(np.uint16),
                     photometric="minisblack")
    start = dt.datetime(2026, 1, 11, 17, 50)
    rows = ["time,indoor_air_c,outdoor_air_c,contact_surface_c"]
    contact = np.interp(np.arange(WALL_FRAMES * 3 + 3) * 600.0 - 600.0, times, surf["insulated"])
    for k in range(WALL_FRAMES * 3 + 3):               # every 10 min, covering the frames
        ts = k * 600.0 - 600.0
        rows.append(f"{(start + dt.timedelta(seconds=k * 600.0)).isoformat()},"
                    f"{_indoor_c(ts) + rng.normal(0, 0.05):.2f},{_outdoor_c(ts) + rng.normal(0, 0.1):.2f},"
                    f"{contact[k] + rng.normal(0, 0.03):.2f}")
    (folder / "bedroom_air_log.csv").write_text("\n".join(rows) + "\n")


def demo_folder():
    """The shipped demo_frames/ of a source checkout, or None when installed without it."""
    p = Path(__file__).resolve().parent.parent / "demo_frames"
    return p if (p / "survey.yaml").is_file() else None


def run_demo(out="demo_out", quiet=False):
    from .pipeline import run

    folder = demo_folder()
    if folder is None:
        folder = Path(out) / "frames"
        write_demo(folder)
    return run(folder / "survey.yaml", out, quiet=quiet)
