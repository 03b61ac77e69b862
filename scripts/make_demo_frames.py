"""Regenerate demo_frames/ (the invented demo survey) from irpipe.demo.write_demo.
Deterministic (fixed seed). Run from the repository root: python scripts/make_demo_frames.py"""
from pathlib import Path

from irpipe.demo import write_demo

if __name__ == "__main__":
    cfg = write_demo(Path(__file__).resolve().parent.parent / "demo_frames")
    print(f"wrote {cfg.parent}")
