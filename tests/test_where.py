"""``--where``: an OGR SQL filter on the input file, the same in one process and in
partitions; bad filters are one-line errors."""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely

from curvescan.errors import InputError
from curvescan.pipeline import scan
from curvescan.synthetic import random_alignment, vertices

CRS = "EPSG:32633"


@pytest.fixture(scope="module")
def roads(tmp_path_factory):
    """Invented roads of two classes in a GeoPackage, the classes interleaved."""
    rng = np.random.default_rng(12)
    geoms, kind = [], []
    for k in range(40):
        al = random_alignment(rng, n_curves=3)
        xy, _ = vertices(al, rng, jitter=(5.0, 20.0), noise_m=0.05)
        geoms.append(shapely.LineString(xy - xy[0] + [500000.0 + 5000.0 * k, 5500000.0]))
        kind.append("primary" if k % 2 else "track")
    frame = gpd.GeoDataFrame({"highway": kind, "maxspeed": ["80"] * 40}, geometry=geoms,
                             crs=CRS)
    path = tmp_path_factory.mktemp("where") / "roads.gpkg"
    frame.to_file(path, driver="GPKG")
    return path, frame


def _scan(source, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return scan(source, speed_field="maxspeed", **kw)


def test_where_keeps_only_matching_features(roads):
    path, frame = roads
    res = _scan(path, where="highway = 'primary'")
    assert res.run["input_features"] == 20
    fids = {int(f) for text in res.segments["src_fids"] for f in text.split(",")}
    # GeoPackage FIDs start at 1: the primary roads are rows 1, 3, ... (FIDs 2, 4, ...)
    assert fids == {2 * k + 2 for k in range(20)}
    assert len(res.curves) > 20
    assert res.run["parameters"]["where"] == "highway = 'primary'"


def test_where_in_partitions_equals_one_process(roads):
    pytest.importorskip("distributed")
    from .test_parallel import assert_same_layers
    path, _ = roads
    single = _scan(path, where="highway = 'primary'")
    parted = _scan(path, where="highway = 'primary'", partition_features=10)
    assert parted.run["timings_s"]["partitions"] == 2
    assert parted.run["input_features"] == 20
    assert_same_layers(single, parted)


@pytest.mark.parametrize("where,match", [
    ("highway = ", "is not a filter"),
    ("no_such_field = 1", "is not a filter"),
    ("highway = 'motorway'", "leaves no feature"),
])
def test_bad_where_is_one_clear_error(roads, where, match):
    path, _ = roads
    for kw in ({}, {"partition_features": 10}):
        with pytest.raises(InputError, match=match) as info:
            _scan(path, where=where, **kw)
        assert "\n" not in str(info.value)


def test_where_on_a_frame_or_geoparquet_is_refused(roads, tmp_path):
    _, frame = roads
    with pytest.raises(InputError, match="--where"):
        _scan(frame, where="highway = 'primary'")
    pq = tmp_path / "roads.parquet"
    frame.to_parquet(pq)
    with pytest.raises(InputError, match="GeoParquet"):
        _scan(pq, where="highway = 'primary'")
