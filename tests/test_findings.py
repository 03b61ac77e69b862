"""Tests for irpipe.findings: envelope checks, spot search, electrical grading.

Envelope check values are from docs/references.md §6
(computed [C] with the dossier's script, output in §A); items marked [M] there are from memory.
"""
from pathlib import Path

import numpy as np
import pytest
from skimage.measure import label

from irpipe import findings

yaml = pytest.importorskip("yaml")

SEVERITY_YAML = Path(__file__).resolve().parents[1] / "irpipe" / "data" / "electrical_severity.yaml"


# --------------------------------------------------------------------------- envelope

def test_temperature_factor_definition():
    # ISO 13788:2012 / ISO 10211:2017 definition [M for clauses]; f(15, 20, 0) = 0.75, docs/references.md §6 [C]
    assert findings.temperature_factor(15.0, 20.0, 0.0) == pytest.approx(0.75, abs=1e-12)
    # f(12.5, 20, -5) = 0.7, docs/references.md §A [C]
    assert findings.temperature_factor(12.5, 20.0, -5.0) == pytest.approx(0.7, abs=1e-12)
    # by definition 1 at indoor and 0 at outdoor temperature; undefined for theta_i = theta_e
    np.testing.assert_allclose(findings.temperature_factor(np.array([20.0, 0.0]), 20.0, 0.0), [1.0, 0.0])
    assert np.isnan(findings.temperature_factor(15.0, 10.0, 10.0))


@pytest.mark.parametrize("t_i, rh_pct, t_e, theta_min, f_min, tol_t, formula", [
    (20.0, 60.0, 0.0, 15.43, 0.7717, 5e-3, "aerk"),     # docs/references.md §6 [C], ISO 13788 procedure [M]
    (20.0, 50.0, -5.0, 12.62, 0.7049, 5e-3, "aerk"),    # docs/references.md §6 [C]
    (21.0, 65.0, 5.0, 17.663, 0.7915, 5e-4, "aerk"),    # docs/references.md §A [C]
    (20.0, 60.0, 0.0, 15.435, 0.7717, 5e-4, "magnus-iso13788"),  # docs/references.md §A [C], ISO form [M]
])
def test_minimum_temperature_factor(t_i, rh_pct, t_e, theta_min, f_min, tol_t, formula):
    theta, f = findings.minimum_temperature_factor(t_i, rh_pct, t_e, formula=formula)
    assert theta == pytest.approx(theta_min, abs=tol_t)
    assert f == pytest.approx(f_min, abs=5e-5)


def test_minimum_temperature_factor_condensation_limit():
    # ISO 13788 [M]: with limit 1.0 the minimum surface temperature is the dew point, 12.00 °C at
    # 20 °C / 60 %, docs/references.md §6 [C]
    theta, _ = findings.minimum_temperature_factor(20.0, 60.0, 0.0, surface_rh_limit=1.0)
    assert theta == pytest.approx(12.00, abs=5e-3)


def test_envelope_assessment_with_humidity():
    # theta_i = 20 °C, 60 %, theta_e = 0 °C: theta_si,min = 15.434 °C, T_d = 12.000 °C
    # (docs/references.md §6 [C]); 80 % surface RH mould criterion, ISO 13788 [M]
    a = findings.envelope_assessment(15.0, 20.0, 0.0, indoor_rh_pct=60.0)
    assert a["temperature_factor"] == pytest.approx(0.75)       # docs/references.md §6 [C]
    assert a["critical_temperature_factor"] == 0.75             # BRE IP1/06 dwellings [M, 0.75 R]
    assert a["passes"] is True                                  # f >= f_CRsi (IP1/06 [M])
    assert a["mould_risk"] is True                              # 15.0 < 15.434 °C -> phi_si > 80 %
    assert a["surface_relative_humidity_pct"] > 80.0
    assert a["condensation_risk"] is False                      # 15.0 > 12.0 °C dew point
    assert a["indoor_dew_point_c"] == pytest.approx(12.00, abs=5e-3)
    assert a["minimum_surface_temperature_c"] == pytest.approx(15.43, abs=5e-3)
    assert a["minimum_temperature_factor"] == pytest.approx(0.7717, abs=5e-5)

    # either side of theta_si,min = 15.434 °C and T_d = 12.000 °C (docs/references.md §6 [C])
    b = findings.envelope_assessment(np.array([15.45, 15.42, 12.01, 11.99]), 20.0, 0.0, indoor_rh_pct=60.0)
    np.testing.assert_array_equal(b["mould_risk"], [False, True, True, True])
    np.testing.assert_array_equal(b["condensation_risk"], [False, False, False, True])
    np.testing.assert_array_equal(b["passes"], [True, True, False, False])


