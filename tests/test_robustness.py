"""Messy random networks: no crash, and every input row is in segments or skipped."""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely

import curvescan


def _messy_network(rng: np.random.Generator) -> gpd.GeoDataFrame:
    geoms = []
    for _ in range(int(rng.integers(5, 50))):
        n = int(rng.integers(2, 40))
        kind = int(rng.integers(0, 6))
        if kind == 0:  # random scatter at any scale, from millimetres to kilometres
            xy = rng.normal(0, rng.choice([0.001, 0.1, 10, 1000]), (n, 2))
        elif kind == 1:  # random walk
            xy = np.cumsum(rng.normal(0, 5, (n, 2)), axis=0)
        elif kind == 2:  # all vertices (nearly) on one point
            xy = np.repeat(rng.normal(0, 100, (1, 2)), n, axis=0) + rng.normal(0, 1e-9, (n, 2))
        elif kind == 3:  # arcs, up to more than a full turn
            t = np.linspace(0, rng.uniform(0.1, 7), n)
            r = rng.uniform(5, 3000)
            xy = np.c_[r * np.cos(t), r * np.sin(t)]
        elif kind == 4:  # zigzag
            xy = np.c_[np.arange(n) * rng.uniform(0.01, 50), np.zeros(n)]
            xy[::2, 1] += rng.uniform(0, 3)
        else:  # a single point repeated
            xy = np.zeros((n, 2))
        geoms.append(shapely.LineString(xy + [5e5 + rng.uniform(-1e4, 1e4), 5e6]))
    speeds = rng.choice(["50", "x", None, "30 mph", "999"], len(geoms))
    return gpd.GeoDataFrame({"maxspeed": speeds}, geometry=geoms, crs="EPSG:32632")


def _junction_network(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Lines between shared random nodes (junctions of any degree, stars of more than eight
    ends), straight or bent, noisy or exact, some reversed, some duplicated."""
    nodes = rng.uniform(0, 2000, (int(rng.integers(5, 40)), 2))
    geoms = []
    for _ in range(int(rng.integers(5, 80))):
        a, b = rng.integers(0, len(nodes), 2)
        p, q = nodes[a], nodes[b]
        t = np.linspace(0, 1, int(rng.integers(2, 30)))[:, None]
        normal = np.array([p[1] - q[1], q[0] - p[0]]) / max(float(np.hypot(*(q - p))), 1e-9)
        xy = p + t * (q - p) + np.sin(np.pi * t) * rng.normal(0, rng.choice([0, 5, 50, 300])) * normal
        xy = xy + rng.normal(0, rng.choice([0, 0.01, 0.5]), xy.shape)
        xy[0], xy[-1] = p, q
        geoms.append(shapely.LineString((xy[::-1] if rng.random() < 0.3 else xy) + [5e5, 5e6]))
        if rng.random() < 0.1:
            geoms.append(geoms[-1])
    speeds = rng.choice(["50", None, "30 mph"], len(geoms))
    return gpd.GeoDataFrame({"maxspeed": speeds}, geometry=geoms, crs="EPSG:32632")


@pytest.mark.parametrize("kind,seed", [("messy", s) for s in range(6)]
                         + [("junctions", s) for s in range(3)])
def test_messy_network_loses_no_row(kind, seed):
    make = _messy_network if kind == "messy" else _junction_network
    frame = make(np.random.default_rng(seed))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            result = curvescan.scan(frame, speed_field="maxspeed")
        except curvescan.InputError as exc:  # e.g. nothing usable at all: one clear line
            assert "\n" not in str(exc)
            return
    covered = set()
    for text in result.segments["src_fids"]:
        covered.update(int(t) for t in text.split(",") if t)
    skipped = {s["src_fid"] for s in result.run["skipped"]}
    assert covered | skipped == set(range(len(frame)))
    assert not covered & skipped
    assert np.isfinite(result.curves["radius_m"]).all()


@pytest.mark.parametrize("bad", [np.nan, np.inf])
@pytest.mark.parametrize("partitioned", [False, True])
def test_non_finite_vertex_is_removed_with_a_warning(bad, partitioned):
    """One vertex at NaN or infinity: the extent and working CRS come from the finite
    coordinates, the vertex goes with a recorded warning, the curve stays as it is."""
    from curvescan.errors import DataQualityWarning

    th = np.linspace(0.0, np.pi / 2, 20)
    arc = np.c_[5e5 + 100.0 * np.sin(th), 5e6 + 100.0 * (1.0 - np.cos(th))]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # shapely's own note on the invalid value
        broken = shapely.LineString(np.vstack([arc[:5], [[bad, 5e6]], arc[5:]]))
    frame = gpd.GeoDataFrame({"maxspeed": ["80", "80"]},
                             geometry=[broken, shapely.LineString(arc + 1000.0)],
                             crs="EPSG:32632")
    kw = {"partition_features": 10} if partitioned else {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = curvescan.scan(frame, **kw)
    said = [str(w.message) for w in caught if issubclass(w.category, DataQualityWarning)]
    assert any("1 vertices with non-finite coordinates" in m and "from 1 features" in m
               for m in said), said
    # ground radii: UTM shrinks the map by 0.9996 on its central meridian
    assert res.curves["radius_m"].to_numpy() == pytest.approx([100.04, 100.04], rel=1e-4)
    assert res.run["skipped_features"] == 0


def test_feature_with_no_finite_coordinates_is_skipped_with_its_reason():
    frame = gpd.GeoDataFrame(
        {"maxspeed": ["80", "80"]},
        geometry=[shapely.LineString([(5e5, 5e6), (5e5 + 300.0, 5e6)]),
                  shapely.LineString([(np.inf, 5e6), (np.inf, 5e6 + 1.0)])], crs="EPSG:32632")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = curvescan.scan(frame)
    assert res.run["skipped"] == [{"src_fid": 1, "reason": "fewer than two vertices with "
                                   "finite coordinates (NaN, infinite or beyond the working "
                                   "CRS)"}]
