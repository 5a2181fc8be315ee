"""Stage: export. The output layers and the run record, written atomically."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping

import geopandas as gpd
import numpy as np
import pandas as pd

from .declare import Param

__all__ = ["PARAMETERS", "run_table", "write_gpkg", "CONTRACT_FIELDS"]

PARAMETERS: tuple[Param, ...] = (
    Param("output_crs", "str", "input",
          "CRS of the output layers: 'input' (the input's CRS), 'working' (the metric CRS "
          "the scan computed in) or any CRS string.", stage="export"),
)

#: Fields every ``curves`` row carries (DESIGN.md section 4), in this order.
CONTRACT_FIELDS = (
    "curve_id", "src_fids", "radius_m", "radius_se_m", "length_m", "deflection_deg",
    "direction", "fit_rmse_m", "superelevation", "superelevation_source", "grade",
    "posted_kmh", "v_dry_kmh", "v_wet_kmh", "v_snow_kmh", "v_ice_kmh", "v_comfort_kmh",
    "v_rollover_kmh",
)


def _jsonable(value: Any) -> Any:
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating,)):
        return None if not np.isfinite(value) else float(value)
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_jsonable(v) for v in value]
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    return str(value)


def run_table(record: Mapping[str, Any]) -> pd.DataFrame:
    """One-row attribute table: scalars as columns, structures as JSON text."""
    row = {}
    for key, value in record.items():
        value = _jsonable(value)
        row[key] = json.dumps(value) if isinstance(value, (dict, list)) else value
    return pd.DataFrame([row])


def order_columns(frame: pd.DataFrame, first: tuple[str, ...]) -> pd.DataFrame:
    """Put ``first`` columns first (those present), geometry last."""
    cols = [c for c in first if c in frame.columns]
    rest = [c for c in frame.columns if c not in cols and c != "geometry"]
    tail = ["geometry"] if "geometry" in frame.columns else []
    return frame[cols + rest + tail]


def write_gpkg(result: Any, path: str | Path, *, overwrite: bool = False) -> Path:
    """Write the layers of a :class:`curvescan.pipeline.ScanResult` to one GeoPackage.

    Layers: ``curves``, ``segments``, ``hazards`` and the ``run`` record, plus any extra
    layers the result carries. Written to a temporary file first and moved into place.
    """
    from .io.vector import write_layers

    layers = {name: _text_columns(frame) for name, frame in result.layers().items()}
    meta = {name: {"DESCRIPTION": desc} for name, desc in result.layer_descriptions().items()}
    hook = getattr(result, "after_write", None)  # e.g. layer styles, inside the atomic write
    return write_layers(path, layers, overwrite=overwrite, layer_metadata=meta,
                        finish=hook if callable(hook) else None)


def _text_columns(frame: Any) -> Any:
    """``object`` columns as text (copy-on-write: the other columns are not copied)."""
    from .io.vector import WkbLayer

    if isinstance(frame, WkbLayer):
        return WkbLayer(_text_columns(frame.table), frame.crs, frame.geometry_type)
    geom = frame.geometry.name if isinstance(frame, gpd.GeoDataFrame) else None
    text = {c: frame[c].astype("string") for c in frame.columns
            if frame[c].dtype == object and c != geom}
    return frame.assign(**text) if text else frame


def check_output_crs(setting: str) -> Any:
    """The CRS an ``output_crs`` setting names (None for ``input`` / ``working``), or a
    one-line :class:`~curvescan.errors.CRSError` (called before the scan, not after it)."""
    if setting in ("input", "working"):
        return None
    from .read import parse_crs

    return parse_crs(setting, what="--output-crs")


def output_crs(working: Any, input_crs: Any, setting: str) -> tuple[Any, Any]:
    """The CRS of the output layers (``output_crs`` setting) and how to get there.

    Returns ``(crs, project)``: ``project(x, y) -> (x, y)`` turns working-CRS coordinates
    into output coordinates, or is None where the output CRS is the working CRS.
    """
    if setting == "working":
        return working, None
    target = input_crs if setting == "input" else check_output_crs(setting)
    if target is None:
        return working, None
    import pyproj

    target = pyproj.CRS.from_user_input(target)
    if working.is_exact_same(target):
        return working, None
    return target, pyproj.Transformer.from_crs(working, target, always_xy=True).transform
