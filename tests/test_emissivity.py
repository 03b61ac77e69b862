"""Tests for irpipe.emissivity and its material library (irpipe/data/materials.yaml):
library entries against the ranges in their own notes, and the Fresnel view-angle model
against the dossier's table (docs/references.md §8)."""
import re
from importlib import resources

import pytest
import yaml

LIBRARY = yaml.safe_load(resources.files("irpipe").joinpath("data/materials.yaml").read_text())
RANGE = re.compile(r"\((\d*\.\d+)-(\d*\.\d+)")
RANGED = sorted(k for k, v in LIBRARY.items() if RANGE.search(v["source"]))


def test_every_ranged_entry_is_checked():
    # the notes carrying a range "(lo-hi" are the handbook values of docs/references.md §8
    assert "galvanised-steel-weathered" in RANGED and len(RANGED) >= 10


@pytest.mark.parametrize("name", RANGED)
def test_library_value_and_uncertainty_cover_their_own_note(name):
    entry = LIBRARY[name]
    lo, hi = (float(x) for x in RANGE.search(entry["source"]).groups())
    # the value lies in the spread its note gives (docs/references.md §8, [M] spreads)
    assert lo <= entry["emissivity"] <= hi
    # its standard uncertainty is at least that of a rectangular distribution over the
    # spread, half-width a -> u = a / sqrt(3) (JCGM 100:2008, 4.3.7)
    assert entry["uncertainty"] >= (hi - lo) / 2 / 3 ** 0.5 - 1e-9


def test_weathered_galvanised_steel_keeps_its_value():
    # the demo and the README's figures use 0.28 (from memory, as the library says)
    e = LIBRARY["galvanised-steel-weathered"]
    assert e["emissivity"] == 0.28
    assert "from memory" in e["source"]
