"""Fingerprints of a stack: what its pixels depend on, and what its whole run depends on.

Two SHA-256 digests over canonical JSON:

* ``pixel_fingerprint``: everything the per-pixel outputs (``<name>.temperature.tif``,
  ``<name>.uncertainty.tif``) depend on: the camera, the conditions, the uncertainty
  inputs, the software version, the contents of the input files, and the geometry of just
  those regions that change pixel values (regions named by emissivity-by-region, the
  reflector region, regions with their own viewing angle), in list order. Drawing,
  moving or renaming any other region leaves it unchanged, so ``irpipe inspect`` reuses
  the outputs of an earlier run instead of recomputing them.
* ``stack_fingerprint`` (``irpipe.manifest``, re-exported here): the whole run of a stack
  (statistics, findings, report entry); ``irpipe run --resume`` skips a stack when it
  matches.

Both are written per stack to ``manifest.json`` by the pipeline; these two functions are
the only place they are computed.
"""
from __future__ import annotations

import hashlib
import json

from . import __version__
from .config import merged_camera, merged_conditions
from .manifest import stack_fingerprint  # noqa: F401  (the whole-run fingerprint, re-exported)


def _digest(obj) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True, default=str).encode()).hexdigest()


def pixel_regions(cfg, i) -> list:
    """Names of the regions of stack ``i`` whose geometry changes pixel values."""
    st = cfg.data["stacks"][i]
    cond = merged_conditions(cfg.data, i)
    names = set()
    e = cond.get("emissivity")
    if isinstance(e, dict) and "regions" in e:
        names |= set(e["regions"])
    refl = cond.get("reflected_temperature_c")
    if isinstance(refl, dict):
        names.add(refl["reflector"])
    names |= {r["name"] for r in st.get("regions", []) if r.get("view_angle_deg") is not None}
    return [r["name"] for r in st.get("regions", []) if r["name"] in names]


def pixel_fingerprint(cfg, i, input_hashes: dict) -> str:
    """Digest of what the per-pixel outputs of stack ``i`` depend on.

    Parameters
    ----------
    cfg : irpipe.config.Config
    i : int
        Index of the stack in ``cfg.data["stacks"]``.
    input_hashes : dict
        ``{file path: sha256}`` of the stack's input files (``manifest.stack_inputs``).
    """
    st = cfg.data["stacks"][i]
    keep = set(pixel_regions(cfg, i))
    regions = [r for r in st.get("regions", []) if r["name"] in keep]
    other_masks = {str(r["mask"]) for r in st.get("regions", []) if "mask" in r and r["name"] not in keep}
    inputs = {k: v for k, v in input_hashes.items() if k not in other_masks}
    d = {"camera": merged_camera(cfg.data, i), "conditions": merged_conditions(cfg.data, i),
         "pixel_regions": regions, "path": st["path"].name,
         "uncertainty": cfg.data.get("uncertainty", {}), "inputs": inputs, "version": __version__}
    if st.get("align"):     # aligned pixels depend on the alignment settings
        d["align"] = st["align"]
    return _digest(d)
