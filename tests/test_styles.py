"""Layer styles stored in the GeoPackage: present, well-formed, and the palette's order.

The lightness check uses CIE 1976 L* of sRGB colours: sRGB transfer function of
IEC 61966-2-1:1999 and the CIE L* formula with the (6/29)^3 break point (CIE 15:2004).
"""

from __future__ import annotations

import sqlite3
import xml.etree.ElementTree as ET

import pyogrio
import pytest

from curvescan.styles import CONDITION_STYLE, NONE_STYLE, WINTER_CLASSES, write_styles
from tests.conftest import scan_demo

SLD_NS = {"se": "http://www.opengis.net/se", "ogc": "http://www.opengis.net/ogc",
          "sld": "http://www.opengis.net/sld"}


@pytest.fixture(scope="module")
def demo_gpkg(tmp_path_factory):
    return scan_demo(tmp_path_factory)[1]


def _lstar(hex_colour: str) -> float:
    h = hex_colour.lstrip("#")
    srgb = [int(h[i:i + 2], 16) / 255 for i in (0, 2, 4)]
    lin = [((c + 0.055) / 1.055) ** 2.4 if c > 0.04045 else c / 12.92 for c in srgb]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    f = y ** (1 / 3) if y > (6 / 29) ** 3 else y / (3 * (6 / 29) ** 2) + 4 / 29
    return 116 * f - 16


def _rows(path):
    con = sqlite3.connect(str(path))
    try:
        return con.execute("SELECT f_table_name, f_geometry_column, styleQML, styleSLD, "
                           "useAsDefault FROM layer_styles").fetchall()
    finally:
        con.close()


def test_style_records_exist_and_parse(demo_gpkg):
    rows = _rows(demo_gpkg)
    by_layer = {r[0]: r for r in rows}
    assert set(by_layer) == {"curves", "hazards", "segments", "winter"}
    for name, geom_col, qml, sld, default in rows:
        assert default == 1 and geom_col
        qroot = ET.fromstring(qml)
        assert qroot.tag == "qgis"
        renderer = qroot.find("renderer-v2")
        assert renderer is not None
        assert len(renderer.find("symbols")) >= 3
        sroot = ET.fromstring(sld)
        assert sroot.tag == "{http://www.opengis.net/sld}StyledLayerDescriptor"
        assert len(sroot.findall(".//se:Rule", SLD_NS)) >= 3
    cats = ET.fromstring(by_layer["hazards"][2]).find("renderer-v2")
    assert cats.get("attr") == "mildest_condition"
    values = [c.get("value") for c in cats.find("categories")]
    assert values == ["dry", "wet", "snow", "ice", ""]
    grad = ET.fromstring(by_layer["winter"][2]).find("renderer-v2")
    assert grad.get("type") == "graduatedSymbol" and grad.get("attr") == "winter_score"


def test_gpkg_still_reads_after_styles(demo_gpkg):
    layers = dict(pyogrio.list_layers(demo_gpkg))
    assert {"curves", "segments", "hazards", "winter", "run", "layer_styles"} <= set(layers)
    styles = pyogrio.read_dataframe(demo_gpkg, layer="layer_styles", read_geometry=False)
    assert len(styles) == 4
    curves = pyogrio.read_dataframe(demo_gpkg, layer="curves")
    assert len(curves) > 0


def test_rewriting_styles_replaces_rows(demo_gpkg):
    curves = pyogrio.read_dataframe(demo_gpkg, layer="curves")
    assert write_styles(demo_gpkg, {"curves": curves}) == 1
    assert sum(1 for r in _rows(demo_gpkg) if r[0] == "curves") == 1


def test_palette_lightness_order():
    """Worst class darkest: L* strictly rises dry -> wet -> snow -> ice -> not exceeded, and
    winter classes darken as the score rises; widths follow the same order."""
    colours = [c for c, _ in CONDITION_STYLE.values()] + [NONE_STYLE[0]]
    lightness = [_lstar(c) for c in colours]
    assert all(b - a > 4 for a, b in zip(lightness, lightness[1:])), lightness
    widths = [w for _, w in CONDITION_STYLE.values()] + [NONE_STYLE[1]]
    assert widths == sorted(widths, reverse=True)
    wl = [_lstar(c) for _, _, c, _, _ in WINTER_CLASSES]
    assert all(b < a for a, b in zip(wl, wl[1:]))


def test_broken_file_warns_not_raises(tmp_path):
    bad = tmp_path / "not_a.gpkg"
    bad.write_bytes(b"this is not sqlite")
    import pandas as pd

    frame = pd.DataFrame({"kind": ["curve"]})
    from curvescan.errors import CurvescanWarning

    with pytest.warns(CurvescanWarning, match="layer styles not stored"):
        assert write_styles(bad, {"segments": frame}) == 0
