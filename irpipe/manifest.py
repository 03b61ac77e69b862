"""The run manifest (``manifest.json``): each stack's inputs and their SHA-256, its
fingerprint, status and outputs, used by ``--resume`` to skip stacks whose inputs and
settings are unchanged."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

from . import __version__
from .config import Config, merged_camera, merged_conditions
from .io import sha256, write_json_atomic

MANIFEST = "manifest.json"


def stack_fingerprint(cfg: Config, i: int, input_hashes: dict) -> str:
    """SHA-256 over everything that decides a stack's outputs: its merged camera and
    conditions, its own section, the survey and uncertainty sections, the input files'
    hashes and the software version."""
    st = cfg.data["stacks"][i]
    d = {"camera": merged_camera(cfg.data, i), "conditions": merged_conditions(cfg.data, i),
         "stack": st, "survey": cfg.data.get("survey", {}),
         "uncertainty": cfg.data.get("uncertainty", {}), "inputs": input_hashes,
         "version": __version__}
    base = (st.get("compare") or {}).get("baseline")
    if isinstance(base, str):       # a comparison's outputs depend on its baseline's
        j = [s["name"] for s in cfg.data["stacks"]].index(base)
        d["baseline"] = stack_fingerprint(cfg, j, hash_files(stack_inputs(cfg, j)))
    blob = json.dumps(d, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def stack_inputs(cfg: Config, i: int, cam=None) -> list:
    """Files a stack depends on."""
    st = cfg.data["stacks"][i]
    files = [st["path"]]
    cam = cam or merged_camera(cfg.data, i)
    for k in ("spectral_response", "gain_map", "offset_map", "bad_pixel_mask"):
        if k in cam:
            files.append(cam[k])
    if isinstance(cam.get("calibration"), dict) and "file" in cam["calibration"]:
        files.append(cam["calibration"]["file"])
    e = merged_conditions(cfg.data, i)["emissivity"]
    if isinstance(e, dict) and "regions" in e:
        e = e["default"]
    if isinstance(e, dict):
        files.append(e.get("map") or e.get("labels"))
    files += [r["mask"] for r in st.get("regions", []) if "mask" in r]
    if "materials" in cfg.data:
        files.append(cfg.data["materials"])
    if "file" in (st.get("frame_times") or {}):
        files.append(st["frame_times"]["file"])
    if "frame_times" in st and "air_log" in cfg.data.get("survey", {}):
        files.append(cfg.data["survey"]["air_log"])
    return files


def hash_files(files) -> dict:
    return {str(p): sha256(p) for p in files}


def read_manifest(out_dir):
    """The manifest of an earlier run in ``out_dir``, or None."""
    try:
        return json.loads((Path(out_dir) / MANIFEST).read_text())
    except (OSError, ValueError):
        return None


def write_manifest(out_dir, manifest: dict, old: dict | None, partial=False):
    """Write the manifest atomically; an interrupted run keeps the record of the earlier
    run's complete stacks that it did not reach."""
    if partial and old:
        seen = {s["name"] for s in manifest["stacks"]}
        manifest["stacks"] += [s for s in old.get("stacks", []) if s["name"] not in seen]
        manifest["interrupted"] = True
    write_json_atomic(Path(out_dir) / MANIFEST, manifest, compact=True)
