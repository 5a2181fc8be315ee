"""Winter priority: parts, score formula, rank, weights, and bad traffic/bridge input."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyogrio
import pytest

from curvescan.assess_winter import parse_aadt, parse_bridge, winter_priority
from curvescan.config import make_config
from curvescan.errors import DataQualityWarning
from tests.conftest import frame_from_lines, simple_curve
from tests.conftest import scan_demo

PARTS = ("snow", "ice", "bridge", "downgrade", "surprise")



@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    return scan_demo(tmp_path_factory)


def _curves(**cols):
    n = len(next(iter(cols.values())))
    base = {"curve_id": np.arange(1, n + 1), "posted_kmh": np.full(n, 100.0),
            "v_comfort_kmh": np.full(n, 90.0), "v_snow_limit_kmh": np.full(n, 200.0),
            "v_ice_limit_kmh": np.full(n, 200.0)}
    base.update({k: np.asarray(v) for k, v in cols.items()})
    return pd.DataFrame(base)


def test_parts_by_hand():
    c = _curves(v_snow_limit_kmh=[50.0, 200.0, 200.0, 200.0],
                v_ice_limit_kmh=[25.0, 200.0, 200.0, 200.0],
                on_bridge=[0.0, 1.0, 0.0, 0.0],
                grade_max_down=[0.0, 0.0, 0.04, 0.2],
                speed_drop_kmh=[10.0, 0.0, 0.0, 40.0],
                approach_tangent_m=[0.0, 0.0, 0.0, 1000.0],
                aadt=[np.nan, 20000.0, 99.0, 0.0])
    out = winter_priority(c, make_config())
    assert out.loc[0, "winter_snow"] == pytest.approx(0.5)      # (100 - 50) / 100
    assert out.loc[0, "winter_ice"] == pytest.approx(0.75)      # (100 - 25) / 100
    assert out.loc[0, "winter_surprise"] == pytest.approx(0.25)  # 10/20 * (0.5 + 0)
    assert out.loc[0, "winter_traffic"] == pytest.approx(0.5)   # unknown AADT: neutral
    assert out.loc[1, "winter_bridge"] == 1.0
    assert out.loc[1, "winter_traffic"] == pytest.approx(1.0)   # at the reference AADT
    assert out.loc[2, "winter_downgrade"] == pytest.approx(0.5)  # 0.04 / 0.08
    assert out.loc[2, "winter_traffic"] == pytest.approx(2.0 / 4.30105)  # log10(100)/log10(20001)
    assert out.loc[3, "winter_downgrade"] == 1.0 and out.loc[3, "winter_surprise"] == 1.0
    assert out.loc[3, "winter_traffic"] == 0.0


def test_score_formula_as_documented():
    """docs/assess.md: 100 * sum(w part)/sum(w) * ((1-s) + s traffic)."""
    c = _curves(v_snow_limit_kmh=[60.0], v_ice_limit_kmh=[30.0], on_bridge=[1.0],
                grade_max_down=[0.06], speed_drop_kmh=[15.0], approach_tangent_m=[250.0],
                aadt=[999.0])
    cfg = make_config()
    out = winter_priority(c, cfg)
    snow, ice, bridge, down = 0.4, 0.7, 1.0, 0.75
    surprise = 0.75 * (0.5 + 0.5 * 0.5)
    traffic = np.log10(1000.0) / np.log10(20001.0)
    weights = np.array([3.0, 2.0, 1.5, 1.5, 1.0])  # the declared defaults
    cond = weights @ [snow, ice, bridge, down, surprise] / weights.sum()
    expected = 100 * cond * (0.5 + 0.5 * traffic)
    assert out.loc[0, "winter_score"] == pytest.approx(expected, rel=1e-12)


def test_posted_unknown_uses_comfort_speed():
    c = _curves(posted_kmh=[np.nan], v_comfort_kmh=[80.0], v_snow_limit_kmh=[60.0])
    out = winter_priority(c, make_config())
    assert out.loc[0, "winter_snow"] == pytest.approx(0.25)
    assert out.loc[0, "winter_speed_source"] == "comfort"


def test_weights_steer_the_ranking():
    c = _curves(v_snow_limit_kmh=[40.0, 200.0], on_bridge=[0.0, 1.0])
    default = winter_priority(c, make_config())
    assert list(default["winter_rank"]) == [1, 2]
    bridge_only = winter_priority(c, make_config(winter_weight_snow=0.0, winter_weight_ice=0.0,
                                                 winter_weight_downgrade=0.0,
                                                 winter_weight_surprise=0.0))
    assert list(bridge_only["winter_rank"]) == [2, 1]


def test_rank_monotone_in_score_and_parts_reported(demo_result):
    _, path = demo_result
    curves = pyogrio.read_dataframe(path, layer="curves")
    order = curves.sort_values("winter_rank")
    assert (np.diff(order["winter_score"].to_numpy()) <= 0).all()
    assert sorted(curves["winter_rank"]) == list(range(1, len(curves) + 1))
    winter = pyogrio.read_dataframe(path, layer="winter")
    assert (np.diff(winter["winter_rank"].to_numpy()) > 0).all()
    assert (winter["winter_score"] > 0).all()
    assert len(winter) == int((curves["winter_score"] > 0).sum())
    for p in PARTS + ("traffic",):
        v = winter[f"winter_{p}"].to_numpy()
        assert ((v >= 0) & (v <= 1)).all()
    assert winter["winter_bridge"].max() == 1.0  # the demo has bridges


def test_parse_aadt_text_and_bad_values():
    values = ["12,000", "12 000 veh/day", "~5000", 800, "high", -5, None, ""]
    with pytest.warns(DataQualityWarning) as record:
        out, rep = parse_aadt(values)
    assert len(out) == len(values)
    assert out[:4] == pytest.approx([12000.0, 12000.0, 5000.0, 800.0])
    assert np.isnan(out[4:]).all()
    assert rep["text"] == 1 and rep["text_values"] == {"high": 1}
    assert rep["negative"] == 1 and rep["missing"] == 2
    messages = " ".join(str(w.message) for w in record)
    assert "not a number" in messages and "negative" in messages and "no value" in messages


def test_parse_bridge_tags():
    values = ["yes", "viaduct", "no", None, "", "maybe", 1, 0]
    with pytest.warns(DataQualityWarning) as record:
        out, rep = parse_bridge(values)
    assert out.tolist() == [1.0, 1.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0]
    assert rep["missing"] == 2 and rep["other"] == 1 and rep["other_values"] == {"maybe": 1}
    messages = " ".join(str(w.message) for w in record)
    assert "not a bridge" in messages and "not a known bridge tag" in messages


def test_bad_input_scan_warns_counts_and_keeps_every_row():
    lines = []
    for k, r in enumerate((120.0, 150.0, 200.0, 250.0, 300.0)):
        al = simple_curve(radius_m=r)
        s = np.append(np.arange(0, al.length_m, 10.0), al.length_m)
        lines.append(al.points(s) + [0.0, 2000.0 * k])
    frame = frame_from_lines(
        lines, maxspeed=["100", "999", "-20", "60 mph", "50 km/h"],
        aadt=["high", "12,000", None, -5, 800], bridge=["yes", None, "no", "maybe", "viaduct"])
    from curvescan import scan

    with pytest.warns(DataQualityWarning):
        result = scan(frame, speed_field="maxspeed")
    run = result.run
    text = " ".join(run["warnings"])
    for phrase in ("zero, negative or above", "mixes units", "not a number", "negative",
                   "no value in AADT", "no value in bridge", "not a known bridge tag"):
        assert phrase in text, phrase
    assert run["posted_speed"]["absurd"] == 2
    inputs = run["assessment"]["inputs"]
    assert inputs["aadt"]["text"] == 1 and inputs["aadt"]["negative"] == 1
    assert inputs["bridge"]["missing"] == 1 and inputs["bridge"]["other"] == 1
    assert len(result.curves) == 5 and run["skipped_features"] == 0
    fids = set()
    for t in result.segments["src_fids"]:
        fids.update(int(x) for x in str(t).split(","))
    assert fids == set(range(5))
    posted = result.curves.sort_values("radius_m")["posted_kmh"].to_numpy()
    assert np.isnan(posted[1]) and np.isnan(posted[2])
    json.dumps(run["assessment"], default=str)  # serialisable for the run layer
