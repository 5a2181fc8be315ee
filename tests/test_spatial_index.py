"""The spatial indexes curvescan builds after writing (curvescan.io.rtree).

References: SQLite's own ``rtreecheck()`` (structure of the tree), GDAL's spatial filter
read through pyogrio ``bbox=`` against a brute-force intersection test with shapely, and
against the same layer written with GDAL's own index.
"""

from __future__ import annotations

import sqlite3
import warnings

import numpy as np
import pyarrow as pa
import pyogrio
import pytest
import shapely

import curvescan
from curvescan.io import rtree

GEOMETRY_LAYERS = ("curves", "segments", "hazards", "winter")


def _network():
    from .test_parallel import _network as network

    return network(seed=5, n_alignments=12)


def _boxes(bounds, rng, n=6):
    """Query boxes of several sizes inside ``bounds`` (minx, miny, maxx, maxy)."""
    x0, y0, x1, y1 = bounds
    out = [(x0 - 1, y0 - 1, x1 + 1, y1 + 1)]
    for _ in range(n):
        w, h = (x1 - x0) * rng.uniform(0.02, 0.4), (y1 - y0) * rng.uniform(0.02, 0.4)
        cx, cy = rng.uniform(x0, x1), rng.uniform(y0, y1)
        out.append((cx - w, cy - h, cx + w, cy + h))
    return out


def check_spatial_indexes(path, layers=GEOMETRY_LAYERS, reference=None):
    """Every layer: a valid RTree holding every non-empty geometry, and ``bbox=`` reads
    that give the rows a brute-force intersection test gives (and the rows the same layer
    gives from ``reference``, a file indexed by GDAL)."""
    rng = np.random.default_rng(1)
    con = sqlite3.connect(str(path))
    try:
        ext = {t for (t,) in con.execute("SELECT table_name FROM gpkg_extensions WHERE "
                                         "extension_name = 'gpkg_rtree_index'")}
        columns = dict(con.execute("SELECT table_name, column_name FROM gpkg_geometry_columns"))
        for name in layers:
            assert name in ext, name
            table = f"rtree_{name}_{columns[name]}"
            assert con.execute(f"SELECT rtreecheck('{table}')").fetchone()[0] == "ok", name
            n_index = con.execute(f'SELECT count(*) FROM "{table}"').fetchone()[0]
            triggers = con.execute("SELECT count(*) FROM sqlite_master WHERE type = 'trigger' "
                                   f"AND name LIKE '{table}_%'").fetchone()[0]
            assert triggers == 6, name
            frame = pyogrio.read_dataframe(path, layer=name, fid_as_index=True)
            present = ~(frame.geometry.isna() | frame.geometry.is_empty)
            assert n_index == int(present.sum()), name
    finally:
        con.close()
    for name in layers:
        info = pyogrio.read_info(path, layer=name)
        assert info["capabilities"]["fast_spatial_filter"], name
        frame = pyogrio.read_dataframe(path, layer=name, fid_as_index=True)
        if not len(frame):
            continue
        for box in _boxes(frame.total_bounds, rng):
            got = pyogrio.read_dataframe(path, layer=name, bbox=box, columns=[],
                                         fid_as_index=True)
            # GDAL keeps the index's candidates that intersect the box
            hit = shapely.intersects(frame.geometry.values, shapely.box(*box))
            assert sorted(got.index) == sorted(frame.index[hit]), (name, box)
            if reference is not None:
                ref = pyogrio.read_dataframe(reference, layer=name, bbox=box, columns=[],
                                             fid_as_index=True)
                assert sorted(got.index) == sorted(ref.index), (name, box)


@pytest.fixture(scope="module")
def scanned(tmp_path_factory):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return curvescan.scan(_network(), speed_field="maxspeed")


def _gdal_indexed(result, path):
    """The result's geometry layers written by GDAL with its own spatial index."""
    for name in GEOMETRY_LAYERS:
        frame = result.extra[name] if name in result.extra else getattr(result, name)
        pyogrio.write_dataframe(frame, path, layer=name, driver="GPKG",
                                append=path.exists())
    return path


def test_single_process_output_has_working_spatial_indexes(tmp_path, scanned):
    out = tmp_path / "single.gpkg"
    scanned.to_gpkg(out)
    check_spatial_indexes(out, reference=_gdal_indexed(scanned, tmp_path / "gdal.gpkg"))