def test_envelope_assessment_without_humidity_and_building_use():
    a = findings.envelope_assessment(14.9, 20.0, 0.0)
    assert a["passes"] is False            # f = 0.745 < 0.75 (BRE IP1/06 dwellings [M])
    for key in ("surface_relative_humidity_pct", "mould_risk", "condensation_risk", "indoor_dew_point_c"):
        assert a[key] is None
    # storage f_CRsi = 0.30, BRE IP1/06 table as in docs/references.md §6 [M]
    s = findings.envelope_assessment(7.0, 20.0, 0.0, critical_factor="storage")
    assert s["critical_temperature_factor"] == 0.30 and s["passes"] is True
    # swimming pools 0.90, docs/references.md §6 [M]
    assert findings.CRITICAL_TEMPERATURE_FACTORS["swimming_pool"] == 0.90
    with pytest.raises(ValueError, match="not a known building use; use one of"):
        findings.envelope_assessment(15.0, 20.0, 0.0, critical_factor="garage")
    with pytest.raises(ValueError, match="looks like a fraction; this argument is in percent"):
        findings.envelope_assessment(15.0, 20.0, 0.0, indoor_rh_pct=0.6)


def test_survey_condition_warnings():
    # ΔT >= 10 K across the envelope: EN 13187:1998 / EN ISO 6781-1:2023 practice (common practice, no source)
    assert findings.survey_condition_warnings(20.0, 5.0) == []
    assert findings.survey_condition_warnings(20.0, 10.0) == []
    (w,) = findings.survey_condition_warnings(20.0, 15.0)
    assert "5.0 K" in w and "below the 10 K" in w and "0.20" in w   # 1 K / 5 K, from the definition of f
    (w,) = findings.survey_condition_warnings(20.0, 25.0)
    assert "heat flows inwards" in w
    (w,) = findings.survey_condition_warnings(20.0, float("nan"))
    assert "unknown" in w


# --------------------------------------------------------------------------- spots
# Synthetic scene, constructed here (common practice, no source): background 20 °C, 3 frames.

BACKGROUND = 20.0


def _scene():
    f, m, n = 3, 40, 50
    s = np.full((f, m, n), BACKGROUND)
    # A: static 3x3 block at 30 °C; its centre reaches 35 °C in frame 2 only -> 9 px, peak 35 @ frame 2
    s[:, 5:8, 5:8] = 30.0
    s[2, 6, 6] = 35.0
    s[0, 5, 5] = np.nan                       # a NaN sample in one frame must not matter
    # B: two 2x2 blocks touching only at a corner (21,6)-(22,7): one region with 8-connectivity
    s[:, 20:22, 5:7] = 28.0
    s[:, 22:24, 7:9] = 28.0
    s[1, 23, 8] = 29.0                        # -> 8 px, peak 29 @ frame 1, (23, 8)
    # C: hottest but only 3 px -> below min_area_px = 4
    s[:, 30, 30:33] = 40.0
    # D: 2x2 blob moving one column right between frames 0 and 1, hotter in frame 1
    s[0, 10:12, 30:32] = 33.0
    s[1, 10:12, 31:33] = 34.0
    s[1, 11, 32] = 36.0                       # -> union 2x3 = 6 px, peak 36 @ frame 1, (11, 32)
    # E: cold block 3x4 at 10 °C, coldest 8 °C in frame 0 at (36, 41)
    s[:, 35:38, 40:44] = 10.0
    s[0, 36, 41] = 8.0
    # a pixel invalid in every frame
    s[:, 0, 49] = np.nan
    return s


def _reference_extremes(stack):
    """Independent per-pixel loop (test path only): nan-max/min and first frame reaching it."""
    f, m, n = stack.shape
    out = {k: np.full((m, n), np.nan) for k in ("max_c", "min_c")}
    out.update(max_frame=np.full((m, n), -1), min_frame=np.full((m, n), -1))
    for r in range(m):
        for c in range(n):
            vals = [(v, i) for i, v in enumerate(stack[:, r, c]) if np.isfinite(v)]
            if vals:
                hi = max(v for v, _ in vals)
                lo = min(v for v, _ in vals)
                out["max_c"][r, c], out["min_c"][r, c] = hi, lo
                out["max_frame"][r, c] = min(i for v, i in vals if v == hi)
                out["min_frame"][r, c] = min(i for v, i in vals if v == lo)
    return out


