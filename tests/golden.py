"""Fingerprints of the demo survey's outputs, for the golden-output regression test.

The arrays are compared by the SHA-256 of their pixel data (not the file bytes, whose
ImageDescription carries the software version), the report by the SHA-256 of each stack's
report.json entry in canonical JSON, less the fields that are meant to vary or that a
later change removed on purpose (listed in ``VOLATILE``).

    python tests/golden.py OUT_DIR > tests/data/golden_demo.json

records the fingerprints of a finished demo run in OUT_DIR.
"""
from __future__ import annotations

import hashlib
import json
import sys
from pathlib import Path

import numpy as np
import tifffile

# per-stack fields left out of the fingerprint: wall-clock time, and the sampled-percentile
# caveat that exact percentiles made redundant (its stacks were all shorter than the
# sampling threshold, so no value changed with it)
VOLATILE = ("seconds", "percentiles_from_every_nth_chunk")


def _array_hash(path: Path) -> str:
    a = np.ascontiguousarray(tifffile.imread(path))
    return hashlib.sha256(str(a.dtype).encode() + str(a.shape).encode() + a.tobytes()).hexdigest()


def fingerprints(out_dir) -> dict:
    out_dir = Path(out_dir)
    report = json.loads((out_dir / "report.json").read_text())
    result = {}
    for st in report["stacks"]:
        entry = {k: v for k, v in st.items() if k not in VOLATILE}
        fp = {"report_entry": hashlib.sha256(json.dumps(entry, sort_keys=True).encode()).hexdigest()}
        for kind in ("temperature", "uncertainty"):
            f = st.get("outputs", {}).get(kind)
            if f:
                fp[kind] = _array_hash(out_dir / f)
        result[st["name"]] = fp
    return result


if __name__ == "__main__":
    json.dump(fingerprints(sys.argv[1]), sys.stdout, indent=1, sort_keys=True)
    print()
