"""Roundabouts: tagged pieces join only each other, their curves are marked ``on_ring`` and
stay out of the hazard and winter layers unless asked.

Without the tag, approach roads that meet a roundabout nearly tangentially were joined into
it, and every quarter of a 20 m roundabout was reported as a hazard curve at 50 km/h.
"""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from curvescan.config import make_config
from curvescan.errors import InputError
from curvescan.pipeline import scan
from curvescan.prepare import roundabout_rows

CRS = "EPSG:32633"


def roundabout_network(centre=(500000.0, 5500000.0), radius=20.0, step_deg=15.0,
                       approach_m=300.0, tag=True) -> gpd.GeoDataFrame:
    """A roundabout of four pieces (vertices every 15 degrees) and four approach roads that
    meet it 5 degrees off the ring's next segment, straighter than the ring's own 15
    degree turn at its nodes. Invented geometry."""
    c = np.asarray(centre)
    geoms, junction = [], []
    for q in range(4):
        th = np.radians(np.arange(90.0 * q, 90.0 * (q + 1) + 1e-9, step_deg))
        geoms.append(shapely.LineString(c + radius * np.c_[np.cos(th), np.sin(th)]))
        junction.append("roundabout")
    for q in range(4):
        a0, a1 = np.radians(90.0 * q), np.radians(90.0 * q + step_deg)
        p = c + radius * np.array([np.cos(a0), np.sin(a0)])
        d = c + radius * np.array([np.cos(a1), np.sin(a1)]) - p
        d /= np.hypot(*d)
        k = np.radians(5.0)
        d = np.array([d[0] * np.cos(k) + d[1] * np.sin(k), -d[0] * np.sin(k) + d[1] * np.cos(k)])
        t = np.linspace(approach_m, 0.0, 31)[:, None]
        geoms.append(shapely.LineString(p - t * d))
        junction.append(None)
    frame = gpd.GeoDataFrame({"maxspeed": ["50"] * 8}, geometry=geoms, crs=CRS)
    if tag:
        frame["junction"] = junction
    return frame


