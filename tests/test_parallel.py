"""Partitioned and distributed scans give the same curves as a single-process scan.

The expected values are the single-process scan's own layers: the partitioned path must
reproduce them (ids aside), including chains whose features lie in different partitions,
junctions where three features meet, and a loop that ends on a junction.
"""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from curvescan import synthetic
from curvescan.errors import InputError
from curvescan.pipeline import scan

distributed = pytest.importorskip("distributed")
pytest.importorskip("dask_geopandas")

CRS = "EPSG:32633"
IDS = ["curve_id", "segment_id", "chain_id", "severity_rank", "winter_rank"]


def _network(seed: int = 3, n_alignments: int = 24) -> gpd.GeoDataFrame:
    """Synthetic roads split into features, rows shuffled so chains straddle partitions."""
    rng = np.random.default_rng(seed)
    lines = []
    for k in range(n_alignments):
        al = synthetic.random_alignment(rng, n_curves=3)
        xy, _ = synthetic.vertices(al, rng, jitter=(5.0, 30.0), noise_m=0.05)
        xy = xy - xy[0] + [500000.0 + 4000.0 * (k % 6), 5500000.0 + 4000.0 * (k // 6)]
        lines += synthetic.split_features(xy, rng, n_pieces=int(rng.integers(2, 5)))
    # a junction of three features: none of them may be joined to another there
    c = np.array([480000.0, 5480000.0])
    for ang in (0.0, 2.0, 4.0):
        t = np.linspace(0.0, 600.0, 61)
        h = ang + t / 900.0
        lines.append(c + t[:, None] * np.column_stack([np.cos(h), np.sin(h)]))
    # a loop whose two ends meet at a junction with a spur (degree 3: stays open)
    d = np.array([470000.0, 5470000.0])
    th = np.linspace(0.0, 2 * np.pi, 200)[:, None]
    loop = d + 150.0 * np.hstack([np.sin(th), 1.0 - np.cos(th)])
    lines += [loop[:100], loop[99:], np.vstack([d, d + [-400.0, -300.0]])]
    order = rng.permutation(len(lines))
    speeds = rng.choice(["50", "70", "90", "60 mph"], len(lines))
    # a roundabout of four tagged pieces with nearly tangential approaches, in the last
    # rows: its pieces join only each other (tests/test_roundabouts.py)
    from .test_roundabouts import roundabout_network
    rb = roundabout_network(centre=(560000.0, 5560000.0))
    lines += [np.asarray(g.coords) for g in rb.geometry]
    order = np.r_[order, np.arange(len(order), len(lines))]
    speeds = np.r_[speeds, rb["maxspeed"].to_numpy()]
    junction = np.r_[np.full(len(order) - len(rb), None, dtype=object),
                     rb["junction"].to_numpy(dtype=object)]
    return gpd.GeoDataFrame({"maxspeed": speeds, "junction": junction},
                            geometry=[shapely.LineString(lines[i]) for i in order], crs=CRS)


def _canonical(layer: pd.DataFrame) -> pd.DataFrame:
    df = pd.DataFrame(layer).drop(columns=[c for c in IDS if c in layer.columns])
    df["wkt"] = shapely.to_wkt(np.asarray(df.pop("geometry").values), rounding_precision=5)
    key = df["s_start_m"].round(5) if "s_start_m" in df else 0.0
    df = df.assign(_k=key).sort_values(["src_fids", "_k"] + (["kind"] if "kind" in df else []))
    return df.drop(columns="_k").reset_index(drop=True)


def assert_same_layers(a, b) -> None:
    """Every layer of ``a`` equals ``b``'s (ids aside; floats to 1e-7 relative)."""
    pairs = [("curves", a.curves, b.curves), ("segments", a.segments, b.segments),
             ("hazards", a.hazards, b.hazards)]
    pairs += [(k, v, b.extra[k]) for k, v in a.extra.items()]
    for name, x, y in pairs:
        x, y = _canonical(x), _canonical(y)
        assert list(x.columns) == list(y.columns), name
        assert len(x) == len(y), f"{name}: {len(x)} rows against {len(y)}"
        for col in x.columns:
            if x[col].dtype.kind in "fi":
                np.testing.assert_allclose(y[col].to_numpy(float), x[col].to_numpy(float),
                                           rtol=1e-7, atol=1e-7, err_msg=f"{name}.{col}")
            elif col != "wkt":
                assert x[col].astype(str).equals(y[col].astype(str)), f"{name}.{col}"
        gx = shapely.from_wkt(x["wkt"].to_numpy())
        gy = shapely.from_wkt(y["wkt"].to_numpy())
        assert shapely.equals_exact(gx, gy, tolerance=1e-4).all(), f"{name} geometry"


@pytest.fixture(scope="module")
def network() -> gpd.GeoDataFrame:
    return _network()


@pytest.fixture(scope="module")
def single(network):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return scan(network, speed_field="maxspeed")


@pytest.fixture(scope="module")
def cluster():
    # one in-process worker with one thread: no process start-up, deterministic warnings
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as c:
        yield c


def test_network_has_chains_straddling_partitions(network, single):
    # precondition of the equality tests: most chains join features from far-apart rows
    assert single.run["chains"] < len(network) - 20
    assert len(single.curves) > 40
    # ... and the roundabout is one ring, out of the hazards
    assert single.curves["on_ring"].sum() >= 1
    assert not single.hazards["on_ring"].any()


def test_local_cluster_gives_the_single_process_curves(network, single, cluster):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        parted = scan(network, speed_field="maxspeed", partition_features=12,
                      scheduler=cluster.scheduler_address)
    assert parted.run["timings_s"]["partitions"] >= 6
    assert parted.run["chains"] == single.run["chains"]
    assert parted.run["vertices"] == single.run["vertices"]
    assert_same_layers(single, parted)


def test_default_speed_field_is_read_in_every_partition(network, single, cluster):
    # no speed field named: the layer's OSM maxspeed field is read, alike in partitions
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        parted = scan(network, partition_features=12, scheduler=cluster.scheduler_address)
    assert parted.run["posted_speed"]["field"] == "maxspeed"
    assert parted.run["posted_speed"]["parsed"] == single.run["posted_speed"]["parsed"] > 0
    assert_same_layers(single, parted)


def test_flag_at_band_partitioned_equals_single_process(network, single, cluster):
    # the band basis flags a superset of the estimate's hazards, the same in partitions
    kw = dict(speed_field="maxspeed", flag_at="band")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = scan(network, **kw)
        parted = scan(network, partition_features=12, scheduler=cluster.scheduler_address, **kw)
    assert len(one.hazards) > len(single.hazards)
    ids = one.curves.set_index("curve_id")
    assert set(single.hazards["curve_id"]) < set(one.hazards["curve_id"])
    assert (one.hazards["band_position"] == "under_estimate").any()
    assert one.run["assessment"]["flag_at"] == "band"
    assert ids.loc[one.hazards["curve_id"], "mildest_condition"].notna().all()
    assert_same_layers(one, parted)


def test_untagged_roundabout_recognised_alike_in_partitions(network, cluster):
    # without the tag the roundabout is recognised by its shape: globally, over part ends
    # and part shapes, so its pieces in different partitions give the same ring
    ring = np.flatnonzero(network["junction"].notna().to_numpy())
    # two of its pieces moved to the first partition, two left in the last
    rows = np.r_[ring[[1, 3]], np.setdiff1d(np.arange(len(network)), ring[[1, 3]])]
    untagged = network.drop(columns="junction").iloc[rows].reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = scan(untagged, speed_field="maxspeed")
        parted = scan(untagged, speed_field="maxspeed", partition_features=10,
                      scheduler=cluster.scheduler_address)
    assert one.curves["on_ring"].sum() >= 1
    assert not one.hazards["on_ring"].any()
    assert parted.run["timings_s"]["partitions"] >= 6
    assert one.run["roundabout_features_by_shape"] == 4
    assert parted.run["roundabout_features_by_shape"] == 4
    assert_same_layers(one, parted)


def test_duplicates_across_partitions_are_skipped_alike(network, single, cluster):
    # copies of early features (one digitised backwards) at the end of the layer, in
    # another partition: skipped in both paths with the feature they repeat, and the
    # curves are the single-process curves of the layer without them
    import geopandas as gpd

    copies = network.iloc[[3, 7]].copy()
    copies.loc[copies.index[1], "geometry"] = copies.geometry.iloc[1].reverse()
    doubled = gpd.GeoDataFrame(pd.concat([network, copies], ignore_index=True),
                               crs=network.crs)
    n = len(network)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = scan(doubled, speed_field="maxspeed")
        parted = scan(doubled, speed_field="maxspeed", partition_features=12,
                      scheduler=cluster.scheduler_address)
    want = [{"src_fid": n, "reason": "duplicate of src_fid 3"},
            {"src_fid": n + 1, "reason": "duplicate of src_fid 7"}]
    for res in (one, parted):
        got = [s for s in res.run["skipped"] if s["reason"].startswith("duplicate")]
        assert sorted(got, key=lambda s: s["src_fid"]) == want
    assert_same_layers(one, parted)
    assert len(one.curves) == len(single.curves)
    assert np.allclose(np.sort(one.curves["radius_m"]), np.sort(single.curves["radius_m"]))


def test_junction_and_loop_are_not_joined(network, single):
    # three arms at a junction (3 chains); a loop of two halves joined at their middle
    # whose ends meet a spur (degree 3 there: the loop stays open) and the spur: 2 chains
    fids = set()
    for text in single.segments["src_fids"]:
        fids.update(int(t) for t in text.split(","))
    ends = {i for i, g in enumerate(network.geometry) if g.coords[0][0] < 490000.0}
    assert len(ends) == 6
    chains_there = single.segments.loc[
        single.segments["src_fids"].map(lambda t: bool(set(map(int, t.split(","))) & ends)),
        "chain_id"].nunique()
    assert chains_there == 5
    assert single.run["chains"] == parted_chains(single)


def parted_chains(result) -> int:
    return int(result.segments["chain_id"].nunique())


def test_deflection_ignores_other_chains(network, single):
    # the chain of features 40, 53, 56 and 76 scanned alone must give the same curves
    # (a partition holds fewer chains; this once differed by 0.02 deg through round-off
    # in the network-wide station measures deciding whether an edge station counted)
    alone = scan(network.loc[[40, 53, 56, 76]], speed_field="maxspeed")
    a = single.curves.loc[single.curves["src_fids"] == "53,76", "deflection_deg"]
    b = alone.curves.loc[alone.curves["src_fids"] == "53,76", "deflection_deg"]
    assert len(a) == len(b) == 1
    np.testing.assert_allclose(b.to_numpy(), a.to_numpy(), rtol=1e-9)


def test_partitioned_geoparquet_folder(tmp_path, network, cluster):
    folder = tmp_path / "roads"
    folder.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(network)), 4)):
        network.iloc[rows].to_parquet(folder / f"part_{i}.parquet")
    frame = gpd.read_parquet(folder)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        single = scan(frame, speed_field="maxspeed")
        parted = scan(folder, speed_field="maxspeed", scheduler=cluster.scheduler_address)
    assert parted.run["timings_s"]["partitions"] == 4
    assert parted.run["input_features"] == len(network)
    assert_same_layers(single, parted)


