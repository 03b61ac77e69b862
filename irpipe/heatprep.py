"""Heat-flow inputs of one stack from the config: frame times, the air log interpolated to
them, the data window, the pixel footprint on the wall and the hemispherical emissivity.

Called while a stack is prepared (before any output is written), so a bad time file, a
log that does not cover the frames or a frame count mismatch stops the run at the plan.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import heatflow as hf
from . import timeseries as tsr
from .errors import InputDataError
from .io import read_air_log, read_frame_times


@dataclass
class HeatFlowInputs:
    """What the heat-flow stage needs besides the temperatures (arrays of shape (F,))."""

    frames: int
    times: list | None = None            # datetime per frame, or None without frame_times
    seconds: np.ndarray | None = None    # frame times on one axis [s]
    durations: np.ndarray | None = None  # duration each frame stands for [s]
    used: np.ndarray | None = None       # frames inside the data window
    indoor_c: np.ndarray | None = None
    outdoor_c: np.ndarray | None = None
    wind_m_s: np.ndarray | None = None
    radiant_c: np.ndarray | None = None
    contact_c: np.ndarray | None = None
    has_log: bool = False
    log_file: str | None = None
    side_rows_m: float | None = None
    side_cols_m: float | None = None
    footprint: str = ""
    window: str = "all frames"
    notes: list = field(default_factory=list)

    @property
    def weights(self):
        """Frame durations inside the window, 0 outside [s] (equal weights of 1 s without times)."""
        w = self.durations if self.durations is not None else np.ones(self.frames)
        return np.where(self.used, w, 0.0)


def _times_of(st, frames, base):
    ft = st["frame_times"]
    if "file" in ft:
        f = ft["file"]
        texts = read_frame_times(f)
        if len(texts) != frames:
            raise InputDataError(f"{f}: {len(texts)} frame time(s) for a stack of {frames} frame(s); give one row "
                                 "per frame")
        times = [tsr.parse_time(t, f"{f} row {k + 2}") for k, t in enumerate(texts)]
        tsr.check_same_kind(times[:1], times, f"{f}")
        secs = tsr.check_increasing(times, f"{f}")
        return times, secs, f.name
    start = tsr.parse_time(ft["start"], f"{base}, frame_times.start")
    times = tsr.regular_times(start, ft["interval_s"], frames)
    return times, tsr.to_seconds(times), "frame_times.start"


def prepare_heat_flow(ctx, cfg):
    """Fill ``ctx.heat_flow_inputs`` (heat_flow stacks) and, where an air log
    covers the frames, ``ctx.air_log_mean_c`` = (indoor, outdoor) time-weighted
    means over the frames (used by the envelope findings)."""
    st = ctx.stack
    frames = ctx.shape[0]
    survey = cfg.data.get("survey", {})
    inp = HeatFlowInputs(frames=frames, used=np.ones(frames, bool))
    if "frame_times" in st:
        inp.times, inp.seconds, tsource = _times_of(st, frames, cfg.path.name)
        inp.durations = hf.frame_weights(inp.seconds)
    if "air_log" in survey and inp.times is not None:
        f = survey["air_log"]
        texts, cols = read_air_log(f)
        log_times = [tsr.parse_time(t, f"{f} row {k + 2}") for k, t in enumerate(texts)]
        tsr.check_same_kind(log_times[:1], log_times, f"{f}")
        tsr.check_same_kind(inp.times[:1], log_times[:1], f"{f} (frame times from {tsource})")
        log_s = tsr.check_increasing(log_times, f"{f}")
        where = f"{f}"
        inp.indoor_c = tsr.interpolate_log(log_s, cols["indoor_air_c"], inp.seconds, inp.times, where)
        inp.outdoor_c = tsr.interpolate_log(log_s, cols["outdoor_air_c"], inp.seconds, inp.times, where)
        for name, attr in (("wind_speed_m_s", "wind_m_s"), ("radiant_temperature_c", "radiant_c"),
                           ("contact_surface_c", "contact_c")):
            if name in cols:
                v = cols[name]
                ok = np.isfinite(v)
                if ok.sum() >= 2:
                    setattr(inp, attr, np.interp(inp.seconds, log_s[ok], v[ok], left=np.nan, right=np.nan))
        inp.has_log, inp.log_file = True, f.name
        w = inp.durations
        ctx.air_log_mean_c = (float(np.average(inp.indoor_c, weights=w)),
                                        float(np.average(inp.outdoor_c, weights=w)))
    hfc = st.get("heat_flow")
    if hfc is None:
        return
    if not inp.has_log:
        inp.indoor_c = np.full(frames, float(survey["indoor_air_c"]))
        inp.outdoor_c = np.full(frames, float(survey["outdoor_air_c"]))
        inp.notes.append("no air log: constant survey.indoor_air_c / outdoor_air_c, a single-time (steady-state) "
                         "estimate")
    _window(inp, hfc, cfg, ctx.name)
    _footprint(inp, ctx, hfc)
    ctx.heat_flow_inputs = inp


def _window(inp, hfc, cfg, name):
    parts = []
    w = hfc.get("window") or {}
    if w:
        first = inp.times[0]
        s = e = None
        if "start" in w:
            t = tsr.parse_time(w["start"], "heat_flow.window.start")
            tsr.check_same_kind([first], [t], f"{cfg.path.name}, heat_flow.window")
            s = tsr.to_seconds([t])[0]
        if "end" in w:
            t = tsr.parse_time(w["end"], "heat_flow.window.end")
            tsr.check_same_kind([first], [t], f"{cfg.path.name}, heat_flow.window")
            e = tsr.to_seconds([t])[0]
        inp.used &= tsr.window_mask(inp.seconds, s, e)
        parts.append(f"window {w.get('start', 'start')} to {w.get('end', 'end')}")
    night = hfc.get("night_only", hfc["side"] == "outside" and inp.times is not None)
    if night and inp.times is not None:
        inp.used &= tsr.night_mask(inp.times)
        parts.append("night frames only (%02d:00 to %02d:00 on the frames' clock; common practice)"
                     % tsr.NIGHT_HOURS)
    elif night:
        inp.notes.append("night_only ignored: the stack has no frame_times")
    if not inp.used.any():
        raise InputDataError(f"{cfg.path.name}: stack '{name}', heat_flow: no frame lies in the data window; widen heat_flow.window or check the "
                             "frame times")
    inp.window = "; ".join(parts) or "all frames"


def _footprint(inp, ctx, hfc):
    cam = ctx.camera_cfg
    cond = ctx.conditions
    angle = math.radians(cond.get("view_angle_deg") or 0.0)
    axis = hfc["tilt_axis"]
    if "scale" in hfc:
        sc = hfc["scale"]
        p0, p1 = sc["between"][0], sc["between"][1]
        inp.side_rows_m, inp.side_cols_m = hf.footprint_from_scale(sc["length_m"], p0, p1, angle, axis)
        inp.footprint = f"scale {sc['length_m']:g} m between {list(p0)} and {list(p1)}"
    else:
        d = cond.get("distance_m", 0.0) or hfc.get("surface_distance_m")
        if cond.get("distance_m", 0.0) and hfc.get("surface_distance_m"):
            d = hfc["surface_distance_m"]
        if cam.get("ifov_mrad") is not None:
            inp.side_rows_m, inp.side_cols_m = hf.pixel_footprint(d, ctx.shape[2], ifov=cam["ifov_mrad"] * 1e-3,
                                                                  view_angle=angle, tilt_axis=axis)
            inp.footprint = f"distance {d:g} m x IFOV {cam['ifov_mrad']:g} mrad"
        else:
            inp.side_rows_m, inp.side_cols_m = hf.pixel_footprint(
                d, ctx.shape[2], horizontal_fov=math.radians(cam["horizontal_fov_deg"]), view_angle=angle,
                tilt_axis=axis)
            inp.footprint = (f"flat wall 2 d tan(HFOV/2) / W, d {d:g} m, HFOV {cam['horizontal_fov_deg']:g} deg, "
                             f"W {ctx.shape[2]} px")
    if angle:
        inp.footprint += f"; view angle {math.degrees(angle):g} deg along {axis}"
