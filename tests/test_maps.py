"""Overview map, road profile and hazard tables: files written, commands' exit codes."""

from __future__ import annotations

import json

import matplotlib
import numpy as np
import pandas as pd
import pyogrio
import pytest

from curvescan.cli.main import main
from curvescan.maps import overview_map, profile_plot, profile_table
from tests.conftest import scan_demo

matplotlib.use("Agg")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"



@pytest.fixture(scope="module")
def demo_gpkg(tmp_path_factory):
    return scan_demo(tmp_path_factory)[1]


def _png(path):
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE and len(data) > 20_000
    return data


def _layer(path, name):
    import geopandas as gpd

    return gpd.read_file(path, layer=name)


def test_overview_map_png(demo_gpkg, tmp_path):
    curves, segments = _layer(demo_gpkg, "curves"), _layer(demo_gpkg, "segments")
    _png(overview_map(curves, segments, tmp_path / "map.png"))
    winter = _layer(demo_gpkg, "winter")
    _png(overview_map(curves, segments, tmp_path / "w.png", colour_by="winter", winter=winter))


def test_profile_png_and_curvature_table(demo_gpkg, tmp_path):
    curves, segments = _layer(demo_gpkg, "curves"), _layer(demo_gpkg, "segments")
    name = segments["road_name"].dropna().iloc[0]
    _png(profile_plot(curves, segments, tmp_path / "p.png", road=name))
    chain = int(curves["chain_id"].iloc[0])
    curvature, rows = profile_table(curves, segments, [chain])
    # circular parts plot at 1000/R, signed by direction (left positive)
    circ = segments.loc[(segments["chain_id"] == chain) & (segments["kind"] == "curve")]
    expected = set(np.round(1000.0 / circ["radius_m"], 6))
    got = set(np.round(np.abs(curvature["curvature_per_km"]), 6)) - {0.0}
    assert expected <= got
    assert len(rows) == int((curves["chain_id"] == chain).sum())
    assert (np.diff(curvature["x_km"].to_numpy()) >= -1e-9).all()


def test_map_profile_hazards_commands(runner, demo_gpkg, tmp_path):
    out = tmp_path / "m.png"
    res = runner.invoke(main, ["map", str(demo_gpkg), "-o", str(out)])
    assert res.exit_code == 0, res.output
    _png(out)
    res = runner.invoke(main, ["map", str(demo_gpkg), "-o", str(out)])
    assert res.exit_code == 1 and "exists" in res.output  # no --overwrite
    segments = pyogrio.read_dataframe(demo_gpkg, layer="segments")
    name = segments["road_name"].dropna().iloc[0]
    res = runner.invoke(main, ["profile", str(demo_gpkg), "--road", name, "-o",
                               str(tmp_path / "p.png")])
    assert res.exit_code == 0, res.output
    res = runner.invoke(main, ["profile", str(demo_gpkg), "--road", "No Such Road", "-o",
                               str(tmp_path / "q.png")])
    assert res.exit_code == 1 and "not found" in res.output
    res = runner.invoke(main, ["profile", str(demo_gpkg), "-o", str(tmp_path / "q.png")])
    assert res.exit_code == 2
    # an extension matplotlib cannot write: a usage error, not a traceback after drawing
    res = runner.invoke(main, ["map", str(demo_gpkg), "-o", str(tmp_path / "m.txt")])
    assert res.exit_code == 2 and "cannot write an image as '.txt'" in res.output
    res = runner.invoke(main, ["profile", str(demo_gpkg), "--road", name, "-o",
                               str(tmp_path / "p")])
    assert res.exit_code == 2 and "no extension" in res.output


def test_hazards_csv_and_geojson(runner, demo_gpkg, tmp_path):
    hz = pyogrio.read_dataframe(demo_gpkg, layer="hazards")
    csv = tmp_path / "h.csv"
    res = runner.invoke(main, ["hazards", str(demo_gpkg), "-o", str(csv)])
    assert res.exit_code == 0, res.output
    assert csv.read_text().startswith("# CAUTION")
    table = pd.read_csv(csv, comment="#")
    assert list(table["curve_id"]) == list(hz["curve_id"])
    assert table["lon"].between(-180, 180).all() and table["lat"].between(-90, 90).all()
    gj = tmp_path / "h.geojson"
    res = runner.invoke(main, ["hazards", str(demo_gpkg), "-o", str(gj)])
    assert res.exit_code == 0, res.output
    doc = json.loads(gj.read_text())
    assert doc["type"] == "FeatureCollection" and len(doc["features"]) == len(hz)
    assert "caution" in doc
    res = runner.invoke(main, ["hazards", str(demo_gpkg), "-o", str(tmp_path / "h.txt")])
    assert res.exit_code == 2
