"""Curved geometries (ISO WKB CircularString, CompoundCurve, MultiCurve) read as lines.

Check values are analytic (a circle's radius and arc length); the WKB layout is that of
OGC Simple Features Access, part 1 (ISO 19125-1), with ISO type codes (8 CircularString,
9 CompoundCurve, 11 MultiCurve; +1000 for Z).
"""

from __future__ import annotations

import struct
import warnings

import numpy as np
import pyarrow as pa
import pyogrio
import pytest
import shapely

import curvescan
from curvescan.errors import DataQualityWarning
from curvescan.io.curved import ARC_STEP_DEG, from_wkb, stroke
from curvescan.io.vector import read_layer


def _points_wkb(code: int, pts, order: str = "<", z: bool = False) -> bytes:
    dim = 3 if z else 2
    out = struct.pack(order + "B", 1 if order == "<" else 0)
    out += struct.pack(order + "II", code + (1000 if z else 0), len(pts))
    for p in pts:
        out += struct.pack(order + "d" * dim, *(list(p)[:2] + ([7.0] if z else [])))
    return out


def _compound(parts) -> bytes:
    out = struct.pack("<BII", 1, 9, len(parts))
    return out + b"".join(parts)


def _on_circle(xy, centre, radius):
    return np.abs(np.hypot(xy[:, 0] - centre[0], xy[:, 1] - centre[1]) - radius)


@pytest.mark.parametrize("order,z", [("<", False), (">", False), ("<", True)])
def test_circular_string_is_stroked_on_its_circle(order, z):
    # half circle of radius 100 about (100, 0), clockwise through (100, 100)
    wkb = _points_wkb(8, [(0, 0), (100, 100), (200, 0)], order, z)
    geoms, counts = from_wkb([wkb])
    xy = shapely.get_coordinates(geoms[0])
    assert counts == {"CircularString": 1}
    assert geoms[0].geom_type == "LineString"
    assert np.allclose(xy[0], (0, 0)) and np.allclose(xy[-1], (200, 0))
    assert _on_circle(xy, (100, 0), 100.0).max() < 1e-9
    assert geoms[0].length == pytest.approx(np.pi * 100.0, rel=1e-4)  # chords: 1 - 4e-5
    turn = np.degrees(np.diff(np.unwrap(np.arctan2(xy[:, 1], xy[:, 0] - 100.0))))
    assert np.abs(turn).max() <= ARC_STEP_DEG + 1e-9
    assert (turn < 0).all()  # clockwise, as the three points run


def test_counter_clockwise_arc_and_full_circle_and_straight_triple():
    ccw = stroke(np.array([[10.0, 0.0], [0.0, 10.0], [-10.0, 0.0]]))
    assert (ccw[:, 1] >= -1e-12).all()  # the upper half, through (0, 10)
    full = stroke(np.array([[10.0, 0.0], [-10.0, 0.0], [10.0, 0.0]]))
    assert shapely.LineString(full).length == pytest.approx(2 * np.pi * 10.0, rel=1e-4)
    straight = stroke(np.array([[0.0, 0.0], [5.0, 0.0], [10.0, 0.0]]))
    assert shapely.LineString(straight).length == pytest.approx(10.0)


def test_compound_curve_and_multicurve_join_their_pieces():
    line = _points_wkb(2, [(0, 0), (300, 0)])
    arc = _points_wkb(8, [(300, 0), (300 + 100 * np.sin(np.pi / 4), 100 - 100 * np.cos(np.pi / 4)),
                          (400, 100)])
    compound = _compound([line, arc])
    multi = struct.pack("<BII", 1, 11, 2) + line + arc
    geoms, counts = from_wkb([compound, multi, shapely.to_wkb(shapely.Point(1, 2))])
    assert counts == {"CompoundCurve": 1, "MultiCurve": 1}
    assert geoms[0].geom_type == "LineString"
    assert geoms[0].length == pytest.approx(300 + np.pi * 100 / 2, rel=1e-4)
    assert geoms[1].geom_type == "MultiLineString" and len(geoms[1].geoms) == 2
    assert geoms[2].equals(shapely.Point(1, 2))  # linear geometries pass unchanged


def test_truncated_curve_becomes_a_missing_geometry():
    wkb = _points_wkb(8, [(0, 0), (100, 100), (200, 0)])[:-8]
    geoms, counts = from_wkb([wkb])
    assert geoms[0] is None and counts == {"CircularString": 1}


def _curved_gpkg(path, radius=100.0):
    half = _points_wkb(8, [(0, 0), (radius, radius), (2 * radius, 0)])
    # tangents on both sides: the arc leaves (0, 0) heading north and ends heading south
    approach = _points_wkb(2, [(0, -300), (0, 0)])
    leave = _points_wkb(2, [(2 * radius, 0), (2 * radius, -300)])
    table = pa.table({"maxspeed": ["80", "60"],
                      "geometry": pa.array([_compound([approach, half, leave]),
                                            _points_wkb(2, [(0, 500), (400, 500)])],
                                           pa.binary())})
    pyogrio.write_arrow(table, path, geometry_name="geometry", geometry_type="Unknown",
                        crs="EPSG:3857", driver="GPKG")


def test_gpkg_with_arcs_is_read_with_a_counted_warning(tmp_path):
    path = tmp_path / "arcs.gpkg"
    _curved_gpkg(path)
    with pytest.warns(DataQualityWarning, match="1 curved geometries .*CompoundCurve"):
        frame = read_layer(path)
    assert list(frame["src_fid"]) == [1, 2]
    assert list(frame["maxspeed"]) == ["80", "60"]
    assert frame.crs.to_epsg() == 3857


@pytest.mark.parametrize("workers", [None, 1])
def test_scan_measures_the_radius_of_a_drawn_arc(tmp_path, workers):
    # in EPSG:3857 near the origin map and ground distances agree to 1e-9
    path = tmp_path / "arcs.gpkg"
    _curved_gpkg(path, radius=120.0)
    kw = {"workers": workers, "partition_features": 10} if workers else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = curvescan.scan(path, assume_crs=None, **kw)
    curves = res.curves
    assert len(curves) == 1
    assert curves["radius_m"].iloc[0] == pytest.approx(120.0, rel=1e-3)
    assert curves["deflection_deg"].iloc[0] == pytest.approx(180.0, abs=1.0)
    assert res.run["input_features"] == 2 and res.run["skipped_features"] == 0
    assert any("curved geometries" in w for w in res.run["warnings"])
