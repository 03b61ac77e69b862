"""The typed data that travels between the preparation and the stages of a stack's chain
(data contract: ``irpipe.stages.base``). Defined at the preparation layer, which builds a
``StackContext``; the stages fill in the fields below its line."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from .defaults import FRAME_CHUNK


@dataclass
class Chunk:
    """Frames [first, first + n) of one stack as they pass through the chain."""

    first: int
    raw: np.ndarray                               # (n, M, N) as read from the stack
    #: corrected surface temperature [C], float32 (n, M, N), NaN where invalid (radiometric)
    temperature_c: np.ndarray | None = None
    #: offset-free camera signal of every pixel, float64 (n, M, N) (radiometric, per-pixel plan)
    signal: np.ndarray | None = None
    #: flat index (label * n_values + raw - base) of every pixel into the lookup tables (lookup plan)
    lookup_index: np.ndarray | None = None
    #: invalid pixels of this chunk by reason code (``irpipe.correction.REASONS``); ``{}`` when none
    invalid_counts: dict | None = None
    #: per-frame reflected temperature of the reflector method [K], shape (n,), or None
    reflected_temperature_k: np.ndarray | None = None
    #: align stage: signal resampled onto the reference frame's grid, float64
    #: (n, M, N), NaN where invalid, and its reason codes (uint8, ``correction.REASONS`` and
    #: ``alignment.ALIGN_REASONS``); the radiometric stage takes these instead of ``raw``
    aligned_signal: np.ndarray | None = None
    aligned_reason: np.ndarray | None = None

    @property
    def n(self):
        return self.raw.shape[0] if self.raw is not None else self.temperature_c.shape[0]

    @property
    def invalid_total(self) -> int | None:
        """Invalid pixels in the chunk (None: not counted, may be any)."""
        return None if self.invalid_counts is None else int(sum(self.invalid_counts.values()))


@dataclass
class Picture:
    """What the picture stage keeps of a stack for the report and the envelope stage."""

    mean_c: np.ndarray                 # (M, N) float32 frame-averaged temperature [C], NaN never valid
    first_c: np.ndarray                # (M, N) the first frame [C]
    hist_edges_c: np.ndarray           # edges of the non-empty bins [C]
    hist_counts: np.ndarray            # counts of all valid values of all frames

    def as_dict(self):
        return {"mean_c": self.mean_c, "first_c": self.first_c, "hist_edges_c": self.hist_edges_c,
                "hist_counts": self.hist_counts}


@dataclass
class StackContext:
    """What the stages of one stack share. Fields above the line are set by
    ``irpipe.prepare.prepare_stack``; fields below by the stages that declare them."""

    name: str
    index: int                 # position in config stacks (for error messages)
    cfg: Any                   # irpipe.config.Config
    stack: dict                # validated stack section
    conditions: dict           # merged conditions (config units)
    shape: tuple               # (F, M, N)
    dtype: np.dtype
    out_dir: Any
    camera: Any                # irpipe.correction.CameraModel
    materials: dict
    camera_cfg: dict = field(default_factory=dict)      # merged camera section
    calibration: dict = field(default_factory=dict)     # resolved calibration
    emissivity: Any = None     # irpipe.emissivity.EmissivityField (view angles applied)
    masks: dict = field(default_factory=dict)     # region name -> (M, N) bool
    region_cfg: dict = field(default_factory=dict)  # region name -> its config
    model: Any = None          # irpipe.correction.MeasurementModel of the stack's path
    #: ``path_model(air_temperature_k, relative_humidity, distance_m)`` -> MeasurementModel of a
    #: perturbed path (same camera and range); raises ConfigError with the stack's location
    path_model: Callable | None = None
    nuc: tuple | None = None                   # (gain, offset) maps, float64 (M, N)
    bad_pixel_mask: np.ndarray | None = None   # (M, N) bool, or None
    reflected_temperature_k: float | None = None   # None: reflector method
    reflector_mask: np.ndarray | None = None   # flat (M*N,) bool of the reflector region
    reflector_emissivity: float = 0.0
    emissivity_normal: Any = None    # EmissivityField before view-angle scaling (heat flow)
    heat_flow_inputs: Any = None     # irpipe.heatprep.HeatFlowInputs (heat_flow stacks)
    air_log_mean_c: tuple | None = None   # (indoor, outdoor) air log mean over the frames [C]
    report: dict = field(default_factory=dict)
    invalid: dict = field(default_factory=dict)   # reason label -> count
    outputs: dict = field(default_factory=dict)   # kind -> file name
    options: dict = field(default_factory=dict)   # run options (frame_chunk, workers, ...)

    @property
    def frame_chunk(self) -> int:
        """Frames per chunk (``output.frame_chunk`` / ``--frame-chunk``)."""
        return int(self.options.get("frame_chunk") or FRAME_CHUNK)

    # ---- set by stages ----
    tables: Any = None                 # irpipe.kernel.PixelTables (radiometric)
    lookup_counts: np.ndarray | None = None   # (groups, values) counts of every (tally group, raw) (radiometric, lookup)
    reflected_series_k: list = field(default_factory=list)   # reflector method, per frame (radiometric)
    region_uncertainty: dict = field(default_factory=dict)   # region -> figures (uncertainty)
    picture: Picture | None = None     # (picture)
    alignment: Any = None              # list of per-frame alignment.Similarity, None = rejected (align)
    temporal: dict | None = None       # mean frame, noise, time, air temperatures (temporal)
    comparison_picture: dict | None = None    # difference_k, checkerboard_c images (compare)
    u_value_map: np.ndarray | None = None   # (M, N) float32 in-situ U [W/(m2 K)] (heat_flow)


#: fields the preparation (``irpipe.prepare``) fills for every stack
PREPARED = frozenset({"chunk.raw", "ctx.model", "ctx.path_model", "ctx.emissivity", "ctx.masks",
                      "ctx.nuc", "ctx.bad_pixel_mask", "ctx.reflected_temperature_k", "ctx.reflector_mask",
                      "ctx.camera_cfg", "ctx.calibration", "ctx.emissivity_normal", "ctx.heat_flow_inputs",
                      "ctx.air_log_mean_c"})
