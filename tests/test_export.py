"""Export: atomic writes never destroy a good output; the run record is complete."""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely

import curvescan
from curvescan.errors import DataSourceError, OutputExistsError


def test_failed_write_keeps_existing_output(tmp_path, curve_layer, monkeypatch):
    out = tmp_path / "good.gpkg"
    result = curvescan.scan(curve_layer, speed_field="maxspeed")
    result.to_gpkg(out)
    before = out.read_bytes()
    calls = {"n": 0}

    def failing(real):
        def write(*args, **kwargs):
            calls["n"] += 1
            if calls["n"] == 2:  # fail after the first layer is written
                raise OSError("disk full (simulated)")
            return real(*args, **kwargs)
        return write

    import curvescan.io.vector as vector

    for name in ("write_dataframe", "write_arrow"):  # layers go through either
        monkeypatch.setattr(vector.pyogrio, name, failing(getattr(pyogrio, name)))
    with pytest.raises(DataSourceError, match="disk full"):
        result.to_gpkg(out, overwrite=True)
    assert out.read_bytes() == before
    assert not list(tmp_path.glob("*.part.gpkg"))


def test_output_exists_error(tmp_path, curve_layer):
    out = tmp_path / "o.gpkg"
    out.write_text("x")
    with pytest.raises(OutputExistsError):
        curvescan.scan(curve_layer).to_gpkg(out)


def test_run_record_accounts_for_every_input_row(tmp_path, curve_layer):
    import geopandas as gpd
    import shapely

    frame = gpd.GeoDataFrame(
        {"maxspeed": ["100", "50"]},
        geometry=[curve_layer.geometry.iloc[0], shapely.LineString()], crs=curve_layer.crs)
    result = curvescan.scan(frame, speed_field="maxspeed")
    out = result.to_gpkg(tmp_path / "o.gpkg")
    run = pyogrio.read_dataframe(out, layer="run")
    assert len(run) == 1
    skipped = json.loads(run["skipped"].iloc[0])
    assert [s["src_fid"] for s in skipped] == [1]
    seg = pyogrio.read_dataframe(out, layer="segments")
    covered = {int(f) for text in seg["src_fids"] for f in text.split(",")}
    assert covered == {0}
    assert "licensed engineers" in run["caution"].iloc[0]
    params = json.loads(run["parameters"].iloc[0])
    assert params["speed_field"] == "maxspeed"


def _split_curves(n_features=3):
    """A curve digitised as several features, some backwards (chains with joints)."""
    from .conftest import frame_from_lines, simple_curve

    al = simple_curve(radius_m=150.0, spiral_m=40.0)
    xy = al.points(np.arange(0, al.length_m, 6.0))
    cut = np.linspace(0, len(xy) - 1, n_features + 1).astype(int)
    parts = [xy[a:b + 1] if i % 2 == 0 else xy[a:b + 1][::-1]
             for i, (a, b) in enumerate(zip(cut[:-1], cut[1:]))]
    return frame_from_lines(parts, maxspeed=["100"] * len(parts))


def test_wkb_of_lines_is_the_bytes_shapely_writes():
    from curvescan.geometry.pieces import linestring_wkb

    rng = np.random.default_rng(5)
    counts = rng.integers(2, 40, 500)
    offsets = np.r_[0, np.cumsum(counts)]
    xy = rng.normal(size=(offsets[-1], 2)) * 1e6
    xy[3] = [-0.0, np.nan]
    lines = shapely.from_ragged_array(shapely.GeometryType.LINESTRING, xy, (offsets,))
    assert linestring_wkb(xy, offsets).to_pylist() == list(shapely.to_wkb(lines))


def test_substrings_as_wkb_equal_the_shapely_lines():
    from curvescan.geometry.pieces import substrings
    from curvescan.prepare import prepare
    from curvescan.read import load
    from curvescan.config import make_config

    chains = prepare(load(_split_curves(5), make_config()), make_config())
    total = float(chains.lengths[0])
    s0 = np.array([0.0, 3.0, 17.5, total / 2, total - 1e-9])
    s1 = np.array([total, 3.0, 90.0, total / 2 + 0.5, total])
    chain = np.zeros(len(s0), dtype=np.int64)
    lines = substrings(chains, chain, s0, s1)
    assert substrings(chains, chain, s0, s1, wkb=True).to_pylist() == list(
        shapely.to_wkb(lines))


def test_scan_result_holds_wkb_until_read_and_writes_the_same_file(tmp_path):
    from curvescan.io.vector import WkbLayer

    layer = _split_curves()
    result = curvescan.scan(layer, speed_field="maxspeed")
    assert isinstance(result.__dict__["_segments"], WkbLayer)
    fields = result.attributes("curves")
    assert "geometry" in fields and len(fields) == result.run["curves"]
    result.to_gpkg(tmp_path / "wkb.gpkg")
    assert isinstance(result.__dict__["_curves"], WkbLayer)  # writing decoded nothing
    # the same result with shapely geometries, written the pyogrio way
    decoded = curvescan.scan(layer, speed_field="maxspeed")
    for name in ("curves", "segments", "hazards"):
        assert isinstance(getattr(decoded, name), gpd.GeoDataFrame)
    assert isinstance(decoded.extra["winter"], gpd.GeoDataFrame)
    decoded.to_gpkg(tmp_path / "geos.gpkg")
    for name in ("curves", "segments", "hazards", "winter"):
        a = pyogrio.read_arrow(tmp_path / "wkb.gpkg", layer=name)[1]
        b = pyogrio.read_arrow(tmp_path / "geos.gpkg", layer=name)[1]
        assert a.num_rows > 0 or name == "hazards"
        assert a.equals(b), name
        assert (pyogrio.read_info(tmp_path / "wkb.gpkg", layer=name)["geometry_type"]
                == pyogrio.read_info(tmp_path / "geos.gpkg", layer=name)["geometry_type"])
