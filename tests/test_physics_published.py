"""Physics checked against published tables and formulas.

Each check names its source beside it; status codes follow /work/shared/REFERENCES.md
(V verified, V-2nd secondary source, M from memory, D derived from a V formula).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from curvescan.config import make_config
from curvescan.physics import BUILTIN_VEHICLES, evaluate, limits

FT_PER_M = 1 / 0.3048
KMH_PER_MPH = 1.609344

# --- AASHTO minimum radius, limiting e and f --------------------------------------------
# Source: AASHTO, A Policy on Geometric Design of Highways and Streets, 2011 (6th ed.),
# Table 3-7 "Minimum radius using limiting values of e and f" (REFERENCES.md 1c metric,
# 1d US customary). f per speed is REFERENCES.md 1b. The published rounded radii are
# from memory (status M); 393.7 m (100 km/h, 8 %) is V-2nd (Ethiopian Roads Authority
# Geometric Design Manual 2002, ch. 8) and 1814.8 ft (70 mph, 8 %) is V-2nd (tutorsglobe).
# Rounding rule: metric to the nearest 1 m; US to 3 significant figures below 1000 ft and
# the nearest 10 ft above. The tables use the rounded constants 127 and 15 where g0 gives
# 127.094 and 14.957, so the tolerance is the rounding half-step plus the constant's
# relative difference (0.074 % metric, 0.29 % US).

METRIC_E = (0.04, 0.06, 0.08, 0.10, 0.12)
METRIC_ROWS = [  # V km/h, f, published R (m) for e = 4, 6, 8, 10, 12 %
    (30, 0.28, (22, 21, 20, 19, 18)),
    (50, 0.19, (86, 79, 73, 68, 64)),
    (60, 0.17, (135, 123, 113, 105, 98)),
    (80, 0.14, (280, 252, 229, 210, 194)),
    (100, 0.12, (492, 437, 394, 358, 328)),
    (120, 0.09, (None, 756, 667, 597, 540)),  # e = 4 % not tabulated above 100 km/h
]
US_ROWS = [  # V mph, f, published R (ft) for e = 4, 6, 8, 10, 12 %
    (30, 0.20, (250, 231, 214, 200, 188)),
    (45, 0.15, (711, 643, 587, 540, 500)),
    (55, 0.13, (1190, 1060, 960, 877, 807)),
    (65, 0.11, (None, 1660, 1480, 1340, 1220)),
    (70, 0.10, (None, 2040, 1810, 1630, 1480)),
]


def _metric_cases():
    for v, f, radii in METRIC_ROWS:
        for e, r in zip(METRIC_E, radii):
            if r is not None:
                yield pytest.param(v, f, e, r, id=f"{v}kmh-e{e:.2f}")


def _us_cases():
    for v, f, radii in US_ROWS:
        for e, r in zip(METRIC_E, radii):
            if r is not None:
                yield pytest.param(v, f, e, r, id=f"{v}mph-e{e:.2f}")


@pytest.mark.parametrize("speed_kmh,f,e,published_m", list(_metric_cases()))
def test_aashto_2011_table_3_7_metric_minimum_radius(speed_kmh, f, e, published_m):
    """AASHTO 2011 Table 3-7 (metric), every row at five e_max rates (REFERENCES.md 1c)."""
    r = float(limits.minimum_radius_m(speed_kmh, e, f, exact=False))
    assert abs(r - published_m) <= 0.5 + 0.00075 * r


@pytest.mark.parametrize("speed_mph,f,e,published_ft", list(_us_cases()))
def test_aashto_2011_table_3_7_us_minimum_radius(speed_mph, f, e, published_ft):
    """AASHTO 2011 Table 3-7 (US customary), every row at five e_max rates (REFERENCES 1d)."""
    r_ft = float(limits.minimum_radius_m(speed_mph * KMH_PER_MPH, e, f, exact=False)) * FT_PER_M
    half_step = 5.0 if published_ft >= 1000 else 0.5
    assert abs(r_ft - published_ft) <= half_step + 0.003 * r_ft


def test_verified_minimum_radius_points():
    """V-2nd points: 100 km/h, e 8 %, f 0.12 -> 393.7 m (Ethiopian Roads Authority manual
    2002 ch. 8, from AASHTO); 70 mph, e 8 %, f 0.10 -> 1814.80 ft (tutorsglobe worked
    example, R = V^2 / (15 (e + f))). Tolerance: the 127/15 constants (REFERENCES.md 1a)."""
    assert float(limits.minimum_radius_m(100, 0.08, 0.12, exact=False)) == pytest.approx(
        393.7, rel=0.001
    )
    r_ft = float(limits.minimum_radius_m(70 * KMH_PER_MPH, 0.08, 0.10, exact=False)) * FT_PER_M
    assert r_ft == pytest.approx(1814.80, rel=0.003)


def test_design_side_friction_matches_verified_columns():
    """AASHTO 2011 Table 3-7 f_max, columns seen in a compilation labelled "AASHTO 2011"
    (REFERENCES.md 1b, V-2nd): 20->0.35, 40->0.23, 60->0.17, 80->0.14, 100->0.12, 120->0.09."""
    speeds = [20, 40, 60, 80, 100, 120]
    expected = [0.35, 0.23, 0.17, 0.14, 0.12, 0.09]
    assert np.allclose(limits.design_side_friction(speeds), expected, atol=1e-12)


@pytest.mark.parametrize("speed_kmh,f,e,published_m", list(_metric_cases()))
def test_comfort_speed_on_table_radius_is_design_speed(speed_kmh, f, e, published_m):
    """On the AASHTO 2011 Table 3-7 minimum radius for V, the design side friction is just
    used up at V, so the comfort speed is V. Allowance: the table's simplified relation and
    radius rounding (about 1 m on 20 m at 30 km/h) put the exact fixed point within 2.5 %."""
    v = float(limits.comfort_speed_ms(published_m, e)) * limits.KMH_PER_MS
    assert v == pytest.approx(speed_kmh, rel=0.025)


# --- Ready-made cornering oracles -----------------------------------------------------------
# Source: REFERENCES.md section 11 (D: exact form v^2 = gR(e+f)/(1-ef), g0 = 9.80665, the
# exact relation being V per REFERENCES.md 1a). Two decimals.

ORACLES = [
    ("dry", 200, 0.06, 0.80, 151.53),
    ("wet", 200, 0.06, 0.50, 121.14),
    ("packed snow", 200, 0.06, 0.25, 89.44),
    ("ice", 200, 0.06, 0.10, 63.97),
    ("design check", 437.4, 0.06, 0.12, 100.39),
    ("adverse crown", 200, -0.02, 0.25, 76.27),
    ("truck rollover", 200, 0.06, 0.35, 103.18),
    ("flat, no bank", 100, 0.0, 0.35, 66.70),
]


@pytest.mark.parametrize("case,radius,e,f,expected_kmh", ORACLES, ids=[o[0] for o in ORACLES])
def test_section_11_oracles(case, radius, e, f, expected_kmh):
    """REFERENCES.md section 11 exact speeds (D), to 2 decimals."""
    v = float(limits.banked_limit_ms(radius, e, f)) * limits.KMH_PER_MS
    assert abs(v - expected_kmh) <= 0.005 + 1e-9


def test_section_11_demand_friction():
    """REFERENCES.md section 11: 100 km/h on R 437.4 m, e 0.06 demands f = 0.1186 (exact
    form); the AASHTO simplified form gives 0.1200."""
    f = float(limits.demand_friction(100 / 3.6, 437.4, 0.06))
    assert abs(f - 0.1186) <= 0.00005


def test_section_11_oracles_through_the_stage():
    """The stage reproduces section 11's dry/snow/ice oracles when the condition frictions
    are set to the oracle's f through a preset file (REFERENCES.md 11, D)."""
    cfg = make_config(use_grade_in_friction=False)
    curves = pd.DataFrame({"radius_m": [200.0], "superelevation": [0.06]})
    out = evaluate(curves, cfg)
    # default snow 0.25 and ice 0.10 equal the oracle frictions
    assert abs(out["v_snow_kmh"].iloc[0] - 89.44) <= 0.005
    assert abs(out["v_ice_kmh"].iloc[0] - 63.97) <= 0.005