@pytest.mark.parametrize("kinds", [("max", "min"), ("max",), ("min",)])
@pytest.mark.parametrize("chunk", [1, 2, 3])
def test_update_extremes_matches_per_pixel_loop_for_any_chunking(chunk, kinds):
    stack = _scene()
    state = None
    for start in range(0, stack.shape[0], chunk):
        state = findings.update_extremes(state, stack[start:start + chunk], start, kinds)
    ref = _reference_extremes(stack)
    for key in ("max_c", "min_c", "max_frame", "min_frame"):
        if key[:3] in kinds:
            np.testing.assert_array_equal(getattr(state, key), ref[key])
        else:                      # an extreme not asked for stays as in a new state
            assert np.all(np.isnan(getattr(state, key)) if key.endswith("_c") else getattr(state, key) == -1)
    assert state.n_valid[0, 49] == 0 and state.max_frame[0, 49] == -1 and np.isnan(state.max_c[0, 49])
    assert state.n_valid[5, 5] == 2 and state.n_valid[1, 1] == 3


def test_update_extremes_ties_keep_earliest_frame_and_shape_check():
    state = findings.update_extremes(None, np.full((2, 3, 3), 25.0), 0)
    state = findings.update_extremes(state, np.full((1, 3, 3), 25.0), 2)
    assert np.all(state.max_frame == 0) and np.all(state.min_frame == 0)
    with pytest.raises(ValueError, match=r"do not match the state's \(3, 3\)"):
        findings.update_extremes(state, np.zeros((1, 4, 4)), 3)


def _state():
    stack = _scene()
    return findings.update_extremes(findings.update_extremes(None, stack[:2], 0), stack[2:], 2)


def test_diagonal_fixture_needs_8_connectivity():
    # scikit-image: connectivity=1 is 4-connectivity, connectivity=2 is 8-connectivity (2-D)
    s = _state()
    mask = s.max_c[18:26, 3:11] > 25.0
    assert label(mask, connectivity=1).max() == 2
    assert label(mask, connectivity=2).max() == 1


def test_find_hot_spots_in_synthetic_scene():
    s = _state()
    spots = findings.find_spots(s.max_c, s.max_frame, threshold_c=25.0, min_area_px=4, kind="hot")
    # expected values constructed in _scene (common practice, no source)
    assert [(p["row"], p["col"]) for p in spots] == [(11, 32), (6, 6), (23, 8)]   # D, A, B: hottest first
    d, a, b = spots
    assert (d["peak_c"], d["frame"], d["area_px"], d["bbox"]) == (36.0, 1, 6, [10, 30, 12, 33])
    assert d["mean_c"] == pytest.approx((33 + 33 + 34 + 34 + 34 + 36) / 6)
    assert (a["peak_c"], a["frame"], a["area_px"], a["bbox"]) == (35.0, 2, 9, [5, 5, 8, 8])
    assert a["mean_c"] == pytest.approx((8 * 30.0 + 35.0) / 9)
    assert (b["peak_c"], b["frame"], b["area_px"], b["bbox"]) == (29.0, 1, 8, [20, 5, 24, 9])
    assert all(p["kind"] == "hot" and p["delta_k"] is None for p in spots)
    # C (3 px at 40 °C) is below min_area_px; with min_area_px=3 it is found and comes first
    c = findings.find_spots(s.max_c, s.max_frame, 25.0, min_area_px=3)[0]
    assert (c["peak_c"], c["area_px"], c["row"], c["col"]) == (40.0, 3, 30, 30)


def test_find_spots_reference_threshold_image_and_nan():
    s = _state()
    spots = findings.find_spots(s.max_c, s.max_frame, 25.0, reference_c=BACKGROUND)
    assert [p["delta_k"] for p in spots] == [16.0, 15.0, 9.0]     # peak - 20 °C, from _scene
    # a per-pixel threshold raised over block A removes it
    thr = np.full(s.max_c.shape, 25.0)
    thr[5:8, 5:8] = 50.0
    rows = [p["row"] for p in findings.find_spots(s.max_c, s.max_frame, thr)]
    assert rows == [11, 23]
    # NaN never counts: a NaN pixel inside A shrinks it by one; an all-NaN image has no spots
    ext = s.max_c.copy()
    ext[7, 7] = np.nan
    a = [p for p in findings.find_spots(ext, s.max_frame, 25.0) if p["row"] == 6][0]
    assert a["area_px"] == 8 and np.isfinite(a["mean_c"])
    assert findings.find_spots(np.full((5, 5), np.nan), np.zeros((5, 5), int), 0.0) == []


