"""Property tests (hypothesis) of the physics limits."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from curvescan.config import make_config
from curvescan.physics import evaluate, limits

radius = st.floats(1.0, 20000.0)
bank = st.floats(-0.15, 0.20)
friction = st.floats(0.01, 1.5)
downforce = st.floats(0.0, 0.05)  # k = rho C_L A / (2 m), 1/m
grade = st.one_of(st.just(float("nan")), st.floats(-0.15, 0.15))
posted = st.one_of(st.just(float("nan")), st.floats(5.0, 150.0))

CONFIG = make_config()
CONFIG_BRAKING = make_config(braking_g=0.2)


def _v(r, e, f, k=0.0):
    return float(limits.banked_limit_ms(r, e, f, downforce_per_mass=k))


@given(radius, radius, bank, friction)
def test_limit_rises_with_radius(r1, r2, e, f):
    lo, hi = sorted((r1, r2))
    assert _v(lo, e, f) <= _v(hi, e, f) * (1 + 1e-12)


@given(radius, bank, friction, friction)
def test_limit_rises_with_friction(r, e, f1, f2):
    lo, hi = sorted((f1, f2))
    assert _v(r, e, lo) <= _v(r, e, hi) * (1 + 1e-12)


@given(radius, bank, bank, friction)
def test_limit_rises_with_superelevation(r, e1, e2, f):
    lo, hi = sorted((e1, e2))
    assert _v(r, lo, f) <= _v(r, hi, f) * (1 + 1e-12)


@given(radius, bank, friction, downforce)
def test_downforce_never_lowers_the_sliding_limit(r, e, f, k):
    assert _v(r, e, f, k) >= _v(r, e, f) * (1 - 1e-12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(radius, bank, grade, posted), min_size=1, max_size=8), st.booleans())
def test_stage_order_and_no_nan_for_valid_input(rows, braking):
    curves = pd.DataFrame(rows, columns=["radius_m", "superelevation", "grade", "posted_kmh"])
    out = evaluate(curves, CONFIG_BRAKING if braking else CONFIG)
    speeds = out[["v_ice_kmh", "v_snow_kmh", "v_wet_kmh", "v_dry_kmh"]].to_numpy()
    assert not np.isnan(speeds).any()
    assert (np.diff(speeds, axis=1) >= -1e-9).all()  # ice <= snow <= wet <= dry
    for col in ("v_comfort_kmh", "v_rollover_kmh", "v_rollover_low_kmh", "v_wet_low_kmh",
                "v_wet_high_kmh", "v_ice_limit_kmh"):
        assert out[col].notna().all(), col
    for c in ("dry", "wet", "snow", "ice"):
        assert (out[f"v_{c}_low_kmh"] <= out[f"v_{c}_kmh"] + 1e-9).all()
        assert (out[f"v_{c}_kmh"] <= out[f"v_{c}_high_kmh"] + 1e-9).all()
        assert set(out[f"mechanism_{c}"]) <= {"slide", "roll"}
    known = curves["posted_kmh"].notna()
    assert out.loc[known, "f_demand_posted"].notna().all()
    assert out.loc[~known, "f_demand_posted"].isna().all()


@settings(max_examples=60, deadline=None)
@given(radius, bank)
def test_wet_limit_is_between_its_friction_bounds(r, e):
    """The wet fixed point lies between the limits at the lowest wet friction (held from
    130 km/h up) and at the wet friction at standstill."""
    from curvescan.physics import BUILTIN_CONDITIONS

    wet = BUILTIN_CONDITIONS["wet"]
    v = float(limits.solve_speed_dependent_ms(r, e, lambda s: wet.friction_at(s * 3.6)))
    assert _v(r, e, float(wet.friction_at(720.0))) <= v * (1 + 1e-9)
    assert v <= _v(r, e, float(wet.friction_at(0.0))) * (1 + 1e-9)
