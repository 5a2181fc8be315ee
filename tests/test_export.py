"""Export: atomic writes never destroy a good output; the run record is complete."""

from __future__ import annotations

import json

import pyogrio
import pytest

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
