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

    layers: dict[str, pd.DataFrame] = {}
    for name, frame in result.layers().items():
        frame = frame.copy()
        for col in frame.columns:
            if frame[col].dtype == object and col != "geometry":
                frame[col] = frame[col].astype("string")
        layers[name] = frame
    meta = {name: {"DESCRIPTION": desc} for name, desc in result.layer_descriptions().items()}
    hook = getattr(result, "after_write", None)  # e.g. layer styles, inside the atomic write
    return write_layers(path, layers, overwrite=overwrite, layer_metadata=meta,
                        finish=hook if callable(hook) else None)


def to_output_crs(frame: gpd.GeoDataFrame, input_crs: Any, setting: str) -> gpd.GeoDataFrame:
    """Re-project a layer for output according to the ``output_crs`` setting."""
    if setting == "working" or frame.crs is None:
        return frame
    target = input_crs if setting == "input" else setting
    if target is None:
        return frame
    return frame.to_crs(target)
