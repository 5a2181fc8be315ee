"""Unit tests of the physics formulas and the physics stage (inputs, outputs, bad input)."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from curvescan.config import make_config
from curvescan.errors import DataQualityWarning, InputError
from curvescan.physics import BUILTIN_CONDITIONS, evaluate, limits, output_columns, run_record

G = 9.80665


def _curves(**cols):
    base = {"radius_m": [200.0, 500.0], "superelevation": [0.06, 0.02]}
    base.update(cols)
    return pd.DataFrame(base)


# --- closed form ------------------------------------------------------------------------------

def test_aerodynamic_closed_form_balances_forces():
    """The closed form with aerodynamic load satisfies the force balance written with the
    bank angle: lateral force / normal force = f at the limit (forces per unit mass)."""
    r, e, f, k = 150.0, 0.05, 0.6, 0.004  # k = rho C_L A / (2 m), 1/m
    v = float(limits.banked_limit_ms(r, e, f, downforce_per_mass=k))
    theta = math.atan(e)
    lateral = v * v / r * math.cos(theta) - G * math.sin(theta)
    normal = v * v / r * math.sin(theta) + G * math.cos(theta) + k * v * v
    assert lateral / normal == pytest.approx(f, rel=1e-12)
    assert float(limits.demand_friction(v, r, e, downforce_per_mass=k)) == pytest.approx(f)


def test_downforce_raises_and_lift_lowers_the_limit():
    base = float(limits.banked_limit_ms(150.0, 0.05, 0.6))
    assert float(limits.banked_limit_ms(150.0, 0.05, 0.6, downforce_per_mass=0.002)) > base
    assert float(limits.banked_limit_ms(150.0, 0.05, 0.6, downforce_per_mass=-0.002)) < base


def test_no_finite_limit_is_inf():
    """1 - e f - f k R sqrt(1+e^2) <= 0: downforce grows as fast as demand -> inf."""
    v = limits.banked_limit_ms(1000.0, 0.0, 1.0, downforce_per_mass=0.002)
    assert np.isposinf(v)


def test_adverse_bank_steeper_than_friction_gives_zero():
    assert float(limits.banked_limit_ms(200.0, -0.12, 0.10)) == 0.0


def test_invalid_radius_gives_nan_not_error():
    v = limits.banked_limit_ms([np.nan, 0.0, -5.0, 100.0], 0.02, 0.5)
    assert np.isnan(v[:3]).all() and np.isfinite(v[3])


# --- friction ellipse and grade -----------------------------------------------------------------

def test_friction_ellipse():
    assert np.allclose(limits.friction_ellipse([1.0, 0.5, 0.3], [0.6, 0.0, 0.4]), [0.8, 0.5, 0.0])


def test_longitudinal_demand_uses_downhill_direction():
    d = limits.longitudinal_demand_g(0.1, [0.05, -0.05, np.nan])
    assert d[0] == d[1] == pytest.approx(0.1 + 0.05 / math.sqrt(1 + 0.05**2))
    assert d[2] == pytest.approx(0.1)
    assert np.allclose(limits.longitudinal_demand_g(0.0, [0.08], use_grade=False), 0.0)


def test_braking_lowers_sliding_limit_through_stage():
    curves = _curves(grade=[0.06, -0.06])
    plain = evaluate(curves, make_config(use_grade_in_friction=False))
    graded = evaluate(curves, make_config())
    braking = evaluate(curves, make_config(braking_g=0.3))
    assert (graded["v_ice_kmh"] < plain["v_ice_kmh"]).all()
    assert (braking["v_ice_kmh"] < graded["v_ice_kmh"]).all()
    # ice 0.10 cannot hold 0.3 g braking: only the bank remains, v^2 = g R e
    assert braking["v_ice_kmh"].iloc[0] == pytest.approx(math.sqrt(G * 200 * 0.06) * 3.6)


# --- speed-dependent friction ------------------------------------------------------------------

def test_wet_limit_is_self_consistent():
    """At the wet limit the exact demand equals the wet friction at that very speed
    (Penn State form from 60 km/h, held constant above 130 km/h)."""
    wet = BUILTIN_CONDITIONS["wet"]
    r = np.array([25.0, 120.0, 400.0, 2500.0])
    e = np.array([0.0, 0.04, 0.08, -0.02])
    v = limits.solve_speed_dependent_ms(r, e, lambda s: wet.friction_at(s * 3.6))
    speed_kmh = np.minimum(v * 3.6, 130.0)
    f_at_v = wet.friction * np.exp(-wet.speed_gradient_png / 100 * (speed_kmh - 60.0))
    assert v[-1] * 3.6 > 130.0  # the last case exercises the hold
    assert np.allclose(limits.demand_friction(v, r, e), f_at_v, atol=1e-10)


def test_wet_friction_falls_with_speed():
    wet = BUILTIN_CONDITIONS["wet"]
    f = wet.friction_at([0.0, 60.0, 120.0])
    assert f[0] > f[1] > f[2]
    assert f[1] == pytest.approx(0.45)


def test_comfort_speed_is_fixed_point_of_design_friction():
    r = np.array([30.0, 100.0, 437.4, 3000.0])
    e = np.array([0.02, 0.06, 0.06, 0.10])
    v = limits.comfort_speed_ms(r, e)
    assert np.allclose(
        limits.demand_friction(v, r, e), limits.design_side_friction(v * 3.6), atol=1e-10
    )


# --- input checks of the formulas ----------------------------------------------------------------

@pytest.mark.parametrize(
    "radius,e,f,word",
    [(0.0, 0.02, 0.5, "radius_m"), (-10.0, 0.02, 0.5, "radius_m"),
     (100.0, -0.16, 0.5, "superelevation"), (100.0, 0.21, 0.5, "superelevation"),
     (100.0, 0.02, 0.0, "friction"), (100.0, 0.02, 1.6, "friction"),
     (100.0, 0.02, -0.2, "friction")],
)
def test_check_curve_inputs_rejects(radius, e, f, word):
    with pytest.raises(InputError, match=word):
        limits.check_curve_inputs(radius, e, f)


def test_check_curve_inputs_accepts_boundaries():
    limits.check_curve_inputs([1.0, 5000.0], [-0.15, 0.20], [1.5, 0.01])


def test_static_stability_factor_rejects_nonpositive():
    with pytest.raises(InputError):
        limits.static_stability_factor(1.5, 0.0)


# --- the stage -----------------------------------------------------------------------------------

def test_output_has_contract_columns_and_same_index():
    curves = _curves(posted_kmh=[80.0, np.nan])
    curves.index = pd.Index(["a", "b"])
    out = evaluate(curves, make_config())
    for col in ("v_dry_kmh", "v_wet_kmh", "v_snow_kmh", "v_ice_kmh", "v_comfort_kmh",
                "v_rollover_kmh", "f_demand_posted", "friction_margin_snow",
                "v_wet_low_kmh", "v_wet_high_kmh", "mechanism_ice", "hydroplaning_kmh"):
        assert col in out.columns
    assert list(out.columns) == output_columns(["dry", "wet", "snow", "ice"])
    assert out.index.equals(curves.index)
    assert np.isnan(out["f_demand_posted"].iloc[1])
    assert pd.isna(out["posted_over_hydroplaning"].iloc[1])


def test_empty_table_keeps_schema():
    out = evaluate(_curves().iloc[:0], make_config())
    assert len(out) == 0 and "v_dry_kmh" in out.columns


def test_invalid_rows_are_null_and_counted():
    curves = pd.DataFrame({"radius_m": [np.nan, 0.0, -3.0, 100.0, 100.0],
                           "superelevation": [0.02, 0.02, 0.02, 0.02, 0.35]})
    with pytest.warns(DataQualityWarning) as record:
        out = evaluate(curves, make_config())
    messages = [str(w.message) for w in record]
    assert any("3 of 5" in m and "radius" in m for m in messages)
    assert any("1 of 5" in m and "superelevation" in m for m in messages)
    assert out["v_dry_kmh"].isna().tolist() == [True, True, True, False, True]
    speeds = [c for c in out.columns if c.startswith("v_")]
    assert out.loc[3, speeds].notna().all()
    assert out.loc[[0, 1, 2, 4], speeds].isna().all().all()


def test_invalid_rows_raise_on_request():
    curves = pd.DataFrame({"radius_m": [100.0, -1.0], "superelevation": [0.02, 0.02]})
    with pytest.raises(InputError, match="1 of 2 curve.*radius"):
        evaluate(curves, make_config(on_bad_curve="raise"))


def test_missing_column_is_named():
    with pytest.raises(InputError, match="superelevation"):
        evaluate(pd.DataFrame({"radius_m": [100.0]}), make_config())


def test_unknown_vehicle_lists_known_names():
    known = "unknown vehicle 'hovercraft'.*passenger-car.*tanker-loaded"
    with pytest.raises(InputError, match=known):
        evaluate(_curves(), make_config(vehicle="hovercraft"))


def test_unknown_condition_lists_known_names():
    with pytest.raises(InputError, match="unknown condition.*lava.*known: dry, ice, snow, wet"):
        evaluate(_curves(), make_config(conditions="dry,lava"))


def test_nonpositive_posted_speed_warns():
    with pytest.warns(DataQualityWarning, match="posted speed"):
        out = evaluate(_curves(posted_kmh=[-50.0, 60.0]), make_config())
    assert np.isnan(out["f_demand_posted"].iloc[0]) and np.isfinite(out["f_demand_posted"].iloc[1])


def test_margin_sign_matches_limit():
    """Posted below a condition's limit <=> positive margin for that condition."""
    curves = _curves(posted_kmh=[90.0, 90.0], grade=[0.03, np.nan])
    out = evaluate(curves, make_config())
    for c in ("dry", "wet", "snow", "ice"):
        assert ((out[f"friction_margin_{c}"] > 0) == (90.0 < out[f"v_{c}_kmh"])).all()


