"""Layer styles stored in the GeoPackage, so a desktop GIS opens the layers styled.

Styles go into the ``layer_styles`` table, the convention desktop GIS use for styles kept
inside a GeoPackage: one row per layer with a QML document (QGIS) and an SLD 1.1 document
(OGC Symbology Encoding), marked as the default style.

Colours: the "curvescan condition palette", designed for this project. Curves are
coloured by the *mildest* surface condition whose limit the posted speed exceeds:

============= ========= ===== ========== =============================================
condition     colour    L*    width (mm) meaning
============= ========= ===== ========== =============================================
dry           #4B1D52   20    1.6        exceeded even on dry pavement (worst)
wet           #B8432F   45    1.3        exceeded on wet pavement
snow          #E39A35   69    1.0        exceeded on packed snow
ice           #9CCBEA   80    0.8        exceeded on ice only
(none)        #D4D4D4   85    0.35       not exceeded, or no posted speed
============= ========= ===== ========== =============================================

CIE L* rises strictly from the worst class to the mildest, and the line width falls, so
the order survives every colour-vision deficiency and greyscale printing; the hues pair a
warm series (plum, brick, amber) with one cool class (ice), the blue-orange contrast that
red-green colour-blind readers keep. The winter layer uses a five-class sequential scheme
(light sand to deep plum) of strictly falling L*.
"""

from __future__ import annotations

import sqlite3
import warnings
from pathlib import Path
from typing import Any, Mapping, Sequence
from xml.sax.saxutils import escape, quoteattr

from .errors import CurvescanWarning

__all__ = ["CONDITION_STYLE", "NONE_STYLE", "WINTER_CLASSES", "SEGMENT_STYLE",
           "condition_style", "write_styles", "layer_style_documents", "relative_luminance_lstar"]

#: Colour (hex) and line width (mm) per condition, worst first.
CONDITION_STYLE: dict[str, tuple[str, float]] = {
    "dry": ("#4B1D52", 1.6),
    "wet": ("#B8432F", 1.3),
    "snow": ("#E39A35", 1.0),
    "ice": ("#9CCBEA", 0.8),
}
#: Style of curves whose posted speed exceeds no limit (or is unknown).
NONE_STYLE: tuple[str, float] = ("#D4D4D4", 0.35)
#: Extra (user-defined) conditions fall back to these, in order.
_EXTRA = ("#7A5C8E", "#5E8C6A", "#8C7A5E")
#: Winter score classes: (lower, upper, colour, width mm, label).
WINTER_CLASSES: tuple[tuple[float, float, str, float, str], ...] = (
    (0.0, 10.0, "#F2E6C9", 0.4, "0-10 low"),
    (10.0, 20.0, "#E1B866", 0.7, "10-20"),
    (20.0, 35.0, "#C27C2E", 1.0, "20-35"),
    (35.0, 50.0, "#8A3D2A", 1.3, "35-50"),
    (50.0, 100.0001, "#3E1638", 1.6, "50-100 treat first"),
)
#: Segment kinds: colour and width (mm).
SEGMENT_STYLE: dict[str, tuple[str, float]] = {
    "tangent": ("#BDBDBD", 0.3), "transition": ("#8C8C8C", 0.45), "curve": ("#525252", 0.6),
}
_LABEL = {"dry": "exceeded even on dry", "wet": "exceeded on wet", "snow": "exceeded on snow",
          "ice": "exceeded on ice only"}
_PX_PER_MM = 3.78  # SLD widths are in pixels at 96 dpi


