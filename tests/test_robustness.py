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


def _accounted(result) -> tuple[set, dict]:
    covered = set()
    for text in result.segments["src_fids"]:
        covered.update(int(t) for t in text.split(",") if t)
    return covered, {s["src_fid"]: s["reason"] for s in result.run["skipped"]}


def _quiet_scan(source, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return curvescan.scan(source, **kw)


def test_parts_shorter_than_the_shortest_piece_are_skipped_with_their_reason():
    """Output pieces of 1 mm or less are left out: a line that short, or one a spike's
    removal leaves with two coincident vertices, is skipped with its reason, not left
    'not covered by any segment'."""
    x0, y0 = 5e5, 5e6
    lines = [shapely.LineString([(x0, y0), (x0 + 300.0, y0)])]
    for k, d in enumerate([2e-6, 1e-4, 1e-3]):
        lines.append(shapely.LineString([(x0 + 100 * k, y0 + 50), (x0 + 100 * k + d, y0 + 50)]))
    # the middle vertex is a spike; without it the ends are 1e-9 m apart
    lines.append(shapely.LineString([(x0, y0 + 90), (x0 + 50, y0 + 90), (x0, y0 + 90 + 1e-9)]))
    frame = gpd.GeoDataFrame(geometry=lines, crs="EPSG:32632")
    covered, skipped = _accounted(_quiet_scan(frame))
    assert covered == {0}
    assert skipped == {1: "shorter than 1 mm", 2: "shorter than 1 mm", 3: "shorter than 1 mm",
                       4: "fewer than two distinct vertices (zero length)"}


def test_lines_inside_nested_collections_are_scanned():
    """A GeometryCollection holding a multi-line and a collection of lines: the lines are
    used (not skipped as 'non-line part'); an empty part of a multi-line is named so."""
    x0, y0 = 5e5, 5e6
    a = shapely.LineString([(x0, y0), (x0 + 200.0, y0)])
    b = shapely.LineString([(x0, y0 + 500), (x0 + 200.0, y0 + 500)])
    c = shapely.LineString([(x0, y0 + 1000), (x0 + 200.0, y0 + 1000)])
    nested = shapely.GeometryCollection([shapely.MultiLineString([a, b]), shapely.Point(x0, y0),
                                         shapely.GeometryCollection([c])])
    holed = shapely.from_wkt(f"MULTILINESTRING (({x0} {y0 + 2000}, {x0 + 200} {y0 + 2000}), "
                             "EMPTY)")
    frame = gpd.GeoDataFrame(geometry=[nested, holed], crs="EPSG:32632")
    res = _quiet_scan(frame)
    covered, _ = _accounted(res)
    assert covered == {0, 1}
    assert res.run["chains"] == 4
    assert sorted(s["reason"] for s in res.run["skipped"]) == ["empty part", "non-line part"]


def _one_point_line_geojson(path):
    import json

    line = [[8.5, 47.3], [8.501, 47.301], [8.502, 47.3]]
    feats = [{"type": "Feature", "properties": {"maxspeed": "50"},
              "geometry": {"type": "LineString", "coordinates": c}}
             for c in (line, [[8.6, 47.3]])]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    return path


@pytest.mark.parametrize("partitioned", [False, True])
def test_geojson_line_of_one_point_is_skipped_not_a_crash(tmp_path, partitioned):
    """GEOS refuses a LineString of one point; GDAL reads it from GeoJSON. The row is
    skipped as a missing geometry with a counted warning, the others are scanned."""
    path = _one_point_line_geojson(tmp_path / "one point.geojson")
    kw = {"partition_features": 10} if partitioned else {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = curvescan.scan(str(path), **kw)
    assert any("1 geometries could not be read" in str(w.message) for w in caught)
    covered, skipped = _accounted(res)
    assert covered == {0} and skipped == {1: "empty or missing geometry"}


def _geoparquet_with_one_point_line(path):
    import json
    import struct

    import pyarrow as pa
    import pyarrow.parquet as pq

    good = shapely.to_wkb(shapely.LineString([(8.5, 47.3), (8.501, 47.301), (8.502, 47.3)]))
    one_point = struct.pack("<BII", 1, 2, 1) + struct.pack("<dd", 8.6, 47.3)
    table = pa.table({"maxspeed": ["50", "60"],
                      "geometry": pa.array([good, one_point], pa.binary())})
    geo = {"version": "1.0.0", "primary_column": "geometry",
           "columns": {"geometry": {"encoding": "WKB", "geometry_types": ["LineString"]}}}
    pq.write_table(table.replace_schema_metadata({b"geo": json.dumps(geo).encode()}), path)


def test_geoparquet_with_an_invalid_geometry_is_read(tmp_path):
    _geoparquet_with_one_point_line(tmp_path / "roads.parquet")
    res = _quiet_scan(str(tmp_path / "roads.parquet"))
    assert res.run["input_crs"] == "OGC:CRS84"  # GeoParquet's default where none is given
    covered, skipped = _accounted(res)
    assert covered == {0} and skipped == {1: "empty or missing geometry"}


def test_geoparquet_folder_with_an_invalid_geometry_is_read(tmp_path):
    """A partitioned GeoParquet folder (one partition per file): the partition holding a
    line of one point is read again as plain Parquet, that row skipped, warned once."""
    folder = tmp_path / "roads"
    folder.mkdir()
    shapes = gpd.GeoDataFrame({"maxspeed": ["70"]}, geometry=[shapely.LineString(
        [(8.52, 47.3), (8.521, 47.301), (8.522, 47.3)])], crs="OGC:CRS84")
    shapes.to_parquet(folder / "a.parquet")
    _geoparquet_with_one_point_line(folder / "b.parquet")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = curvescan.scan(str(folder))
    unread = [w for w in caught if "geometries could not be read" in str(w.message)]
    assert [str(w.message)[:2] for w in unread] == ["1 "]
    assert res.run["input_features"] == 3
    assert [s["reason"] for s in res.run["skipped"]] == ["empty or missing geometry"]


@pytest.mark.parametrize("ext", ["gpkg", "geojson"])
def test_a_src_fid_field_of_the_file_is_set_aside(tmp_path, ext):
    """A layer with a field named src_fid (here 7 on every row) read through GDAL: the
    feature ids stay the ids, the field is kept as src_fid_input, with a warning."""
    frame = frame_from_lines_utm(3)
    frame["src_fid"] = 7
    frame["curve_id"] = 7
    path = tmp_path / f"roads.{ext}"
    frame.to_file(path)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = curvescan.scan(str(path))
    assert any("has a field src_fid; read as 'src_fid_input'" in str(w.message)
               for w in caught)
    covered, skipped = _accounted(res)
    first = 1 if ext == "gpkg" else 0
    assert covered == {first, first + 1, first + 2} and not skipped


def frame_from_lines_utm(n: int) -> gpd.GeoDataFrame:
    th = np.linspace(0.0, np.pi / 2, 20)
    arc = np.c_[5e5 + 100.0 * np.sin(th), 5e6 + 100.0 * (1.0 - np.cos(th))]
    return gpd.GeoDataFrame(geometry=[shapely.LineString(arc + 1000.0 * k) for k in range(n)],
                            crs="EPSG:32632")


@pytest.mark.parametrize("index,src_fid,want", [
    ([3, 3, 5, 5], None, {0, 1, 2, 3}),          # a repeated index (pd.concat)
    ([-1, -2, 5, 6], None, {-1, -2, 5, 6}),      # an integer index is the ids
    (None, [1.5, 2.0, np.nan, 4.0], {0, 1, 2, 3}),
    (None, ["a", "b", "c", "d"], {0, 1, 2, 3}),
    (None, [1, 1, 2, 2], {0, 1, 2, 3}),
    (None, [10.0, 11.0, 12.0, 13.0], {10, 11, 12, 13}),  # whole numbers: used as the ids
])
def test_frame_ids_are_unique_for_every_row(index, src_fid, want):
    frame = frame_from_lines_utm(4)
    if index is not None:
        frame.index = index
    if src_fid is not None:
        frame["src_fid"] = src_fid
    covered, skipped = _accounted(_quiet_scan(frame))
    assert covered == want and not skipped


def test_partitioned_geoparquet_with_a_src_fid_field_that_is_no_id(tmp_path):
    folder = tmp_path / "roads"
    folder.mkdir()
    frame = frame_from_lines_utm(6)
    frame["src_fid"] = 7
    for k in range(2):
        frame.iloc[3 * k:3 * k + 3].to_parquet(folder / f"part{k}.parquet")
    covered, skipped = _accounted(_quiet_scan(str(folder), partition_features=10))
    assert covered == set(range(6)) and not skipped


def test_frame_without_an_active_geometry_is_one_clear_error():
    frame = gpd.GeoDataFrame({"maxspeed": ["50"]})
    with pytest.raises(curvescan.InputError, match="no active geometry column"):
        curvescan.scan(frame)
