"""Plugin packaging and the GeoPackage details a desktop GIS depends on (no QGIS needed).

GeoPackage facts used here, from memory (OGC GeoPackage Encoding Standard, version 1.3, the
file-format and ``gpkg_spatial_ref_sys`` requirements; not re-read for this test):
``PRAGMA user_version`` holds the version (10300 for 1.3), and the ``gpkg_spatial_ref_sys``
rows with ``srs_id`` -1 and 0 are the "undefined Cartesian" and "undefined geographic"
systems, i.e. no CRS. GDAL's names for those two rows are checked by the test itself.
"""

from __future__ import annotations

import configparser
import sqlite3
import zipfile
from pathlib import Path

import pytest

import curvescan
from curvescan.errors import CRSError

ROOT = Path(__file__).resolve().parents[2]


def test_zip_is_one_plugin_folder_with_metadata(plugin_zip):
    with zipfile.ZipFile(plugin_zip) as zf:
        names = zf.namelist()
        meta_text = zf.read("curvescan_qgis/metadata.txt").decode()
        init_text = zf.read("curvescan_qgis/__init__.py").decode()
    assert all(n.startswith("curvescan_qgis/") for n in names)
    assert not [n for n in names if "__pycache__" in n or n.endswith(".pyc")]
    assert "def classFactory(iface)" in init_text
    meta = configparser.ConfigParser()
    meta.read_string(meta_text)
    general = meta["general"]
    for key in ("name", "qgisMinimumVersion", "description", "about", "version", "author",
                "email"):
        assert general.get(key), key
    assert general["version"] == curvescan.__version__
    assert general["hasProcessingProvider"] == "yes"
    assert plugin_zip.name == f"curvescan_qgis-{curvescan.__version__}.zip"


def test_plugin_holds_no_analysis():
    """The plugin calls curvescan; it imports no numerical or GIS-format library itself."""
    banned = ("numpy", "scipy", "shapely", "pyogrio", "rasterio", "geopandas", "pandas")
    for path in (ROOT / "qgis_plugin" / "curvescan_qgis").glob("*.py"):
        text = path.read_text(encoding="utf-8")
        for lib in banned:
            assert f"import {lib}" not in text and f"from {lib}" not in text, (path.name, lib)


def test_output_is_geopackage_1_3(curve_layer, tmp_path):
    out = curvescan.scan(curve_layer).to_gpkg(tmp_path / "out.gpkg")
    with sqlite3.connect(out) as con:
        assert con.execute("PRAGMA user_version").fetchone()[0] == 10300


@pytest.mark.parametrize("srs_id", [0, -1])
def test_geopackage_undefined_srs_is_no_crs(curve_layer, tmp_path, srs_id):
    path = tmp_path / "undefined.gpkg"
    curve_layer.to_file(path, layer="roads")
    with sqlite3.connect(path) as con:
        con.execute("UPDATE gpkg_geometry_columns SET srs_id = ?", (srs_id,))
        con.execute("UPDATE gpkg_contents SET srs_id = ?", (srs_id,))
    with pytest.raises(CRSError, match="has no CRS; give one with --assume-crs"):
        curvescan.scan(path)
    result = curvescan.scan(path, assume_crs="EPSG:32632")
    assert len(result.curves) == 1