def test_streamed_partitioned_output_has_working_spatial_indexes(tmp_path, scanned):
    distributed = pytest.importorskip("distributed")
    from curvescan import parallel
    from curvescan.parallel import scan_to_gpkg

    out = tmp_path / "streamed.gpkg"
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            warnings.catch_warnings():
        warnings.simplefilter("ignore")
        old = parallel.RANK_CHUNK
        parallel.RANK_CHUNK = 9  # ranked layers in several appends
        try:
            scan_to_gpkg(_network(), out, speed_field="maxspeed", partition_features=10,
                         scheduler=cluster.scheduler_address)
        finally:
            parallel.RANK_CHUNK = old
    check_spatial_indexes(out, reference=_gdal_indexed(scanned, tmp_path / "gdal.gpkg"))


def test_index_follows_later_edits(tmp_path, scanned):
    # the triggers of the RTree extension keep the index current when GDAL adds rows
    out = tmp_path / "edited.gpkg"
    scanned.to_gpkg(out)
    far = scanned.curves.iloc[:1].copy()
    far["geometry"] = shapely.linestrings([[(0.0, 0.0), (10.0, 10.0)]])
    far = far.set_crs(scanned.curves.crs, allow_override=True)
    pyogrio.write_dataframe(far, out, layer="curves", append=True)
    got = pyogrio.read_dataframe(out, layer="curves", bbox=(-1, -1, 11, 11))
    assert len(got) == 1
    check_spatial_indexes(out, layers=["curves"])


def test_empty_layer_gets_an_index(tmp_path):
    from curvescan.io.vector import write_layers
    import geopandas as gpd

    empty = gpd.GeoDataFrame({"a": np.zeros(0)}, geometry=gpd.GeoSeries([], crs="EPSG:3857"))
    one = gpd.GeoDataFrame({"a": [1.0]}, geometry=[shapely.LineString([(0, 0), (1, 2)])],
                           crs="EPSG:3857")
    out = write_layers(tmp_path / "e.gpkg", {"one": one, "empty": empty})
    check_spatial_indexes(out, layers=["one", "empty"])


def test_index_from_envelopes_in_the_file(tmp_path):
    # a layer whose rows were not recorded while written (pyogrio's own conversion, rows
    # deleted, points without an envelope in their header): the envelopes are read back
    import geopandas as gpd

    rng = np.random.default_rng(3)
    lines = [shapely.LineString(rng.uniform(0, 100, (4, 2))) for _ in range(300)]
    lines[5], lines[9] = shapely.LineString(), None
    frame = gpd.GeoDataFrame({"v": np.arange(300.0)}, geometry=lines, crs="EPSG:3857")
    points = gpd.GeoDataFrame({"v": np.arange(50.0)},
                              geometry=shapely.points(rng.uniform(0, 100, (50, 2))),
                              crs="EPSG:3857")
    out = tmp_path / "r.gpkg"
    for name, layer in (("lines", frame), ("points", points)):
        pyogrio.write_dataframe(layer, out, layer=name, append=out.exists(),
                                layer_options={"SPATIAL_INDEX": "NO"})
    con = sqlite3.connect(out)
    with con:
        con.execute("DELETE FROM lines WHERE v IN (1, 2, 3)")
    con.close()
    assert sorted(rtree.add_spatial_indexes(out)) == ["lines", "points"]
    check_spatial_indexes(out, layers=["lines", "points"])


def _wkb_cases():
    rng = np.random.default_rng(4)
    geoms = [shapely.LineString(rng.normal(size=(int(k), 2)) * 1000 + 5e5)
             for k in rng.integers(2, 40, 50)]
    geoms += [shapely.MultiLineString([rng.normal(size=(3, 2)), rng.normal(size=(5, 2))]),
              shapely.LineString(rng.normal(size=(4, 3))),          # Z
              shapely.MultiLineString([rng.normal(size=(3, 3))]),   # multi Z
              shapely.LineString(), shapely.MultiLineString(), None,
              shapely.Point(3, 4), shapely.Polygon([(0, 0), (1, 0), (1, 1)])]
    values = [None if g is None else shapely.to_wkb(g) for g in geoms]
    return geoms, pa.array(values, type=pa.binary())


