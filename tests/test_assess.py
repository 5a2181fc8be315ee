"""The assess stage: hazards, mildest condition, severity order, speed consistency, summary."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyogrio
import pytest

from curvescan.assess import hazards, rerank
from curvescan.assess_consistency import classify_drop, consistency
from curvescan.config import make_config
from tests.conftest import scan_demo

CONDS = ("dry", "wet", "snow", "ice")



@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    return scan_demo(tmp_path_factory)


def _table(posted, limits, roll=None, low=None, high=None):
    """A minimal physics-stage curve table; limits: rows of (dry, wet, snow, ice)."""
    limits = np.asarray(limits, dtype=float)
    n = len(posted)
    data = {"curve_id": np.arange(1, n + 1), "posted_kmh": np.asarray(posted, float),
            "radius_m": np.full(n, 100.0)}
    for k, c in enumerate(CONDS):
        data[f"v_{c}_kmh"] = limits[:, k]
        data[f"v_{c}_limit_kmh"] = limits[:, k]
        data[f"v_{c}_low_kmh"] = limits[:, k] - 5 if low is None else low[:, k]
        data[f"v_{c}_high_kmh"] = limits[:, k] + 5 if high is None else high[:, k]
        data[f"mechanism_{c}"] = np.array(["slide"] * n, dtype=object)
        data[f"friction_margin_{c}"] = np.full(n, -0.01 * (k + 1))
    data["v_rollover_kmh"] = np.full(n, 500.0) if roll is None else np.asarray(roll, float)
    data["v_rollover_low_kmh"] = data["v_rollover_kmh"] - 10
    data["v_rollover_high_kmh"] = data["v_rollover_kmh"] + 10
    return pd.DataFrame(data)


def test_hazards_mildest_excess_band_and_order():
    curves = _table(
        posted=[80, 80, 80, 80, np.nan, 80],
        limits=[[120, 90, 70, 40],   # snow mildest, excess 10
                [120, 100, 90, 79],  # ice only, excess 1 (inside the band)
                [75, 60, 50, 30],    # dry, excess 5
                [130, 110, 95, 85],  # nothing exceeded
                [50, 40, 30, 20],    # no posted speed: never a hazard
                [120, 70, 50, 30]],  # wet, excess 10
    )
    hz = hazards(curves, make_config())
    assert list(hz["curve_id"]) == [3, 6, 1, 2]  # dry, wet, snow, ice
    assert list(hz["severity_rank"]) == [1, 2, 3, 4]
    assert list(hz["mildest_condition"]) == ["dry", "wet", "snow", "ice"]
    assert hz.set_index("curve_id").loc[1, "exceeds_conditions"] == "snow,ice"
    assert hz.set_index("curve_id").loc[3, "exceeds_conditions"] == "dry,wet,snow,ice"
    row = hz.set_index("curve_id").loc[1]
    assert row["excess_snow_kmh"] == 10 and row["excess_ice_kmh"] == 40
    assert row["excess_wet_kmh"] == 0 and row["max_excess_kmh"] == 40
    assert row["limit_kmh"] == 70 and row["limit_low_kmh"] == 65 and row["limit_high_kmh"] == 75
    assert row["band_position"] == "above_band"  # 80 > 75
    assert hz.set_index("curve_id").loc[2, "band_position"] == "inside_band"  # 80 < 84
    assert row["friction_margin"] == pytest.approx(-0.03)  # snow column of the table
    assert row["governing_mechanism"] == "slide"


def test_flag_at_band_compares_the_low_end_of_the_band():
    """--flag-at band: a posted speed over the low end of a limit's band is flagged too,
    with band_position under_estimate; the estimate basis leaves it out."""
    low = np.array([[115, 75, 60, 35],     # wet low 75 < 80 <= wet estimate 90
                    [125, 105, 95, 85],    # nothing: 80 under every low end
                    [115, 95, 85, 79]])    # ice low 79 < 80 < ice estimate 84
    curves = _table(posted=[80, 80, 80],
                    limits=[[120, 90, 70, 40], [130, 110, 100, 90], [120, 100, 90, 84]],
                    low=low)
    assert list(hazards(curves, make_config())["curve_id"]) == [1]  # snow, estimate
    band = hazards(curves, make_config(flag_at="band")).set_index("curve_id")
    assert list(band.index) == [1, 3]
    assert band.loc[1, "mildest_condition"] == "wet"
    assert band.loc[1, "exceeds_conditions"] == "wet,snow,ice"
    assert band.loc[1, "band_position"] == "under_estimate"  # 80 < 90, the wet estimate
    assert band.loc[1, "limit_low_kmh"] == 75 and band.loc[1, "limit_kmh"] == 90
    assert band.loc[1, "max_excess_kmh"] == 40  # against the estimates: ice 80 - 40
    assert band.loc[1, "excess_wet_kmh"] == 0  # under the wet estimate
    assert band.loc[3, "mildest_condition"] == "ice"
    assert band.loc[3, "band_position"] == "under_estimate"
    assert band.loc[3, "max_excess_kmh"] == -4  # under the estimate only


def test_flag_at_band_takes_the_low_end_of_the_rollover_band():
    # rollover 85, its low end 75 (the table's band is +-10): 80 exceeds the low end only
    curves = _table(posted=[80], limits=[[150, 120, 100, 95]], roll=[85])
    assert len(hazards(curves, make_config())) == 0
    hz = hazards(curves, make_config(flag_at="band"))
    assert len(hz) == 1 and hz["mildest_condition"].iloc[0] == "dry"
    assert hz["limit_low_kmh"].iloc[0] == 75


def test_flag_at_rejects_an_unknown_basis():
    from curvescan.errors import InputError

    with pytest.raises(InputError, match="--flag-at: 'median' is not valid"):
        make_config(flag_at="median")


def test_rollover_only_exceedance_is_a_hazard():
    curves = _table(posted=[90], limits=[[150, 120, 100, 95]], roll=[85])
    hz = hazards(curves, make_config())
    assert len(hz) == 1 and hz["excess_rollover_kmh"].iloc[0] == pytest.approx(5)


def test_hazards_exactly_the_curves_over_a_limit(demo_result):
    """Check the hazards layer against the curves layer read back from the GeoPackage."""
    _, path = demo_result
    curves = pyogrio.read_dataframe(path, layer="curves")
    hz = pyogrio.read_dataframe(path, layer="hazards")
    posted = curves["posted_kmh"].to_numpy(float)
    cols = [f"v_{c}_limit_kmh" for c in CONDS] + ["v_rollover_kmh"]
    over = np.zeros(len(curves), bool)
    for c in cols:
        over |= posted > curves[c].to_numpy(float)
    assert set(hz["curve_id"]) == set(curves.loc[over, "curve_id"])
    assert len(hz) == int(over.sum()) > 0
    assert (hz["severity_rank"].to_numpy() == np.arange(1, len(hz) + 1)).all()
    # severity: mildest condition order is non-decreasing down the layer
    order = hz["mildest_condition"].map({c: k for k, c in enumerate(CONDS)}).to_numpy()
    assert (np.diff(order) >= 0).all()
    # curves carry the same mildest condition; null exactly where not a hazard
    assert curves["mildest_condition"].notna().to_numpy().tolist() == over.tolist()


def test_contract_fields_first_in_curves(demo_result):
    _, path = demo_result
    curves = pyogrio.read_dataframe(path, layer="curves")
    head = ["curve_id", "src_fids", "radius_m", "radius_se_m", "length_m", "deflection_deg",
            "direction", "fit_rmse_m", "superelevation", "superelevation_source", "grade",
            "posted_kmh", "v_dry_kmh", "v_wet_kmh", "v_snow_kmh", "v_ice_kmh",
            "v_comfort_kmh", "v_rollover_kmh"]
    assert list(curves.columns[:len(head)]) == head
    for extra in ("road_name", "approach_kmh", "speed_drop_kmh", "consistency",
                  "mildest_condition", "winter_score", "winter_rank"):
        assert extra in curves.columns


def _chain(posted, comfort, starts, ends, chain=None, length=5000.0):
    n = len(posted)
    return pd.DataFrame({"chain_id": np.zeros(n, int) if chain is None else chain,
                         "s_start_m": starts, "s_end_m": ends, "posted_kmh": posted,
                         "v_comfort_kmh": comfort}), np.array([length, length])


def test_lamm_classes_from_memory():
    """Lamm Criterion II thresholds, 10 and 20 km/h (from memory: Lamm, Psarianos &
    Mailaender 1999, Highway Design and Traffic Safety Engineering Handbook; REFERENCES.md
    section 6, row M)."""
    out = classify_drop(np.array([-5.0, 10.0, 10.5, 20.0, 20.1, np.nan]))
    assert list(out) == ["good", "good", "fair", "fair", "poor", None]


def test_consistency_uses_posted_then_previous_curve():
    # three curves on one chain (5 km), posted 100, separated by 50 m tangents
    curves, lengths = _chain(posted=[100.0, 100.0, 100.0], comfort=[85.0, 60.0, 55.0],
                             starts=[500.0, 750.0, 950.0], ends=[700.0, 900.0, 1050.0])
    out = consistency(curves, lengths, make_config(consistency_tangent_m=200.0))
    # curve 1: approach 100 from the chain start (500 m tangent) -> drop 15: fair
    assert out.loc[0, "speed_drop_kmh"] == pytest.approx(15.0)
    assert out.loc[0, "consistency"] == "fair"
    # curve 2: the 50 m tangent carries curve 1's comfort speed 85 -> drop 25: poor
    assert out.loc[1, "approach_kmh"] == pytest.approx(85.0)
    assert out.loc[1, "approach_source"] == "previous_curve"
    assert out.loc[1, "approach_direction"] == "digitised"
    assert out.loc[1, "speed_drop_kmh"] == pytest.approx(25.0)
    assert out.loc[1, "consistency"] == "poor"
    # (against the digitised direction curve 2 is approached from curve 3 at 55: no drop)
    # curve 3: from the chain end, 3950 m of tangent at 100 -> drop 45 in reverse: poor
    assert out.loc[2, "approach_direction"] == "reverse"
    assert out.loc[2, "approach_tangent_m"] == pytest.approx(3950.0)
    assert out.loc[2, "speed_drop_kmh"] == pytest.approx(45.0)
    assert out.loc[2, "consistency"] == "poor"


def test_consistency_reverse_direction_and_unknown():
    # the sharp curve comes first; driving against the digitised direction, the approach
    # to curve 1 is the chain end side. Posted unknown, previous comfort carries.
    curves, lengths = _chain(posted=[np.nan, np.nan], comfort=[40.0, 90.0],
                             starts=[100.0, 300.0], ends=[250.0, 400.0])
    out = consistency(curves, lengths, make_config(consistency_tangent_m=200.0))
    assert out.loc[0, "approach_direction"] == "reverse"
    assert out.loc[0, "approach_kmh"] == pytest.approx(90.0)
    assert out.loc[0, "speed_drop_kmh"] == pytest.approx(50.0)
    assert out.loc[1, "speed_drop_kmh"] == pytest.approx(-50.0)
    assert out.loc[1, "consistency"] == "good"
    lone, lengths = _chain(posted=[np.nan], comfort=[50.0], starts=[100.0], ends=[200.0])
    out = consistency(lone, lengths, make_config())
    assert pd.isna(out.loc[0, "consistency"]) and np.isnan(out.loc[0, "speed_drop_kmh"])


def test_run_record_summary_matches_layers(demo_result):
    result, path = demo_result
    run = pyogrio.read_dataframe(path, layer="run", read_geometry=False)
    summary = json.loads(run["assessment"].iloc[0])
    assert sum(summary["hazards_per_mildest_condition"].values()) == len(result.hazards)
    assert sum(summary["hazards_per_mechanism"].values()) == len(result.hazards)
    posted = result.curves["posted_kmh"].to_numpy(float)
    for c in CONDS:
        expected = int(np.sum(posted > result.curves[f"v_{c}_limit_kmh"].to_numpy(float)))
        assert summary["exceeded_per_condition"][c] == expected
    assert summary["worst_curves"][0]["curve_id"] == int(result.hazards["curve_id"].iloc[0])
    assert "Lamm" in summary["consistency_criterion"]
    speeds = json.loads(run["posted_speed"].iloc[0])
    assert speeds["unparsed_values"] == {"national": 1}


def test_rerank_after_merge(demo_result):
    result, _ = demo_result
    hz, winter = result.hazards, result.extra["winter"]
    half = len(hz) // 2
    merged = pd.concat([hz.iloc[half:], hz.iloc[:half]])
    w = pd.concat([winter.iloc[3:], winter.iloc[:3]])
    hz2, w2 = rerank(merged, w, list(CONDS))
    assert list(hz2["curve_id"]) == list(hz["curve_id"])
    assert list(w2["curve_id"]) == list(winter["curve_id"])


def test_rows_on_equals_the_rows_of_every_vertex_in_the_stretch():
    from curvescan.attributes import rows_on
    from curvescan.config import make_config
    from curvescan.prepare import prepare
    from curvescan.read import load

    from .conftest import frame_from_lines, simple_curve

    al = simple_curve()
    xy = al.points(np.arange(0, al.length_m, 5.0))
    cut = [0, 9, 10, 30, 31, 60, len(xy) - 1]  # features of one and two segments too
    parts = [xy[a:b + 1] for a, b in zip(cut[:-1], cut[1:])]
    chains = prepare(load(frame_from_lines(parts), make_config()), make_config())
    rng = np.random.default_rng(2)
    total = float(chains.lengths[0])
    s0 = np.sort(rng.uniform(0, total, 300))
    s1 = np.minimum(s0 + rng.exponential(40.0, 300), total)
    s0[:5], s1[:5] = [0, 45, 50, 45.0, 10], [total, 45, 50.001, 46.0, 5]  # joints, empty
    chain = np.zeros(300, dtype=np.int64)
    g, r = rows_on(chains, chain, s0, s1)
    m = chains.measure
    for k in range(300):
        inside = np.flatnonzero((m >= s0[k]) & (m <= s1[k]))
        j = np.clip(np.searchsorted(m, 0.5 * (s0[k] + s1[k]), side="right") - 1, 0,
                    len(m) - 2)
        want = set(chains.vertex_row[inside].tolist()) | {int(chains.vertex_row[j + 1])}
        assert set(r[g == k].tolist()) == want, k


@pytest.mark.parametrize("values", [[], [3, 1, 3, 2, 2], list(range(50, 0, -7)) * 3])
def test_sorted_unique_equals_numpy_unique(values):
    from curvescan.attributes import sorted_unique

    values = np.asarray(values, dtype=np.int64)
    np.testing.assert_array_equal(sorted_unique(values), np.unique(values))


def test_first_value_of_no_groups_is_empty():
    # a partition whose chains hold no curve: no (curve, row) pairs at all
    from curvescan.attributes import first_value

    none = np.zeros(0, dtype=np.int64)
    assert first_value(none, none, np.array(["x"], dtype=object), 0).shape == (0,)
    got = first_value(np.array([1, 0, 1]), np.array([2, 1, 0]),
                      np.array(["a", "b", "c"], dtype=object), 3)
    assert list(got) == ["b", "a", None]


@pytest.mark.parametrize("shuffle", [False, True])
def test_source_ids_and_first_values_sorted_or_not(shuffle):
    """Pairs in (group, row) order skip the sort; shuffled pairs are sorted: both give the
    texts and values a plain Python reading gives."""
    from curvescan.attributes import first_value, src_fid_text

    rng = np.random.default_rng(2)
    groups = np.repeat(np.arange(50), rng.integers(1, 5, 50))
    rows = rng.integers(0, 40, len(groups))
    key = np.unique(groups * 100 + rows)
    groups, rows = key // 100, key % 100
    if shuffle:
        p = rng.permutation(len(groups))
        groups, rows = groups[p], rows[p]
    src = rng.permutation(1000)[:40] + 1  # ids not in row order
    names = np.array([f"road {r}" for r in range(40)], dtype=object)
    text = src_fid_text(groups, rows, src, 52)
    first = first_value(groups, rows, names, 52)
    for g in range(52):
        mine = rows[groups == g]
        assert text[g] == ",".join(str(v) for v in sorted(src[mine]))
        assert first[g] == (names[mine.min()] if len(mine) else None)
    assert pd.Series(text).dtype == pd.Series(np.asarray(text, dtype=object)).dtype


def test_directions_flip_alike_for_text_and_object_columns():
    from curvescan.attributes import orient_to_features

    words = ["left", "right", None, "digitised", "reverse", "left", "other"]
    flip = np.array([True, True, True, True, False, False, True])
    want = ["right", "left", None, "reverse", "reverse", "left", "other"]
    text = pd.DataFrame({"direction": pd.Series(words, dtype="str"),
                         "approach_direction": pd.Series(words, dtype=object),
                         "grade_max_down_direction": pd.Series([None] * 7, dtype=object)})
    out = orient_to_features(text, flip)
    assert out["direction"].dtype == text["direction"].dtype
    assert [None if pd.isna(v) else v for v in out["direction"]] == want
    assert [None if pd.isna(v) else v for v in out["approach_direction"]] == want
    assert out["grade_max_down_direction"].isna().all()
    assert out["grade_max_down_direction"].dtype == object