def _scan(frame, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return scan(frame, speed_field="maxspeed", **params)


@pytest.mark.parametrize("tag,reverse", [(True, ()), (False, ()), (False, (1, 2))])
def test_roundabout_is_one_ring_and_no_hazard(tag, reverse):
    """Tagged, or untagged and recognised by its shape (the four pieces close a round loop
    of 40 m), also with pieces digitised the other way: the pieces join only each other,
    into one ring that is no hazard."""
    frame = roundabout_network(tag=tag)
    for k in reverse:
        frame.loc[k, "geometry"] = frame.geometry.iloc[k].reverse()
    res = _scan(frame)
    c = res.curves
    ring = c[c["on_ring"]]
    assert len(ring) == 1
    assert set(ring["src_fids"].iloc[0].split(",")) == {"0", "1", "2", "3"}
    assert ring["radius_m"].iloc[0] == pytest.approx(20.0, rel=0.01)
    # no approach road was joined into the ring
    assert not c["src_fids"].str.contains("4|5|6|7").any()
    assert len(res.hazards) == 0
    assert len(res.extra["winter"]) == 0
    assert res.run["assessment"]["ring_curves"] == 1
    assert res.run["roundabout_features_by_shape"] == (0 if tag else 4)


def test_untagged_approaches_are_joined_into_the_ring_without_shape_recognition():
    """The case the tag is for: without it (and with the recognition by shape off) each
    approach runs on into a quarter of the ring, which is then a hazard curve of 20 m
    radius."""
    res = _scan(roundabout_network(tag=False), ring_max_diameter_m=0)
    assert len(res.curves) == 4
    assert not res.curves["on_ring"].any()
    assert len(res.hazards) == 4


def _loop_parts(points_per_part, crs=CRS):
    n = len(points_per_part)
    return gpd.GeoDataFrame({"src_fid": np.arange(n), "maxspeed": ["50"] * n},
                            geometry=[shapely.LineString(p) for p in points_per_part], crs=crs)


def test_ring_parts_finds_round_loops_only():
    from curvescan.prepare import _clean_parts, part_ends, part_shapes, ring_parts

    def rings(frame, diameter=100.0):
        (xy, pid), part_row, _ = _clean_parts(np.asarray(frame.geometry.values, dtype=object),
                                               frame, make_config())
        ring = ring_parts(part_ends((xy, pid))[2], part_shapes((xy, pid)), 0.5, diameter)
        return ring[np.argsort(part_row)]

    c = np.array([500000.0, 5500000.0])
    # an octagon of 8 two-vertex pieces, 30 m across: round enough (4 pi A / P^2 = 0.95)
    th = np.radians(np.arange(0.0, 361.0, 45.0))
    octagon = c + 15.0 * np.c_[np.cos(th), np.sin(th)]
    assert rings(_loop_parts([octagon[i:i + 2] for i in range(8)])).all()
    # too wide for the limit: 30 m across against 20 m
    assert not rings(_loop_parts([octagon[i:i + 2] for i in range(8)]), diameter=20.0).any()
    # a city block of four straight streets, 60 m square (0.785 of a circle): not a ring
    sq = c + np.array([[0, 0], [60, 0], [60, 60], [0, 60], [0, 0]], dtype=float)
    assert not rings(_loop_parts([sq[i:i + 2] for i in range(4)])).any()
    # a long thin loop (a lay-by beside the road): not round
    lay = c + np.array([[0, 0], [80, 0], [80, 8], [0, 8], [0, 0]], dtype=float)
    assert not rings(_loop_parts([lay[:3], lay[2:]])).any()
    # ends that meet within the join tolerance only (0.3 m gaps), far from the CRS origin:
    # the loop's area is added up about a point of the loop, the gaps closed
    gappy = [octagon[i:i + 2] + [[0.0, 0.0], [0.3 * (i % 2), 0.0]] for i in range(8)]
    assert rings(_loop_parts(gappy)).all()
    # a side road that leaves the octagon and comes back elsewhere is not part of it
    out = np.array([octagon[2], octagon[2] + [0, 40], octagon[4] + [0, 40], octagon[4]])
    got = rings(_loop_parts([octagon[i:i + 2] for i in range(8)] + [out]))
    assert got[:8].all() and not got[8]


def test_rings_in_hazards_keeps_them():
    res = _scan(roundabout_network(), rings_in_hazards=True)
    assert len(res.hazards) == 1 and res.hazards["on_ring"].all()
    assert len(res.extra["winter"]) == 1


def test_ring_curves_rank_after_the_open_road_in_winter():
    """A roundabout never takes a winter rank ahead of a curve of the open road."""
    net = roundabout_network()
    bend = np.array([[510000.0, 5500000.0], [510100.0, 5500000.0]])
    th = np.linspace(0.0, np.pi / 2, 30)
    arc = bend[-1] + 60.0 * np.c_[np.sin(th), 1.0 - np.cos(th)]
    road = gpd.GeoDataFrame({"maxspeed": ["80"], "junction": [None]},
                            geometry=[shapely.LineString(np.vstack([bend, arc[1:]]))], crs=CRS)
    res = _scan(gpd.GeoDataFrame(pd.concat([net, road], ignore_index=True), crs=CRS))
    c = res.curves.sort_values("winter_rank")
    assert not c["on_ring"].iloc[0] and c["on_ring"].iloc[-1]
    w = res.extra["winter"]
    assert len(w) == 1 and list(w["winter_rank"]) == [1]


@pytest.mark.parametrize("value,expected", [
    ("roundabout", True), (" Roundabout ", True), ("circular", True), ("yes", True),
    ("1", True), ("no", False), ("", False), (None, False), ("jughandle", False),
    (1, True), (0, False)])
def test_roundabout_values(value, expected):
    frame = gpd.GeoDataFrame({"junction": [value]},
                             geometry=[shapely.LineString([(0, 0), (1, 0)])], crs=CRS)
    assert bool(roundabout_rows(frame, make_config())[0]) is expected


def test_roundabout_field_absent_or_named_wrong():
    frame = roundabout_network(tag=False)
    # the default field is used where present only
    assert roundabout_rows(frame, make_config()) is None
    with pytest.raises(InputError, match="roundabout"):
        _scan(frame, roundabout_field="ring_flag")