@pytest.mark.parametrize("compiled", [True, False])
def test_wkb_envelopes_are_shapely_bounds(monkeypatch, compiled):
    from curvescan.geometry import _kernels as kn

    if compiled and not kn.HAVE_NUMBA:
        pytest.skip("numba not installed")
    monkeypatch.setattr(kn, "ENABLED", compiled)
    geoms, arr = _wkb_cases()
    want = shapely.bounds(np.array(geoms, dtype=object))[:, [0, 2, 1, 3]]
    got = rtree.wkb_envelopes(arr)
    np.testing.assert_array_equal(got, want)
    # a slice of the array (non-zero Arrow offset) gives the rows of the slice
    np.testing.assert_array_equal(rtree.wkb_envelopes(arr.slice(3, 20)), want[3:23])


def test_bulk_built_tree_answers_like_a_scan():
    # enough boxes for three levels (51 * 51 < n); SQLite checks the structure, queries
    # through SQLite's R*Tree give the rows a brute-force test gives
    rng = np.random.default_rng(2)
    n = 9000
    lo = rng.uniform(0, 1e4, (n, 2))
    size = rng.exponential(30, (n, 2))
    boxes = np.column_stack([lo[:, 0], lo[:, 0] + size[:, 0], lo[:, 1], lo[:, 1] + size[:, 1]])
    ids = rng.permutation(n).astype(np.int64) * 3 + 7  # not consecutive, not sorted
    con = sqlite3.connect(":memory:")
    con.execute("CREATE VIRTUAL TABLE r USING rtree(id, minx, maxx, miny, maxy)")
    with con:
        rtree.build_rtree(con, "r", ids, boxes)
    assert con.execute("SELECT rtreecheck('r')").fetchone()[0] == "ok"
    depth = int.from_bytes(con.execute("SELECT data FROM r_node WHERE nodeno = 1")
                           .fetchone()[0][:2], "big")
    assert depth == 2
    for q in _boxes((0, 0, 1e4, 1e4), rng, n=20):
        got = {i for (i,) in con.execute("SELECT id FROM r WHERE minx <= ? AND maxx >= ? AND "
                                         "miny <= ? AND maxy >= ?", (q[2], q[0], q[3], q[1]))}
        hit = ((boxes[:, 0] <= q[2]) & (boxes[:, 1] >= q[0]) & (boxes[:, 2] <= q[3])
               & (boxes[:, 3] >= q[1]))
        want = set(ids[hit].tolist())
        # float32 boxes are rounded outward: they may add boxes touching the query within
        # float32 spacing, never lose one
        assert want <= got
        extra = got - want
        assert len(extra) <= 2, extra
    # and SQLite can still edit the tree it did not build
    with con:
        gone = ids[rng.choice(n, 500, replace=False)]
        con.executemany("DELETE FROM r WHERE id = ?", [(int(i),) for i in gone])
        con.execute("INSERT INTO r VALUES (1, 0, 1, 0, 1)")
    assert con.execute("SELECT rtreecheck('r')").fetchone()[0] == "ok"
    assert con.execute("SELECT count(*) FROM r").fetchone()[0] == n - 500 + 1


def test_a_tree_that_fails_sqlites_check_is_rebuilt_row_by_row(monkeypatch):
    """Should the bulk-built tree ever fail SQLite's rtreecheck, the index is rebuilt through
    SQLite's own inserts (and a warning recorded), never left broken."""
    import sqlite3
    import warnings

    from curvescan.io import rtree as rt

    rng = np.random.default_rng(3)
    lo = rng.uniform(0, 1000, (500, 2))
    boxes = np.column_stack([lo[:, 0], lo[:, 0] + 5, lo[:, 1], lo[:, 1] + 5])
    con = sqlite3.connect(":memory:")
    con.execute("CREATE VIRTUAL TABLE r USING rtree(id, minx, maxx, miny, maxy)")
    real_pack = rt._pack

    def broken_pack(ids, b):  # a parent cell that does not cover its child node
        levels = real_pack(ids, b)
        parent_ids, parent_boxes, parent_node = levels[1]
        parent_boxes = parent_boxes.copy()
        parent_boxes[0] = [0.0, 0.1, 0.0, 0.1]
        return [levels[0], (parent_ids, parent_boxes, parent_node)] + list(levels[2:])

    monkeypatch.setattr(rt, "_pack", broken_pack)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        rt.build_rtree(con, "r", np.arange(1, 501), boxes)
    assert any("rebuilt row by row" in str(w.message) for w in caught)
    assert con.execute("SELECT rtreecheck('r')").fetchone()[0] == "ok"
    got = sorted(r[0] for r in con.execute(
        "SELECT id FROM r WHERE maxx >= 100 AND minx <= 300 AND maxy >= 100 AND miny <= 300"))
    want = sorted((np.flatnonzero((boxes[:, 1] >= 100) & (boxes[:, 0] <= 300)
                                  & (boxes[:, 3] >= 100) & (boxes[:, 2] <= 300)) + 1).tolist())
    assert got == want