def test_find_spots_peak_ties_take_first_pixel_in_raster_order():
    # documented tie rule of find_spots (common practice, no source)
    ext = np.zeros((6, 6))
    ext[1:4, 1:4] = 5.0
    (p,) = findings.find_spots(ext, np.arange(36).reshape(6, 6), 1.0)
    assert (p["row"], p["col"], p["frame"]) == (1, 1, 7)
    (p,) = findings.find_spots(-ext, np.arange(36).reshape(6, 6), -1.0, kind="cold")
    assert (p["row"], p["col"]) == (1, 1)


def test_find_cold_spots():
    s = _state()
    spots = findings.find_spots(s.min_c, s.min_frame, threshold_c=15.0, kind="cold", reference_c=BACKGROUND)
    (e,) = spots                                                   # from _scene
    assert (e["kind"], e["row"], e["col"], e["frame"]) == ("cold", 36, 41, 0)
    assert (e["peak_c"], e["area_px"], e["bbox"], e["delta_k"]) == (8.0, 12, [35, 40, 38, 44], -12.0)
    assert e["mean_c"] == pytest.approx((11 * 10.0 + 8.0) / 12)


def test_find_spots_errors():
    z = np.zeros((4, 4))
    with pytest.raises(ValueError, match="kind='warm' is not known"):
        findings.find_spots(z, z.astype(int), 1.0, kind="warm")
    with pytest.raises(ValueError, match=r"threshold_c: expected a scalar or shape \(4, 4\)"):
        findings.find_spots(z, z.astype(int), np.zeros((3, 3)))
    with pytest.raises(ValueError, match="reduce the stack with update_extremes"):
        findings.find_spots(np.zeros((2, 4, 4)), np.zeros((2, 4, 4), int), 1.0)


# --------------------------------------------------------------------------- electrical
# Band edges: NETA MTS Table 100.18 as commonly reproduced (docs/references.md §7) -- from memory.
# Printed bands over a similar component: 1-3, 4-15, >15 K; over ambient: 1-10, 11-20, 21-40,
# >40 K. A reading equal to a printed limit belongs to the band that prints it (3 K is "1-3",
# 15 K is "4-15", 10 K is "1-10", 40 K is "21-40"); a reading between two printed integer bands
# (3.5 K, 15.5 K, 10.5 K) takes the more severe band -- project convention for a safety
# finding, documented in irpipe/data/electrical_severity.yaml (common practice, no source).

@pytest.fixture(scope="module")
def table():
    return findings.load_severity_table(yaml.safe_load(SEVERITY_YAML.read_text()))


@pytest.mark.parametrize("ref_k, priority", [
    (0.9, None), (1.0, 4), (2.999, 4),
    (3.0, 4),                       # printed "1-3": exactly 3 K is in the band that prints it [M]
    (3.001, 3), (3.5, 3),           # between printed "1-3" and "4-15": the more severe band
    (4.0, 3), (14.9, 3),
    (15.0, 3),                      # printed "4-15": exactly 15 K is in that band [M]
    (15.001, 1), (15.5, 1),         # between "4-15" and ">15": the more severe band
    (15.9, 1), (100.0, 1), (-2.0, None),
])
def test_grading_over_reference_band_edges(table, ref_k, priority):
    g = findings.grade_electrical(ref_k, None, table)   # from memory (NETA MTS 100.18), see above
    assert (None if g is None else g["priority"]) == priority


@pytest.mark.parametrize("amb_k, priority", [
    (0.5, None), (1.0, 4), (9.99, 4),
    (10.0, 4),                      # printed "1-10" [M]
    (10.5, 3), (11.0, 3), (19.9, 3),
    (20.0, 3),                      # printed "11-20" [M]
    (20.5, 2), (39.99, 2),
    (40.0, 2),                      # printed "21-40" [M]
    (40.5, 1), (41.0, 1),           # printed ">40" [M]
])
def test_grading_over_ambient_band_edges(table, amb_k, priority):
    g = findings.grade_electrical(None, amb_k, table)   # from memory (NETA MTS 100.18), see above
    assert (None if g is None else g["priority"]) == priority