def test_band_brackets_nominal_and_default_se_used():
    curves = _curves(radius_se_m=[5.0, np.nan])
    out = evaluate(curves, make_config())
    for c in ("dry", "wet", "snow", "ice", "rollover"):
        assert (out[f"v_{c}_low_kmh"] <= out[f"v_{c}_kmh"]).all()
        assert (out[f"v_{c}_kmh"] <= out[f"v_{c}_high_kmh"]).all()
    tight = evaluate(curves.assign(superelevation_se=0.0),
                     make_config(radius_se_default_fraction=0.0))
    width = out["v_snow_high_kmh"] - out["v_snow_low_kmh"]
    assert (tight["v_snow_high_kmh"] - tight["v_snow_low_kmh"] < width).all()


def test_hydroplaning_flag_uses_vehicle_or_parameter_pressure():
    curves = _curves(posted_kmh=[100.0, 80.0])
    car = evaluate(curves, make_config())
    assert car["hydroplaning_kmh"].iloc[0] == pytest.approx(6.3435 * math.sqrt(220), rel=1e-4)
    assert car["posted_over_hydroplaning"].tolist() == [True, False]
    firm = evaluate(curves, make_config(tyre_pressure_kpa=300.0))
    assert firm["posted_over_hydroplaning"].tolist() == [False, False]


def test_run_record_is_json_and_names_sources():
    record = run_record(make_config(vehicle="suv"))
    text = json.dumps(record)
    assert record["vehicle"]["rollover_threshold_g"] == 1.17
    assert "HS-809 868" in record["vehicle"]["source"]
    for c in ("dry", "wet", "snow", "ice"):
        assert record["conditions"][c]["source"]
        assert record["conditions"][c]["friction_low"] <= record["conditions"][c]["friction"]
    assert "Table 3-7" in text