def _recorded_layer(tmp_path, n=3000, seed=6):
    """A GeoPackage layer ``lines`` written without an index, with its envelopes recorded
    by an :class:`~curvescan.io.rtree.IndexBuilder` keeping them in a folder."""
    import geopandas as gpd

    rng = np.random.default_rng(seed)
    start = rng.uniform(0, 5e4, (n, 2))
    lines = [shapely.LineString(p + np.cumsum(rng.normal(0, 30, (4, 2)), axis=0))
             for p in start]
    lines[7] = shapely.LineString()  # an empty geometry: no entry in the index
    frame = gpd.GeoDataFrame({"v": np.arange(float(n))}, geometry=lines, crs="EPSG:3857")
    out = tmp_path / "p.gpkg"
    folder = tmp_path / "spill"
    folder.mkdir()
    index = rtree.IndexBuilder(str(folder))
    table = pa.table({"v": frame["v"].to_numpy(), "geometry": shapely.to_wkb(lines)})
    for a in range(0, n, 1000):  # appended in parts, as partitions come in
        part = table.slice(a, 1000)
        pyogrio.write_arrow(part, out, layer="lines", driver="GPKG", geometry_name="geometry",
                            geometry_type="LineString", crs="EPSG:3857",
                            append=out.exists(), layer_options={"SPATIAL_INDEX": "NO"})
        index.add("lines", part.column("geometry"))
    return out, index, frame


def _tree_tables(path, rtree_table):
    con = sqlite3.connect(str(path))
    try:
        return {part: con.execute(f'SELECT * FROM "{rtree_table}{part}" ORDER BY 1').fetchall()
                for part in ("_node", "_rowid", "_parent")}
    finally:
        con.close()


def test_a_tree_built_in_another_file_is_copied_into_the_geopackage(tmp_path):
    # the tree a worker process builds from the envelope file (while the client writes
    # other layers) is the tree the close would have built in place, table for table;
    # SQLite's check and GDAL's spatial filter accept it
    out, index, frame = _recorded_layer(tmp_path)
    args = index.prebuild_args("lines")
    assert args is not None and args[2] == len(frame)
    tree_file, rows, bulk = rtree.build_tree_file(*args)
    assert bulk and rows == len(frame)
    index.adopt("lines", tree_file, rows)
    copied = []
    real = rtree._copy_tree
    rtree._copy_tree = lambda *a: (copied.append(a[1]), real(*a))[1]
    try:
        assert index.build(str(out)) == ["lines"]
    finally:
        rtree._copy_tree = real
    assert copied == ["rtree_lines_geom"]
    check_spatial_indexes(out, layers=["lines"])
    # the same layer indexed in place gives the same tables
    in_place = tmp_path / "in_place.gpkg"
    in_place.write_bytes(out.read_bytes())
    con = sqlite3.connect(str(in_place))
    with con:
        con.execute("DROP TABLE rtree_lines_geom")
        con.execute("DELETE FROM gpkg_extensions WHERE table_name = 'lines'")
        for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger' "
                                   "AND name LIKE 'rtree_lines_geom_%'").fetchall():
            con.execute(f'DROP TRIGGER "{name}"')
    con.close()
    assert rtree.add_spatial_indexes(str(in_place), known=rtree.IndexBuilder()) == ["lines"]
    assert _tree_tables(out, "rtree_lines_geom") == _tree_tables(in_place, "rtree_lines_geom")


def test_a_tree_of_other_rows_is_not_adopted(tmp_path):
    # a tree whose row count is not the layer's is ignored (the close builds the index
    # itself), and an envelope file of another length is a clear error
    out, index, frame = _recorded_layer(tmp_path, n=600)
    envelope_file, tree_file, rows = index.prebuild_args("lines")
    with pytest.raises(ValueError, match="600 envelopes, expected 601"):
        rtree.build_tree_file(envelope_file, tree_file, rows + 1)
    rtree.build_tree_file(envelope_file, tree_file, rows)
    index.adopt("lines", tree_file, rows - 1)
    assert index.prebuilt == {}
    assert index.build(str(out)) == ["lines"]
    check_spatial_indexes(out, layers=["lines"])
    # no folder, no rows: nothing to build elsewhere
    assert rtree.IndexBuilder().prebuild_args("lines") is None
    assert index.prebuild_args("other") is None