def test_grading_takes_most_severe_criterion(table):
    g = findings.grade_electrical(5.0, 45.0, table)      # p3 by reference, p1 by ambient [M]
    assert (g["priority"], g["governing_criterion"]) == (1, "rise_over_ambient_k")
    g = findings.grade_electrical(20.0, 5.0, table)      # p1 by reference, p4 by ambient [M]
    assert (g["priority"], g["governing_criterion"]) == (1, "rise_over_reference_k")
    g = findings.grade_electrical(5.0, 15.0, table)      # p3 both [M]
    assert (g["priority"], g["governing_criterion"]) == (3, "both")
    g = findings.grade_electrical(float("nan"), 25.0, table)   # NaN reference ignored
    assert (g["priority"], g["governing_criterion"]) == (2, "rise_over_ambient_k")
    assert findings.grade_electrical(None, None, table) is None
    # a raw mapping is validated on the fly
    raw = yaml.safe_load(SEVERITY_YAML.read_text())
    assert findings.grade_electrical(5.0, None, raw) == findings.grade_electrical(5.0, None, table)


def test_severity_yaml_text(table):
    # brief / project rules: source and verification note; own action wording ending with the referral
    assert "verify against the current edition" in table.source
    assert [b.priority for b in table.bands] == [1, 2, 3, 4]
    for b in table.bands:
        assert b.action.endswith("is for a licensed electrician.")
        for phrase in ("repair immediately", "as time permits", "corrective measures", "deficiency",
                       "discrepancy"):
            assert phrase not in b.action.lower()


def _raw():
    return yaml.safe_load(SEVERITY_YAML.read_text())


def test_load_severity_table_rejects_bad_tables():
    bad = _raw()
    bad["bands"][0]["rise_over_reference_k"] = [1, 4]          # overlaps the next band [3, 15]
    with pytest.raises(ValueError, match=r"rise_over_reference_k.*does not end where.*must be contiguous"):
        findings.load_severity_table(bad)
    bad = _raw()
    bad["colour"] = "red"
    with pytest.raises(ValueError, match=r"unknown key\(s\) \['colour'\]; valid keys are"):
        findings.load_severity_table(bad)
    bad = _raw()
    bad["bands"][3]["rise_over_ambient_k"] = [40, 100]
    with pytest.raises(ValueError, match="must have upper null"):
        findings.load_severity_table(bad)
    bad = _raw()
    bad["bands"][0]["priority"], bad["bands"][3]["priority"] = 1, 4
    with pytest.raises(ValueError, match="priority 1 must be the most severe"):
        findings.load_severity_table(bad)
    bad = _raw()
    bad["bands"][1]["priority"] = 4
    with pytest.raises(ValueError, match=r"bands\[1\]\.priority: 4 appears twice"):
        findings.load_severity_table(bad)
    bad = _raw()
    del bad["source"]
    with pytest.raises(ValueError, match="source: a non-empty text is required"):
        findings.load_severity_table(bad)
    bad = _raw()
    bad["bands"][2]["rise_over_ambient_k"] = [21]
    with pytest.raises(ValueError, match=r"bands\[2\]\.rise_over_ambient_k: expected \[lower, upper\]"):
        findings.load_severity_table(bad)
    with pytest.raises(ValueError, match="expected a mapping"):
        findings.load_severity_table([1, 2])


def test_load_scaled_rise():
    # (I_rated/I_meas)^n scaling, n = 2 for I^2 R heating (common practice, no source)
    scaled, warns = findings.load_scaled_rise(5.0, 0.5)
    assert scaled == pytest.approx(20.0) and warns == []
    scaled, _ = findings.load_scaled_rise(5.0, 0.5, exponent=1.6)   # n ≈ 1.6 (common practice, no source)
    assert scaled == pytest.approx(5.0 * 2 ** 1.6)
    assert findings.load_scaled_rise(7.0, 1.0) == (7.0, [])
    # below 40 % of rated load: warning (common practice, no source)
    scaled, (w,) = findings.load_scaled_rise(np.array([2.0, 3.0]), np.array([0.3, 0.8]))
    np.testing.assert_allclose(scaled, [2.0 / 0.09, 3.0 / 0.64])
    assert "30 % of rated, below 40 %" in w
    _, (w,) = findings.load_scaled_rise(5.0, 1.2)
    assert "above rated load" in w
    with pytest.raises(ValueError, match="finite fraction > 0 of rated load"):
        findings.load_scaled_rise(5.0, 0.0)