# --- Rollover --------------------------------------------------------------------------------

def test_nhtsa_static_stability_factor_formula():
    """NHTSA rollover rulemaking ch. V "Why choose SSF?": SSF = T / (2H) (REFERENCES.md 5,
    V). Track 1.50 m, CG 0.60 m -> 1.25 (D arithmetic)."""
    assert float(limits.static_stability_factor(1.50, 0.60)) == pytest.approx(1.25, abs=1e-12)


@pytest.mark.parametrize(
    "name,ssf", [("passenger-car", 1.41), ("suv", 1.17), ("pickup", 1.18), ("minivan", 1.24)]
)
def test_nhtsa_hs_809_868_thresholds(name, ssf):
    """NHTSA report HS-809 868 (MY2003 sales-weighted SSF, REFERENCES.md 5, V): cars 1.41,
    SUVs 1.17, pickups 1.18, minivans 1.24. The rollover limit uses SSF in place of f:
    at R 200 m, e 0.06, v^2 = gR(e+SSF)/(1-e SSF)."""
    assert BUILTIN_VEHICLES[name].rollover_threshold_g == ssf
    cfg = make_config(vehicle=name)
    out = evaluate(pd.DataFrame({"radius_m": [200.0], "superelevation": [0.06]}), cfg)
    expected_ms = np.sqrt(9.80665 * 200 * (0.06 + ssf) / (1 - 0.06 * ssf))
    assert out["v_rollover_kmh"].iloc[0] == pytest.approx(expected_ms * 3.6, rel=1e-12)