def relative_luminance_lstar(hex_colour: str) -> float:
    """CIE L* of an sRGB colour (IEC 61966-2-1 transfer, CIE 1976 lightness)."""
    h = hex_colour.lstrip("#")
    rgb = [int(h[i:i + 2], 16) / 255.0 for i in (0, 2, 4)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116.0 * y ** (1.0 / 3.0) - 16.0 if y > 216 / 24389 else y * 24389 / 27


def condition_style(name: str | None, extra_index: int = 0) -> tuple[str, float]:
    """Colour and width (mm) for a mildest-condition value (None: not exceeded)."""
    if name is None or name == "":
        return NONE_STYLE
    return CONDITION_STYLE.get(name, (_EXTRA[extra_index % len(_EXTRA)], 1.0))


def _rgba(hex_colour: str) -> str:
    h = hex_colour.lstrip("#")
    return ",".join(str(int(h[i:i + 2], 16)) for i in (0, 2, 4)) + ",255"


def _qml_symbol(index: int, colour: str, width_mm: float, level: int,
                dashed: bool = False) -> str:
    opts = {
        "line_color": _rgba(colour), "line_width": f"{width_mm:g}", "line_width_unit": "MM",
        "line_style": "dash" if dashed else "solid", "capstyle": "round",
        "joinstyle": "round", "offset": "0", "offset_unit": "MM",
    }
    option_xml = "".join(f'<Option name="{k}" type="QString" value="{v}"/>'
                         for k, v in opts.items())
    prop_xml = "".join(f'<prop k="{k}" v="{v}"/>' for k, v in opts.items())
    return (f'<symbol type="line" name="{index}" alpha="1" clip_to_extent="1" force_rhr="0">'
            f'<layer class="SimpleLine" enabled="1" locked="0" pass="{level}">'
            f'<Option type="Map">{option_xml}</Option>{prop_xml}</layer></symbol>')


def _qml(renderer: str) -> str:
    return ("<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"
            '<qgis version="3.28.0" styleCategories="Symbology">'
            f"{renderer}<layerGeometryType>1</layerGeometryType></qgis>")


def _qml_categorized(attr: str, cats: Sequence[tuple[str, str, str, float]]) -> str:
    """cats: (value, label, colour, width); value '' matches null (all other values)."""
    n = len(cats)
    categories = "".join(
        f'<category value={quoteattr(v)} symbol="{i}" label={quoteattr(lab)} render="true"/>'
        for i, (v, lab, _, _) in enumerate(cats))
    symbols = "".join(_qml_symbol(i, col, w, n - i) for i, (_, _, col, w) in enumerate(cats))
    return _qml(f'<renderer-v2 type="categorizedSymbol" attr={quoteattr(attr)} '
                f'symbollevels="1" forceraster="0" enableorderby="0">'
                f"<categories>{categories}</categories><symbols>{symbols}</symbols>"
                "</renderer-v2>")


def _qml_graduated(attr: str, classes: Sequence[tuple[float, float, str, float, str]]) -> str:
    ranges = "".join(
        f'<range lower="{lo:g}" upper="{hi:g}" symbol="{i}" label={quoteattr(lab)} '
        f'render="true"/>' for i, (lo, hi, _, _, lab) in enumerate(classes))
    symbols = "".join(_qml_symbol(i, col, w, i + 1)
                      for i, (_, _, col, w, _) in enumerate(classes))
    return _qml(f'<renderer-v2 type="graduatedSymbol" attr={quoteattr(attr)} '
                f'graduatedMethod="GraduatedColor" symbollevels="1" forceraster="0" '
                f'enableorderby="0"><ranges>{ranges}</ranges><symbols>{symbols}</symbols>'
                f'<mode name="manual"/></renderer-v2>')


def _sld_stroke(colour: str, width_mm: float) -> str:
    return (f'<se:LineSymbolizer><se:Stroke>'
            f'<se:SvgParameter name="stroke">{colour.lower()}</se:SvgParameter>'
            f'<se:SvgParameter name="stroke-width">{width_mm * _PX_PER_MM:.1f}</se:SvgParameter>'
            f'<se:SvgParameter name="stroke-linecap">round</se:SvgParameter>'
            f'<se:SvgParameter name="stroke-linejoin">round</se:SvgParameter>'
            f"</se:Stroke></se:LineSymbolizer>")


def _sld(layer: str, rules: Sequence[str]) -> str:
    return ('<?xml version="1.0" encoding="UTF-8"?>'
            '<StyledLayerDescriptor version="1.1.0" xmlns="http://www.opengis.net/sld" '
            'xmlns:ogc="http://www.opengis.net/ogc" xmlns:se="http://www.opengis.net/se" '
            'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
            'xsi:schemaLocation="http://www.opengis.net/sld '
            'http://schemas.opengis.net/sld/1.1.0/StyledLayerDescriptor.xsd">'
            f"<NamedLayer><se:Name>{escape(layer)}</se:Name><UserStyle>"
            f"<se:Name>{escape(layer)}</se:Name><se:FeatureTypeStyle>{''.join(rules)}"
            "</se:FeatureTypeStyle></UserStyle></NamedLayer></StyledLayerDescriptor>")


def _sld_rule(name: str, filter_xml: str, colour: str, width: float) -> str:
    return (f"<se:Rule><se:Name>{escape(name)}</se:Name>{filter_xml}"
            f"{_sld_stroke(colour, width)}</se:Rule>")


def _eq(attr: str, value: str) -> str:
    return (f"<ogc:Filter><ogc:PropertyIsEqualTo><ogc:PropertyName>{escape(attr)}"
            f"</ogc:PropertyName><ogc:Literal>{escape(value)}</ogc:Literal>"
            "</ogc:PropertyIsEqualTo></ogc:Filter>")


def _between(attr: str, lo: float, hi: float) -> str:
    p = f"<ogc:PropertyName>{escape(attr)}</ogc:PropertyName>"
    return (f"<ogc:Filter><ogc:And><ogc:PropertyIsGreaterThanOrEqualTo>{p}"
            f"<ogc:Literal>{lo:g}</ogc:Literal></ogc:PropertyIsGreaterThanOrEqualTo>"
            f"<ogc:PropertyIsLessThan>{p}<ogc:Literal>{hi:g}</ogc:Literal>"
            "</ogc:PropertyIsLessThan></ogc:And></ogc:Filter>")


def _condition_docs(layer: str, conditions: Sequence[str]) -> tuple[str, str]:
    cats = []
    for k, c in enumerate(conditions):
        col, w = condition_style(c, k)
        cats.append((c, _LABEL.get(c, f"exceeded on {c}"), col, w))
    cats.append(("", "not exceeded / no posted speed", *NONE_STYLE))
    rules = [_sld_rule(lab, _eq("mildest_condition", v), col, w) for v, lab, col, w in cats[:-1]]
    rules.append(f"<se:Rule><se:Name>{escape(cats[-1][1])}</se:Name><se:ElseFilter/>"
                 f"{_sld_stroke(*NONE_STYLE)}</se:Rule>")
    # worst drawn last (on top) in SLD: reverse rule order
    return _qml_categorized("mildest_condition", cats), _sld(layer, rules[::-1])


def layer_style_documents(layers: Mapping[str, Any]) -> dict[str, tuple[str, str, str]]:
    """QML and SLD documents per styled layer: ``{layer: (qml, sld, description)}``.

    Parameters
    ----------
    layers : mapping of layer name to DataFrame
        The layers written (their columns decide which conditions appear).
    """
    out: dict[str, tuple[str, str, str]] = {}
    for name in ("curves", "hazards"):
        frame = layers.get(name)
        if frame is None or "mildest_condition" not in frame.columns:
            continue
        present = [c for c in CONDITION_STYLE if f"v_{c}_limit_kmh" in frame.columns]
        seen = frame["mildest_condition"].dropna().unique()  # a few names: no row loop
        extra = sorted({str(v) for v in seen} - set(present))
        qml, sld = _condition_docs(name, present + extra)
        out[name] = (qml, sld, "colour by the mildest condition whose limit is exceeded")
    seg = layers.get("segments")
    if seg is not None and "kind" in seg.columns:
        cats = [(k, k, c, w) for k, (c, w) in SEGMENT_STYLE.items()]
        rules = [_sld_rule(k, _eq("kind", k), c, w) for k, _, c, w in cats]
        out["segments"] = (_qml_categorized("kind", cats), _sld("segments", rules),
                           "tangent, transition and curve pieces")
    win = layers.get("winter")
    if win is not None and "winter_score" in win.columns:
        rules = [_sld_rule(lab, _between("winter_score", lo, hi), c, w)
                 for lo, hi, c, w, lab in WINTER_CLASSES]
        out["winter"] = (_qml_graduated("winter_score", WINTER_CLASSES), _sld("winter", rules),
                         "winter priority score classes")
    return out


_CREATE = """CREATE TABLE IF NOT EXISTS layer_styles (
    id INTEGER PRIMARY KEY AUTOINCREMENT, f_table_catalog TEXT(256), f_table_schema TEXT(256),
    f_table_name TEXT(256), f_geometry_column TEXT(256), styleName TEXT(30), styleQML TEXT,
    styleSLD TEXT, useAsDefault BOOLEAN, description TEXT, owner TEXT(30), ui TEXT(30),
    update_time DATETIME DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')))"""


def write_styles(path: str | Path, layers: Mapping[str, Any]) -> int:
    """Store the default style of each styled layer in the GeoPackage at ``path``.

    Existing ``layer_styles`` rows of those layers are replaced. A failure leaves the
    GeoPackage's data intact and is reported as a :class:`CurvescanWarning`.

    Returns
    -------
    int
        Number of style rows written.
    """
    docs = layer_style_documents(layers)
    if not docs:
        return 0
    try:
        con = sqlite3.connect(str(path))
        try:
            with con:
                geom_cols = dict(con.execute(
                    "SELECT table_name, column_name FROM gpkg_geometry_columns").fetchall())
                con.execute(_CREATE)
                known = con.execute("SELECT 1 FROM gpkg_contents WHERE table_name = "
                                    "'layer_styles'").fetchone()
                if not known:
                    con.execute(
                        "INSERT INTO gpkg_contents (table_name, data_type, identifier, "
                        "description, last_change) VALUES ('layer_styles', 'attributes', "
                        "'layer_styles', 'Default layer styles (QML and SLD)', "
                        "strftime('%Y-%m-%dT%H:%M:%fZ','now'))")
                    has_ogr = con.execute("SELECT 1 FROM sqlite_master WHERE name = "
                                          "'gpkg_ogr_contents'").fetchone()
                    if has_ogr:
                        con.execute("INSERT OR REPLACE INTO gpkg_ogr_contents "
                                    "(table_name, feature_count) VALUES ('layer_styles', NULL)")
                count = 0
                for layer, (qml, sld, desc) in docs.items():
                    if layer not in geom_cols:
                        continue
                    con.execute("DELETE FROM layer_styles WHERE f_table_name = ?", (layer,))
                    con.execute(
                        "INSERT INTO layer_styles (f_table_catalog, f_table_schema, "
                        "f_table_name, f_geometry_column, styleName, styleQML, styleSLD, "
                        "useAsDefault, description, owner) VALUES ('', '', ?, ?, ?, ?, ?, 1, "
                        "?, 'curvescan')",
                        (layer, geom_cols[layer], f"curvescan {layer}", qml, sld, desc))
                    count += 1
        finally:
            con.close()
    except sqlite3.Error as exc:
        warnings.warn(f"layer styles not stored in {path}: {exc}", CurvescanWarning,
                      stacklevel=2)
        return 0
    return count
