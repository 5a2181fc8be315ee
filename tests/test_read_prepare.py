"""Read and prepare: formats, CRS handling, cleaning and chain joining, bad input."""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely

from curvescan.config import make_config
from curvescan.errors import CRSError, DataQualityWarning, DataSourceError, InputError
from curvescan.prepare import prepare
from curvescan.read import load

from .conftest import UTM, frame_from_lines, simple_curve


def _chains(frame, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return prepare(load(frame, make_config(**kw)), make_config(**kw))


@pytest.mark.parametrize("driver,ext", [("GPKG", "gpkg"), ("ESRI Shapefile", "shp"),
                                        ("GeoJSON", "geojson"), ("FlatGeobuf", "fgb"),
                                        ("Parquet", "parquet")])
def test_reads_every_format(tmp_path, curve_layer, driver, ext):
    path = tmp_path / f"roads.{ext}"
    if driver == "Parquet":
        curve_layer.to_parquet(path)
    else:
        curve_layer.to_file(path, driver=driver)
    frame = load(str(path), make_config())
    assert len(frame) == 1
    assert "src_fid" in frame.columns
    assert frame.crs.to_epsg() == 32632


def test_gpx_tracks(tmp_path):
    lon = np.linspace(10.0, 10.01, 20)
    lat = 46.0 + 0.002 * np.sin(np.linspace(0, 3, 20))
    trkpts = "".join(f'<trkpt lat="{a}" lon="{o}"></trkpt>' for o, a in zip(lon, lat))
    gpx = ('<?xml version="1.0"?><gpx version="1.1" creator="test" '
           'xmlns="http://www.topografix.com/GPX/1/1"><wpt lat="46" lon="10"></wpt>'
           f'<trk><name>t</name><trkseg>{trkpts}</trkseg></trk></gpx>')
    path = tmp_path / "route.gpx"
    path.write_text(gpx)
    frame = load(str(path), make_config())
    assert len(frame) == 1
    assert frame.geometry.iloc[0].geom_type == "MultiLineString"


def test_layer_choice_and_unknown_layer(tmp_path, curve_layer):
    path = tmp_path / "two.gpkg"
    curve_layer.to_file(path, layer="a")
    curve_layer.to_file(path, layer="b")
    with pytest.warns(DataQualityWarning, match="several line layers"):
        load(str(path), make_config())
    assert len(load(str(path), make_config(layer="b"))) == 1
    with pytest.raises(InputError, match="layer 'c' not found.*a, b"):
        load(str(path), make_config(layer="c"))


def test_missing_file():
    with pytest.raises(DataSourceError, match="input not found"):
        load("/nonexistent/roads.gpkg", make_config())


def test_unreadable_format(tmp_path):
    path = tmp_path / "broken.gpkg"
    path.write_text("this is not a geopackage")
    with pytest.raises(DataSourceError, match="cannot open"):
        load(str(path), make_config())


def test_points_only_layer(tmp_path):
    frame = gpd.GeoDataFrame(geometry=[shapely.Point(0, 0)], crs=UTM)
    with pytest.raises(InputError, match="no usable line geometries"):
        _chains(frame)


def test_missing_crs_refused_and_assumed(curve_layer):
    bare = curve_layer.set_crs(None, allow_override=True)
    with pytest.raises(CRSError, match="no CRS.*--assume-crs"):
        load(bare, make_config())
    assert load(bare, make_config(assume_crs="EPSG:32632")).crs.to_epsg() == 32632
    with pytest.raises(CRSError, match="not a valid CRS"):
        load(bare, make_config(assume_crs="EPSG:99999999"))


def test_crs_override_must_be_metric(curve_layer):
    with pytest.raises(CRSError, match="projected CRS in metres"):
        _chains(curve_layer, crs="EPSG:4326")


def test_split_and_reversed_features_join_into_one_chain():
    al = simple_curve()
    s = np.append(np.arange(0, al.length_m, 10.0), al.length_m)
    xy = al.points(s)
    parts = [xy[:20], xy[19:35][::-1], xy[34:]]
    chains = _chains(frame_from_lines(parts))
    assert chains.n_chains == 1
    assert sorted(chains.rows[0].tolist()) == [0, 1, 2]
    np.testing.assert_allclose(chains.lengths[0], _chains(frame_from_lines([xy])).lengths[0])


def test_join_field_keeps_different_roads_apart():
    a = np.array([[0, 0], [100, 0]])
    b = np.array([[100, 0], [200, 10]])
    assert _chains(frame_from_lines([a, b], ref=["A", "A"]), join_field="ref").n_chains == 1
    assert _chains(frame_from_lines([a, b], ref=["A", "B"]), join_field="ref").n_chains == 2


def test_junction_of_three_joins_the_straight_through_road():
    """A T junction: the through road is one chain, the side road its own; with
    ``through_junction_deg=0`` all three stay apart (joins at two-end nodes only)."""
    lines = [np.array([[0, 0], [100, 0]]), np.array([[100, 0], [200, 0]]),
             np.array([[100, 0], [100, 100]])]
    chains = _chains(frame_from_lines(lines))
    assert chains.n_chains == 2
    assert sorted(np.round(chains.lengths, 6)) == [100.0, 200.0]
    assert _chains(frame_from_lines(lines), through_junction_deg=0.0).n_chains == 3


def test_junction_pairs_straightest_ends_and_respects_the_angle():
    """Four ends at a crossroads pair into the two straight roads; a Y whose branches both
    turn more than the limit is not joined."""
    cross = [np.array([[-100, 0], [0, 0]]), np.array([[0, 0], [100, 2]]),
             np.array([[0, -100], [0, 0]]), np.array([[0, 0], [-3, 100]])]
    chains = _chains(frame_from_lines(cross))
    assert chains.n_chains == 2
    wide_y = [np.array([[-100, 0], [0, 0]]), np.array([[0, 0], [60, 80]]),
              np.array([[0, 0], [60, -80]])]  # each branch turns 53 degrees
    assert _chains(frame_from_lines(wide_y)).n_chains == 3
    assert _chains(frame_from_lines(wide_y), through_junction_deg=60.0).n_chains == 2


def test_side_road_joining_mid_curve_does_not_cut_the_curve():
    """A curve split where a side road joins it is found as one curve with its radius."""
    from curvescan import scan
    from curvescan.synthetic import vertices

    al = simple_curve(150.0, 60.0, spiral_m=0.0, tangent_m=200.0)
    xy, _ = vertices(al, spacing_m=5.0)
    mid = len(xy) // 2
    side = np.array([xy[mid], xy[mid] + 120.0 * np.array([0.6, -0.8])])
    frame = frame_from_lines([xy[:mid + 1], xy[mid:], side])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = scan(frame)
        cut = scan(frame, through_junction_deg=0.0)
    assert len(result.curves) == 1
    assert result.curves["radius_m"].iloc[0] == pytest.approx(150.0, rel=0.002)
    assert len(cut.curves) == 2


def test_ring_split_in_parts_is_one_closed_chain():
    t = np.linspace(0, 2 * np.pi, 61)
    ring = np.c_[50 * np.cos(t), 50 * np.sin(t)]
    chains = _chains(frame_from_lines([ring[:21], ring[20:41], ring[40:]]))
    assert chains.n_chains == 1
    assert bool(chains.closed[0])


def test_degenerate_geometries_recorded_not_lost():
    frame = frame_from_lines([np.array([[0, 0], [100, 0]])] * 1)
    extra = gpd.GeoDataFrame(geometry=[None, shapely.LineString(),
                                       shapely.LineString([(5, 5), (5, 5)]),
                                       shapely.Point(1, 1)], crs=UTM)
    frame = gpd.GeoDataFrame(
        geometry=list(frame.geometry) + list(extra.geometry), crs=UTM)
    with pytest.warns(DataQualityWarning, match="4 input features or parts skipped"):
        chains = prepare(load(frame, make_config()), make_config())
    reasons = {s["src_fid"]: s["reason"] for s in chains.skipped}
    assert set(reasons) == {1, 2, 3, 4}
    assert "empty" in reasons[1] and "zero length" in reasons[3] and "not a line" in reasons[4]


def test_z_dropped_multipart_exploded_spike_removed():
    zline = shapely.LineString([(0, 0, 5), (100, 0, 6), (200, 0, 7)])
    multi = shapely.MultiLineString([[(0, 50), (100, 50)], [(300, 50), (400, 50)]])
    spike = shapely.LineString([(0, 100), (50, 100), (100, 100), (60, 100.5), (150, 100)])
    frame = gpd.GeoDataFrame(geometry=[zline, multi, spike], crs=UTM)
    frame = frame.set_geometry(frame.translate(600000, 5100000))
    chains = _chains(frame)
    assert chains.coords.shape[1] == 2
    assert chains.n_chains == 4
    lengths = sorted(np.round(chains.lengths, 1))
    assert lengths[-1] == pytest.approx(200.0, abs=0.2)  # spike vertex (100,100) removed


def test_duplicated_feature_is_not_joined_back_onto_itself():
    """Two copies of one road (or a copy digitised backwards) meet at both ends; joining
    them would make the chain double back on itself."""
    al = simple_curve()
    s = np.append(np.arange(0, al.length_m, 10.0), al.length_m)
    xy = al.points(s)
    for copy in (xy.copy(), xy[::-1].copy()):
        # kept (--drop-duplicates off): two chains, not one doubling back
        chains = _chains(frame_from_lines([xy, copy]), drop_duplicates=False)
        assert chains.n_chains == 2
        assert not chains.closed.any()
        # by default the copy is skipped, with the feature it repeats
        chains = _chains(frame_from_lines([xy, copy]))
        assert chains.n_chains == 1
        assert chains.skipped == [{"src_fid": 1, "reason": "duplicate of src_fid 0"}]


def test_duplicates_are_exact_repeats_only():
    """Same vertices either way round are a duplicate; the two sides of an island between
    the same two nodes (same length, same ends), a line 1 cm aside or one vertex more
    are not. A repeated part of a multi-line feature is skipped like a feature."""
    th = np.linspace(0.0, np.pi, 19)
    upper = np.c_[6e5 + 50.0 * np.cos(th), 5.1e6 + 50.0 * np.sin(th)]
    lower = upper * [1.0, -1.0] + [0.0, 2 * 5.1e6]
    aside = upper + [0.0, 0.01]
    denser = np.insert(upper, 1, 0.5 * (upper[0] + upper[1]), axis=0)
    frame = frame_from_lines([upper, lower, aside, denser, upper[::-1]])
    chains = _chains(frame, join_tolerance_m=0.0)
    assert chains.skipped == [{"src_fid": 4, "reason": "duplicate of src_fid 0"}]
    import shapely
    multi = frame_from_lines([upper])
    multi.loc[0, "geometry"] = shapely.MultiLineString([upper, lower, upper[::-1]])
    chains = _chains(multi, join_tolerance_m=0.0)
    assert chains.skipped == [{"src_fid": 0, "reason": "duplicate of src_fid 0"}]


def _spikes_reference(xy, vidx, limit_rad, passes=3):
    """The spike rule with the turn computed at every vertex (no pre-filter)."""
    for _ in range(passes):
        if len(xy) < 3:
            break
        d = np.diff(xy, axis=0)
        ang = np.arctan2(d[:, 1], d[:, 0])
        turn = np.abs((ang[1:] - ang[:-1] + np.pi) % (2 * np.pi) - np.pi)
        interior = (vidx[1:-1] == vidx[:-2]) & (vidx[1:-1] == vidx[2:])
        spike = np.zeros(len(xy), dtype=bool)
        spike[1:-1] = interior & (turn > limit_rad)
        if not spike.any():
            break
        spike[1:] &= ~spike[:-1]
        xy, vidx = xy[~spike], vidx[~spike]
    return xy, vidx


@pytest.mark.parametrize("limit_deg", [90.0, 120.0, 150.0, 179.0])
def test_spike_filter_equals_turn_at_every_vertex(limit_deg):
    from curvescan.prepare import _remove_spikes

    rng = np.random.default_rng(3)
    # random walks with sharp reversals and exact right angles
    steps = rng.normal(size=(4000, 2))
    steps[::7] *= -3.0
    steps[::11] = steps[::11][:, ::-1] * [1, -1]
    xy = np.cumsum(steps, axis=0)
    vidx = np.repeat(np.arange(40), 100)
    got = _remove_spikes(xy, vidx, np.radians(limit_deg))
    want = _spikes_reference(xy, vidx, np.radians(limit_deg))
    assert len(got[0]) < len(xy)  # the case removes spikes
    np.testing.assert_array_equal(got[0], want[0])
    np.testing.assert_array_equal(got[1], want[1])


def test_chain_rows_index_and_slice_like_an_array_per_chain():
    from curvescan.prepare import RaggedRows

    rows = RaggedRows(np.array([4, 5, 1, 7, 8, 9]), np.array([0, 2, 3, 6]))
    assert len(rows) == 3
    assert rows[0].tolist() == [4, 5] and rows[-1].tolist() == [7, 8, 9]
    part = rows[1:3]
    assert len(part) == 2 and part[0].tolist() == [1] and part[1].tolist() == [7, 8, 9]
    assert [r.tolist() for r in rows[2:1]] == []
    assert [r.tolist() for r in rows] == [[4, 5], [1], [7, 8, 9]]
    with pytest.raises(IndexError):
        rows[3]


def test_geographic_input_projected_as_coordinates_equals_projected_geometries():
    al = simple_curve()
    xy = al.points(np.arange(0, al.length_m, 7.0)) + [500000.0, 5500000.0]
    utm = frame_from_lines([xy[:40], xy[39:]])
    geo = utm.to_crs("EPSG:4326")
    chains = prepare(load(geo, make_config()), make_config())
    # the same coordinates projected as geometries, then prepared in that CRS
    again = geo.to_crs(chains.crs)
    ref = prepare(load(again, make_config()), make_config(crs=chains.crs.to_wkt()))
    np.testing.assert_array_equal(chains.coords, ref.coords)
    np.testing.assert_array_equal(chains.measure, ref.measure)


def test_reused_segment_lengths_give_the_measures_computed_afresh():
    """prepare() reuses the segment and part lengths of the cleaning step for the chains'
    measures and the part screening; computing them afresh must give the same bits."""
    from curvescan import prepare as P

    rng = np.random.default_rng(11)
    lines = []
    for k in range(60):  # wiggly roads split into parts, some digitised backwards
        steps = rng.normal(size=(int(rng.integers(5, 40)), 2)) * [7.0, 3.0] + [10.0, 0.0]
        xy = np.cumsum(steps, axis=0) + [0.0, 300.0 * k]
        xy[3] = xy[2]  # a repeated vertex
        cuts = np.sort(rng.choice(np.arange(2, len(xy) - 2), 2, replace=False))
        for a, b in ((0, cuts[0] + 1), (cuts[0], cuts[1] + 1), (cuts[1], len(xy))):
            piece = xy[a:b] + rng.normal(size=2) * 0.1 * (a > 0)  # ends meet within 0.5 m
            lines.append(piece[::-1] if rng.random() < 0.4 else piece)
    lines.append(lines[5].copy())  # a duplicate
    lines.append(np.array([[0.0, -50.0], [0.0004, -50.0]]))  # shorter than a piece
    frame = load(frame_from_lines(lines), make_config())
    config = make_config()
    chains = prepare(frame, config)

    geoms = np.asarray(frame.geometry.values, dtype=object)
    parts, part_row, _ = P._clean_parts(geoms, frame, config)
    screened = P.screen_parts(parts, frame["src_fid"].to_numpy()[part_row],
                              P.join_groups(frame, config, part_row), config)
    assert screened.dropped.sum() == 1
    parts, part_row = P.drop_parts(parts, part_row, screened.dropped)
    fresh = P._join(parts, part_row, screened.group, config.join_tolerance_m,
                    config.through_junction_deg)
    assert chains.n_chains < len(lines) - 2  # parts were joined
    assert chains.vertex_reversed.any()
    for name in ("coords", "offsets", "measure", "vertex_row", "vertex_reversed", "closed"):
        got, want = getattr(chains, name), getattr(fresh, name)
        assert got.dtype == want.dtype and got.tobytes() == want.tobytes(), name


def test_rows_moves_the_same_values_as_row_indexing():
    from curvescan.prepare import _rows

    rng = np.random.default_rng(5)
    xy = rng.normal(size=(1000, 2))
    xy[7] = [np.nan, -0.0]
    mask = rng.random(1000) < 0.7
    index = rng.integers(0, 1000, 3000)
    for key in (mask, index, np.zeros(0, dtype=np.int64)):
        assert _rows(xy, key).tobytes() == xy[key].tobytes()
        assert _rows(xy, key).shape == xy[key].shape
    strided = np.asfortranarray(xy)  # not C-contiguous: plain indexing
    assert _rows(strided, index).tobytes() == np.ascontiguousarray(xy[index]).tobytes()
