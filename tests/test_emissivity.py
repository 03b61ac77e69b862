"""Tests for irpipe.emissivity and its material library (irpipe/data/materials.yaml):
library entries against the ranges in their own notes, and the Fresnel view-angle model
against the dossier's table (docs/references.md §8)."""
import re
from importlib import resources

import numpy as np
import pytest
import yaml

from forward_model import fresnel_dielectric_emissivity, fresnel_dielectric_ratio
from irpipe.emissivity import (EmissivityField, apply_view_angles, fresnel_emissivity, material_emissivity,
                               oblique_factor)

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


# --- Fresnel (docs/references.md §8) --------------------------------------------------

@pytest.mark.parametrize("n, angle, expected", [
    # docs/references.md §8 [C]: illustrative values computed from the Fresnel equations
    # (Born & Wolf, Principles of Optics, sect. 1.5), rounded to 4 decimals
    (1.5, 0, 0.9600), (1.5, 45, 0.9498), (1.5, 60, 0.9108), (1.5, 70, 0.8290), (1.5, 75, 0.7469),
    (1.5, 80, 0.6123), (1.5, 85, 0.3872),
    (20 + 60j, 0, 0.0198), (20 + 60j, 60, 0.0246), (20 + 60j, 85, 0.1009),
])
def test_fresnel_table(n, angle, expected):
    e = fresnel_emissivity(np.deg2rad(angle), complex(n).real, complex(n).imag)
    assert float(e) == pytest.approx(expected, abs=6e-5)


def test_oblique_factor_normal_and_monotone():
    # invariants: 1 at normal view; a dielectric's emissivity falls toward grazing (Fresnel)
    assert float(oblique_factor(0.0)) == 1.0
    f = oblique_factor(np.arange(0, 90, 5.0))
    assert np.all(np.diff(f) < 0)
    assert float(oblique_factor(75.0)) == pytest.approx(0.7469 / 0.9600, abs=1e-4)   # docs/references.md §8


def test_view_angles_label_field():
    # two materials, a region at 70 deg covering both: dielectric corrected, metal left alone
    idx = np.zeros((4, 6), np.int32)
    idx[:, 3:] = 1
    field = EmissivityField(index=idx, values=np.array([0.93, 0.28]), description="t",
                            uncertainty=np.where(idx == 0, 0.02, 0.05))
    mask = np.zeros((4, 6), bool)
    mask[:2] = True
    out, warn = apply_view_angles(field, (4, 6), None, [("slope", mask, 70.0)])
    e = out.as_array((4, 6))
    # Fresnel ratio at 70 deg for n = 1.5: docs/references.md §8 [C], 0.8290 / 0.9600, and the
    # equations written independently in tests/forward_model.py (which reproduce that table)
    f70 = float(fresnel_dielectric_ratio(70.0))
    assert f70 == pytest.approx(0.8290 / 0.9600, abs=1e-4)
    assert e[0, 0] == pytest.approx(0.93 * f70, rel=1e-6) and e[3, 0] == pytest.approx(0.93, rel=1e-6)
    assert e[0, 5] == pytest.approx(0.28) and e[3, 5] == pytest.approx(0.28)
    # Fresnel factor (Born & Wolf sect. 1.5) on the dielectric only; metals not modelled (brief)
    assert out.distinct() == 3                        # stays in label form (lookup plan)
    assert out.uncertainty[0, 0] == pytest.approx(0.02 * f70, rel=1e-6)
    assert any("beyond 60 deg" in w for w in warn)
    assert any("metals" in w for w in warn)


@pytest.mark.parametrize("angle, expected", [(0, 0.9600), (45, 0.9498), (60, 0.9108), (70, 0.8290),
                                             (75, 0.7469), (80, 0.6123), (85, 0.3872)])
def test_independent_fresnel_reproduces_the_table(angle, expected):
    # the test-side Fresnel equations (tests/forward_model.py) against docs/references.md §8 [C]
    assert float(fresnel_dielectric_emissivity(angle, 1.5)) == pytest.approx(expected, abs=6e-5)


def test_oblique_factor_against_independent_fresnel():
    # irpipe's complex-index form against the sine/tangent form written in the test, 0-89 deg
    a = np.arange(0.0, 89.5, 0.5)
    np.testing.assert_allclose(oblique_factor(a), fresnel_dielectric_ratio(a), rtol=1e-9)
    np.testing.assert_allclose(oblique_factor(a, 2.0), fresnel_dielectric_ratio(a, 2.0), rtol=1e-9)


def test_material_emissivity_lookup_and_message():
    # library value as printed (irpipe/data/materials.yaml, Chen & Chen 2016 for red brick)
    assert material_emissivity("brick-red", LIBRARY) == 0.944
    with pytest.raises(KeyError, match="material 'brick-rde' is not in the library; did you mean 'brick-red'"):
        material_emissivity("brick-rde", LIBRARY)
