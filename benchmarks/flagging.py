"""Hazard flags against the truth: what the uncertainty band of the radius buys.

Generates the accuracy benchmark's alignments (:mod:`accuracy`, exactly known curves),
gives every road a posted speed, scans them once with ``flag_at="estimate"`` and once with
``flag_at="band"``, and compares the flags with those the *true* radii give (same
superelevation the scan assumed, same physics). Per surface condition it prints:

* ``true``: true arcs (in scope: deflection >= 10 deg, radius <= 1500 m) whose posted speed
  exceeds the limit the true radius gives;
* ``missed``: of those, how many no flagged curve lies on (a flagged curve whose circular
  part has its middle within the true curve, tangent point to tangent point);
* ``flagged``: flagged curves in that condition, and ``false``: how many of them lie on no
  such true hazard.

A miss is what screening must avoid: a curve sharper than measured, whose limit the
posted speed exceeds while its estimate does not.

Usage::

    python benchmarks/flagging.py                       # noisy, 200 roads
    python benchmarks/flagging.py --scenario sparse --roads 100
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

sys.path.insert(0, str(Path(__file__).resolve().parent))

import accuracy as acc  # noqa: E402

import curvescan  # noqa: E402
from curvescan import physics  # noqa: E402
from curvescan.config import make_config  # noqa: E402

#: Posted speeds drawn per road (km/h): the range of rural roads with curves of 40-1500 m.
POSTED = (50.0, 60.0, 70.0, 80.0, 90.0, 100.0)


def _located(result, refs):
    """Each hazard's road and the measure of its circular part's middle on that road."""
    hz = result.hazards
    seg = result.segments
    seg = seg[seg["kind"] == "curve"].drop_duplicates("curve_id").set_index("curve_id")
    hz = hz[hz["curve_id"].isin(seg.index)]
    if not len(hz):
        return hz.assign(road=[], mid=[])
    mid_pt = shapely.line_interpolate_point(seg.loc[hz["curve_id"]].geometry.values, 0.5,
                                            normalized=True)
    ref_lines = gpd.GeoSeries(refs, crs=acc.CRS)
    road = ref_lines.sindex.nearest(mid_pt, return_all=False)[1]
    mid = shapely.line_locate_point(np.asarray(refs, dtype=object)[road], mid_pt)
    return hz.assign(road=road, mid=mid)


def run(scenario: str, n_roads: int, seed: int) -> pd.DataFrame:
    frame, truth, refs = acc.make_roads(n_roads, scenario, seed)
    rng = np.random.default_rng(seed)
    speed = rng.choice(POSTED, size=n_roads)
    frame["maxspeed"] = speed[frame["road"].to_numpy()]
    results = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for basis in ("estimate", "band"):
            results[basis] = curvescan.scan(frame, crs=acc.CRS, speed_field="maxspeed",
                                            flag_at=basis)
    curves = results["estimate"].curves
    e = float(np.nanmedian(curves["superelevation"]))  # the scan's assumed value
    scope = (truth["circ_deflection_deg"] >= acc.MIN_DEFL) & (truth["radius_m"] <= acc.MAX_R)
    t = truth[scope].reset_index(drop=True)
    config = make_config()
    limits = physics.evaluate(pd.DataFrame({"radius_m": t["radius_m"].to_numpy(),
                                            "superelevation": np.full(len(t), e),
                                            "posted_kmh": speed[t["road"].to_numpy()]}),
                              config)
    names = [c for c in ("dry", "wet", "snow", "ice") if f"v_{c}_limit_kmh" in limits]
    posted = speed[t["road"].to_numpy()]
    lo = np.minimum(t["s_start_ref"], t["s_end_ref"]).to_numpy()
    hi = np.maximum(t["s_start_ref"], t["s_end_ref"]).to_numpy()
    rows = []
    for basis, res in results.items():
        hz = _located(res, refs)
        for c in names:
            true_over = posted > limits[f"v_{c}_limit_kmh"].to_numpy()
            flagged = hz[hz["exceeds_conditions"].str.split(",").map(lambda v: c in v)]
            on = np.zeros(len(t), dtype=bool)
            false = 0
            for road, mid in zip(flagged["road"], flagged["mid"]):
                hit = (t["road"].to_numpy() == road) & (lo <= mid) & (hi >= mid)
                on |= hit
                false += int(not (hit & true_over).any())
            rows.append({"basis": basis, "condition": c, "true": int(true_over.sum()),
                         "missed": int((true_over & ~on).sum()),
                         "flagged": len(flagged), "false": false})
    return pd.DataFrame(rows)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--scenario", default="noisy", choices=list(acc.SCENARIOS))
    ap.add_argument("--roads", type=int, default=200)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    table = run(args.scenario, args.roads, args.seed)
    print(f"scenario {args.scenario}, {args.roads} roads, seed {args.seed}")
    print(table.to_string(index=False))


if __name__ == "__main__":
    main()