def test_one_worker_runs_in_this_process(tmp_path, network):
    # --partition-features without workers or scheduler: a local cluster in this process
    from curvescan import parallel
    from curvescan.config import make_config

    client, cluster = parallel._client(make_config(partition_features=20))
    try:
        assert cluster.processes is False and len(cluster.workers) == 1
    finally:
        client.close()
        cluster.close()


def test_missing_field_in_a_partition_is_one_clear_error(network, cluster):
    with pytest.raises(InputError, match="speed-field"):
        scan(network, speed_field="no_such_field", partition_features=30,
             scheduler=cluster.scheduler_address)


def test_streamed_geopackage_matches_in_memory_counts(tmp_path, network, single, cluster):
    import pyogrio

    from curvescan.algorithms import run_scan

    out = tmp_path / "out.gpkg"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = run_scan(network, out, speed_field="maxspeed", partition_features=15,
                       scheduler=cluster.scheduler_address)
    layers = dict(pyogrio.list_layers(out))
    assert {"curves", "segments", "hazards", "run"} <= set(layers)
    for name in ("curves", "segments", "hazards"):
        assert pyogrio.read_info(out, layer=name)["features"] == len(getattr(single, name))
    assert res.run["curves"] == len(single.curves)
    ids = pyogrio.read_dataframe(out, layer="curves", columns=["curve_id"])["curve_id"]
    assert ids.is_unique


