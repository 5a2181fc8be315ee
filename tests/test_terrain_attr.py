"""Superelevation attribute parsing (percent versus fraction) and the stated assumptions."""

from __future__ import annotations

import numpy as np
import pytest

from curvescan.errors import AssumptionWarning, DataQualityWarning
from curvescan.terrain_attr import (
    assume_superelevation,
    auto_bare_percent,
    design_superelevation,
    largest_bare_magnitude,
    parse_number,
    parse_superelevation,
)


def test_percent_sign_always_means_percent():
    got = parse_superelevation(["6%", "4 %", "6,5 %", "-2%", None, ""])
    np.testing.assert_allclose(got, [0.06, 0.04, 0.065, -0.02, np.nan, np.nan])


def test_bare_fractions_stay_fractions():
    np.testing.assert_allclose(parse_superelevation([0.06, "0.04", 0.1]), [0.06, 0.04, 0.1])


def test_bare_percent_numbers_become_fractions():
    np.testing.assert_allclose(parse_superelevation([6, "4", 8.0, 0]), [0.06, 0.04, 0.08, 0.0])


def test_mixed_field_warns_as_ambiguous():
    with pytest.warns(AssumptionWarning, match="1 bare value"):
        got = parse_superelevation([6, 0.05])
    np.testing.assert_allclose(got, [0.06, 0.0005])


def test_largest_bare_magnitude_leaves_percent_signs_out():
    assert largest_bare_magnitude(["6%", "0.05", -0.08, None, "steep", "12 %"]) == 0.08
    assert largest_bare_magnitude(["6", "0,5", -7.5]) == 7.5
    assert largest_bare_magnitude(["6%", None, ""]) == 0.0
    assert largest_bare_magnitude([]) == 0.0
    # the auto rule: percent above 0.20 only
    assert [auto_bare_percent(v) for v in (7.5, 0.2, 0.0, None)] == [True, False, False, None]


def test_decision_passed_in_overrides_the_values_own():
    # the field is decided on the whole layer: these values alone would read as fractions
    with pytest.warns(AssumptionWarning, match="2 bare value"):
        got = parse_superelevation(["0.05", "6%", 0.04, "7"], bare_percent=True)
    np.testing.assert_allclose(got, [0.0005, 0.06, 0.0004, 0.07])
    # ... and these as percent
    got = parse_superelevation(["0.05", "6%", 0.04, "0.1"], bare_percent=False)
    np.testing.assert_allclose(got, [0.05, 0.06, 0.04, 0.1])
    with pytest.warns(DataQualityWarning, match="1 value"):
        got = parse_superelevation(["6", "0.05"], bare_percent=False)
    assert np.isnan(got[0]) and got[1] == pytest.approx(0.05)
    # a unit given explicitly wins over the decision
    np.testing.assert_allclose(parse_superelevation([0.05], "fraction", bare_percent=True),
                               [0.05])


def test_field_largest_bare_of_the_input_rows():
    import pandas as pd

    from curvescan.config import make_config
    from curvescan.terrain import field_largest_bare

    frame = pd.DataFrame({"se": ["0.05", "6", None, "8%", "6"], "other": 1})
    assert field_largest_bare(frame, make_config(superelevation_field="se")) == 6.0
    assert field_largest_bare(frame, make_config()) is None
    assert field_largest_bare(frame, make_config(superelevation_field="se",
                                                 superelevation_unit="fraction")) is None
    assert field_largest_bare(frame.drop(columns="se"),
                              make_config(superelevation_field="se")) is None


def test_forced_units():
    np.testing.assert_allclose(parse_superelevation([0.5], "percent"), [0.005])
    np.testing.assert_allclose(parse_superelevation([0.05, "3%"], "fraction"), [0.05, 0.03])


def test_unreadable_and_implausible_values_are_counted():
    with pytest.warns(DataQualityWarning, match="1 unreadable value.*1 value"):
        got = parse_superelevation(["steep", "35%", "5%"])
    assert np.isnan(got[0]) and np.isnan(got[1]) and got[2] == pytest.approx(0.05)


def test_parse_number_first_number():
    n, pct, bad = parse_number(["7,5 m", "2;3", "x", None, 3])
    np.testing.assert_allclose(n, [7.5, 2, np.nan, np.nan, 3])
    assert list(bad) == [False, False, True, False, False]
    assert not pct.any()


def test_design_superelevation_at_minimum_radius():
    """AASHTO Green Book 2011 (6th ed.) Table 3-7 via REFERENCES.md 1c: at 100 km/h with
    e_max 8 % and f_max 0.12 the minimum radius is 393.7 m (V-2nd, Ethiopian Roads Authority
    Geometric Design Manual 2002 ch. 8), with e_max 6 % it is 437.4 m (D). At R_min the
    design superelevation is e_max; method 1 (from memory) halves it at twice the radius."""
    got = design_superelevation(np.array([393.7, 787.4, 437.4, 200.0]),
                                np.array([100.0, 100.0, 100.0, 100.0]), 0.08)
    np.testing.assert_allclose(got[:2], [0.08, 0.04], atol=2e-4)
    assert got[3] == 0.08  # capped at e_max below R_min
    e6 = design_superelevation(np.array([437.4]), np.array([100.0]), 0.06)
    np.testing.assert_allclose(e6, [0.06], atol=2e-4)


def test_assumption_modes():
    r = np.array([393.7, 5000.0, 300.0])
    v = np.array([100.0, 100.0, np.nan])
    with pytest.warns(AssumptionWarning, match="unknown for 1 of 3"):
        inner, outer, applied = assume_superelevation("design", r, v, crown=0.02,
                                                      e_max=0.08, value=None)
    np.testing.assert_allclose(inner, [0.08, 0.02, 0.02], atol=2e-4)
    # 5000 m at 100 km/h: design e 0.0063 < crown, so the crown stays (outer lane adverse)
    np.testing.assert_allclose(outer, [0.08, -0.02, -0.02], atol=2e-4)
    assert list(applied) == ["design", "design", "crown"]
    inner, outer, applied = assume_superelevation("zero", r, v, crown=0.02, e_max=0.08,
                                                  value=None)
    assert (inner == 0).all() and (outer == 0).all() and applied[0] == "zero"
    inner, outer, _ = assume_superelevation("value", r, v, crown=0.02, e_max=0.08, value=0.05)
    assert (inner == 0.05).all() and (outer == 0.05).all()


def test_adverse_values_steeper_than_the_physics_accepts_are_ignored():
    # the physics stage takes superelevation in [-0.15, 0.20] (limits.SUPERELEVATION_RANGE);
    # a steeper adverse value from the field would give null limit speeds, not the fallback
    with pytest.warns(DataQualityWarning, match=r"1 value\(s\) outside \[-0.15, 0.20\]"):
        got = parse_superelevation(["-0.17", "-0.15", "0.2"], "fraction")
    assert np.isnan(got[0])
    np.testing.assert_allclose(got[1:], [-0.15, 0.2])