def test_tanker_threshold_is_canadian_minimum():
    """NRC Canada (Billing & Patten), tank truck roll stability: Canadian minimum 0.40 g
    (REFERENCES.md 5, V). On a curve where dry friction 0.70 allows more, the loaded tanker
    rolls before it slides: REFERENCES.md 11 truck case gives 103.18 km/h at SSF 0.35."""
    assert BUILTIN_VEHICLES["tanker-loaded"].rollover_threshold_g == 0.40
    out = evaluate(
        pd.DataFrame({"radius_m": [200.0], "superelevation": [0.06]}),
        make_config(vehicle="tanker-loaded", use_grade_in_friction=False),
    )
    assert out["mechanism_dry"].iloc[0] == "roll"
    assert out["v_dry_limit_kmh"].iloc[0] == out["v_rollover_kmh"].iloc[0]
    assert 103.18 < out["v_rollover_kmh"].iloc[0] < out["v_dry_kmh"].iloc[0]


# --- Hydroplaning ------------------------------------------------------------------------------

@pytest.mark.parametrize(
    "psi,published_mph", [(20, 46.3), (25, 51.8), (30, 56.7), (40, 65.4)]
)
def test_nasa_hydroplaning_check_points(psi, published_mph):
    """NASA dynamic hydroplaning V_p = 10.35 sqrt(p) (mph, psi), Horne & Dreher NASA TN
    D-2056 (citation from memory); check points 20->46.3, 25->51.8, 30->56.7, 40->65.4 mph
    (REFERENCES.md 4, V-2nd). The pages give 0.1 mph but do not round consistently (the
    formula's 65.46 at 40 psi is shown as 65.4), so the tolerance is one last digit."""
    mph = float(limits.hydroplaning_speed_kmh(psi * 6.894757293168)) / KMH_PER_MPH
    assert abs(mph - published_mph) <= 0.1


def test_nasa_hydroplaning_32_psi_and_metric_coefficient():
    """REFERENCES.md 4: 32 psi -> 58.5-58.6 mph (V-2nd); metric form 6.3435 sqrt(kPa) (D)."""
    mph = float(limits.hydroplaning_speed_kmh(32 * 6.894757293168)) / KMH_PER_MPH
    assert 58.5 <= mph <= 58.6
    assert float(limits.hydroplaning_speed_kmh(100.0)) == pytest.approx(63.435, abs=0.001)


# --- Constants -------------------------------------------------------------------------------

def test_constants_match_definitions():
    """Standard gravity 9.80665 m/s^2 (3rd CGPM 1901) and ISA sea-level density 1.225 kg/m^3
    (REFERENCES.md 9, V)."""
    assert limits.STANDARD_GRAVITY_M_S2 == 9.80665
    assert make_config().air_density_kg_m3 == 1.225