def _gpkg_layers(path) -> dict:
    import pyogrio

    return {name: pyogrio.read_dataframe(path, layer=name)
            for name, _ in pyogrio.list_layers(path) if name != "run"}  # run: times differ


def test_streamed_geopackage_equals_the_in_memory_result(tmp_path, network, single, cluster,
                                                         monkeypatch):
    # same partitions give the same ids, so the streamed file (ranked layers spilled to
    # disk, ranked from their key columns, written in chunks of 7 rows) must hold exactly
    # the rows of the in-memory partitioned result, hazards and winter in rank order
    import pyogrio

    from curvescan import parallel
    from curvescan.algorithms import run_scan
    from curvescan.report import summary_lines

    monkeypatch.setattr(parallel, "RANK_CHUNK", 7)
    monkeypatch.setattr(parallel, "TOP_ROWS", 5)
    kw = dict(speed_field="maxspeed", partition_features=15,
              scheduler=cluster.scheduler_address)
    calls = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        memory = scan(network, **kw)
        memory.to_gpkg(tmp_path / "memory.gpkg")
        single.to_gpkg(tmp_path / "single.gpkg")
        streamed = run_scan(network, tmp_path / "streamed.gpkg",
                            progress=lambda stage, f: calls.append((stage, f)), **kw)
    got, want = _gpkg_layers(tmp_path / "streamed.gpkg"), _gpkg_layers(tmp_path / "memory.gpkg")
    assert list(got) == list(want) == ["curves", "segments", "hazards", "winter",
                                       "layer_styles"]
    assert len(want["hazards"]) > 2 * 7 and len(want["winter"]) > 2 * 7
    for name in want:  # layer styles too (but the time they were written)
        a, b = (x[name].drop(columns=["update_time"], errors="ignore") for x in (got, want))
        pd.testing.assert_frame_equal(a, b, check_exact=True, obj=name)
    assert list(got["hazards"]["severity_rank"]) == list(range(1, len(got["hazards"]) + 1))
    # field types and geometry types as a single-process GeoPackage has them
    for name in ["curves", "segments", "hazards", "winter"]:
        a = pyogrio.read_info(tmp_path / "streamed.gpkg", layer=name)
        b = pyogrio.read_info(tmp_path / "single.gpkg", layer=name)
        assert list(a["fields"]) == list(b["fields"]), name
        assert list(a["dtypes"]) == list(b["dtypes"]), name
        assert a["geometry_type"] == b["geometry_type"], name
    # the result keeps the top rows and the counts; the summary quotes the full count
    assert len(streamed.hazards) == 5
    assert list(streamed.hazards["curve_id"]) == list(memory.hazards["curve_id"][:5])
    assert len(streamed.curves) == len(single.curves)
    assert f"hazard curves: {len(single.hazards)}" in summary_lines(streamed)
    # the progress bar runs over the partitions and the ranked write, up to 1
    fractions = [f for _, f in calls]
    assert fractions == sorted(fractions) and fractions[-1] == pytest.approx(1.0)
    stages = {stage.split(" ")[0] for stage, _ in calls}
    assert {"survey", "partition", "writing"} <= stages


def test_results_handed_over_as_files_give_the_same_geopackage(tmp_path, network,
                                                                monkeypatch):
    # worker processes of a local cluster write their layers to Arrow files that the
    # client maps (ranked layers stay in them as the spill, ids shifted when read); made
    # to happen here with one in-process worker, the file must equal the in-memory result
    import pyogrio

    from curvescan import parallel
    from curvescan.algorithms import run_scan
    from curvescan.io import partitions

    monkeypatch.setattr(parallel, "RANK_CHUNK", 7)
    monkeypatch.setattr(partitions, "_in_process", lambda client: False)
    from curvescan.io import rtree

    opened, given = [], []
    real_open, real_add = partitions.ArrowFile.open, rtree.IndexBuilder.add
    monkeypatch.setattr(partitions.ArrowFile, "open",
                        lambda self: opened.append(self.path) or real_open(self))
    monkeypatch.setattr(rtree.IndexBuilder, "add", lambda self, layer, wkb, boxes=None: (
        given.append((layer, boxes is not None)), real_add(self, layer, wkb, boxes))[1])
    copied, real_copy = [], rtree._copy_tree
    monkeypatch.setattr(rtree, "_copy_tree", lambda con, table, schema: (
        copied.append(table), real_copy(con, table, schema))[1])
    kw = dict(speed_field="maxspeed", partition_features=15)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        scan(network, **kw).to_gpkg(tmp_path / "memory.gpkg")
        assert not opened
        given.clear()
        run_scan(network, tmp_path / "files.gpkg", **kw)
    assert {p.rsplit(".", 2)[-2] for p in opened} >= {"curves", "segments", "hazards",
                                                       "winter"}
    # envelopes for the spatial index came from the workers, ranked layers' via the spill
    assert {layer for layer, _ in given} == {"curves", "segments", "hazards", "winter"}
    assert all(known for _, known in given)
    # the workers built the indexes of the layers complete before the ranked write, and
    # of each ranked layer but the last while the client wrote the next
    assert sorted(copied) == ["rtree_curves_geom", "rtree_hazards_geom",
                              "rtree_segments_geom"]
    from .test_spatial_index import check_spatial_indexes

    check_spatial_indexes(tmp_path / "files.gpkg")
    got, want = _gpkg_layers(tmp_path / "files.gpkg"), _gpkg_layers(tmp_path / "memory.gpkg")
    assert list(got) == list(want)
    for name in ("curves", "hazards"):  # the index finds every row by its own envelope
        for row in (0, len(want[name]) // 2, len(want[name]) - 1):
            box = tuple(want[name].geometry.iloc[row].bounds)
            hits = pyogrio.read_dataframe(tmp_path / "files.gpkg", layer=name, bbox=box,
                                          columns=["curve_id"])["curve_id"]
            assert want[name]["curve_id"].iloc[row] in set(hits)
    assert len(want["hazards"]) > 2 * 7 and len(want["curves"]["curve_id"].unique()) > 30
    for name in want:
        a, b = (x[name].drop(columns=["update_time"], errors="ignore") for x in (got, want))
        pd.testing.assert_frame_equal(a, b, check_exact=True, obj=name)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["files.gpkg", "memory.gpkg"]


@pytest.mark.parametrize("where", ["each build", "the whole task"])
def test_an_index_build_that_fails_on_a_worker_is_made_at_close(tmp_path, network,
                                                                 monkeypatch, where):
    # a worker's index build is an aid, not a step the file depends on: when it fails
    # (every layer's build raises, or the task as a whole), the close builds the indexes
    import curvescan.parallel as parallel
    from curvescan.algorithms import run_scan
    from curvescan.io import partitions, rtree

    monkeypatch.setattr(partitions, "_in_process", lambda client: False)

    def fails(*args):
        raise OSError("worker lost")

    if where == "each build":
        monkeypatch.setattr(rtree, "build_tree_file", fails)
    else:
        monkeypatch.setattr(parallel, "_build_trees", fails)
    copied, real_copy = [], rtree._copy_tree
    monkeypatch.setattr(rtree, "_copy_tree", lambda con, table, schema: (
        copied.append(table), real_copy(con, table, schema))[1])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_scan(network, tmp_path / "out.gpkg", speed_field="maxspeed",
                 partition_features=15)
    from .test_spatial_index import check_spatial_indexes

    check_spatial_indexes(tmp_path / "out.gpkg")
    assert copied == []  # no tree came from a worker: all were built at close
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.gpkg"]


def test_spill_adopts_files_and_shifts_their_ids(tmp_path):
    # a worker's file is kept as it is and its ids shifted as rows are read; tables
    # appended between files are copied (shifted) into files of the spill; types as the
    # first layer's
    import pyarrow as pa

    from curvescan.io.partitions import ArrowLayer, ArrowSpill

    spill = ArrowSpill(tmp_path / "spill", "x")
    (tmp_path / "spill").mkdir()
    want = []
    for k, (start, n, kind) in enumerate(((0, 4, "file"), (4, 3, "table"), (7, 0, "file"),
                                          (7, 5, "table"), (12, 6, "file"))):
        ids = np.arange(n, dtype=np.int32 if k == 3 else np.int64)
        layer = ArrowLayer(pa.table({"id": ids, "v": np.arange(start, start + n) * 1.5}),
                           None, None, boxes=np.arange(start, start + n, dtype=np.float32)
                           .repeat(4).reshape(-1, 4))
        if kind == "file":
            layer = layer.to_file(str(tmp_path / f"w{k}.arrow")).open()
            assert layer.path is not None
        spill.append(layer, {"id": 100 * k, "absent": 5})
        want += [(100 * k + i, (start + i) * 1.5) for i in range(n)]
    assert spill.n == len(want) == 18
    rows = np.array([17, 0, 6, 5, 11, 3, 12, 13, 1, 4, 7])
    got = spill.take(rows).table
    assert got.schema.field("id").type == pa.int64()
    assert list(zip(got["id"].to_pylist(), got["v"].to_pylist())) == [want[r] for r in rows]
    assert spill.take(rows).boxes[:, 2].tolist() == rows.tolist()  # envelopes follow
    assert spill.take(np.array([], dtype=np.int64)).table.num_rows == 0


def test_spill_gives_rows_in_the_order_asked(tmp_path):
    # rows spread over several appended tables come back in any asked order
    import pyarrow as pa

    from curvescan.io.partitions import ArrowLayer, ArrowSpill

    spill = ArrowSpill(tmp_path, "x")
    for start, n in ((0, 5), (5, 0), (5, 7), (12, 3)):
        spill.append(ArrowLayer(pa.table({"v": np.arange(start, start + n)}), None, None))
    rows = np.array([14, 0, 6, 5, 11, 3, 12, 13, 1])
    assert spill.take(rows).table["v"].to_pylist() == rows.tolist()
    assert spill.take(np.array([], dtype=np.int64)).table.num_rows == 0


def test_declared_options_reach_the_command_line():
    from click.testing import CliRunner

    from curvescan.cli.main import main

    text = CliRunner().invoke(main, ["scan", "--help"]).output
    for flag in ("--workers", "--scheduler", "--partition-features"):
        assert flag in text


@pytest.mark.slow
def test_two_worker_processes_give_the_single_process_curves(network, single):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        parted = scan(network, speed_field="maxspeed", workers=2, partition_features=20)
    assert_same_layers(single, parted)


def test_partitioned_warnings_are_the_single_process_warnings(cluster):
    # Counted warnings are added up over the partitions and worded once for the layer;
    # the mixed-units check is made on the whole layer (the mph values sit in rows of a
    # few partitions only, so most partitions alone hold bare numbers only).
    # An AADT field empty in one row warns "1 of 88 features": the partitions without an
    # empty value must count in the total too.
    net = _network()
    net.loc[net.index[:5], "maxspeed"] = "fast"
    mph = net["maxspeed"].eq("60 mph").to_numpy()
    net.loc[mph & (np.arange(len(net)) > 30), "maxspeed"] = "60"
    net["aadt"] = 1000.0
    net.loc[net.index[40], "aadt"] = np.nan
    kw = {"speed_field": "maxspeed", "aadt_field": "aadt"}
    # a vertex without coordinates: warned by the first pass, which reads every row once
    xy = shapely.get_coordinates(net.geometry.iloc[50])
    xy = np.insert(xy, len(xy) // 2, np.nan, axis=0)
    net.loc[net.index[50], "geometry"] = shapely.LineString(xy)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = scan(net, **kw)
        runs = [scan(net, partition_features=12, scheduler=cluster.scheduler_address, **kw)
                for _ in range(2)]
    lines = one.run["warnings"]
    assert any("5 posted-speed values in 'maxspeed' could not be parsed" in w for w in lines)
    assert any("mixes units" in w for w in lines)
    assert any(w.startswith("AssumptionWarning: superelevation assumed") for w in lines)
    assert f"1 of {len(net)} features have no value in AADT field 'aadt'" in "".join(lines)
    assert sum("1 vertices with non-finite coordinates" in w for w in lines) == 1
    for parted in runs:
        assert parted.run["timings_s"]["partitions"] >= 6
        assert sorted(parted.run["warnings"]) == sorted(lines)
        assert parted.run["posted_speed"] == one.run["posted_speed"]


def test_superelevation_unit_is_decided_for_the_whole_layer(cluster):
    # "auto" reads bare superelevation numbers as percent if any value of the field exceeds
    # 0.20. The percent-looking values sit in two rows of the first two partitions only:
    # the other partitions alone hold fraction-looking values, yet the layer is in percent
    # (with the warning that values below 1 look like fractions), as in one process.
    net = _network()
    net["se"] = "0.05"
    net.loc[net.index[[9, 16]], "se"] = "6"
    kw = {"speed_field": "maxspeed", "superelevation_field": "se"}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = scan(net, **kw)
        parted = scan(net, partition_features=12, scheduler=cluster.scheduler_address, **kw)
    e = one.curves["superelevation"].to_numpy()
    assert np.isclose(e, 0.06).sum() >= 2
    assert np.isclose(e, 0.0005).sum() > 20
    small = [w for w in one.run["warnings"] if "look like fractions" in w]
    assert len(small) == 1 and small[0].startswith("AssumptionWarning")
    assert parted.run["timings_s"]["partitions"] >= 6
    assert sorted(parted.run["warnings"]) == sorted(one.run["warnings"])
    assert_same_layers(one, parted)
