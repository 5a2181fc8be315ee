"""Stage: read. A road layer from a file or a GeoDataFrame, with source ids and a CRS.

The frame that leaves this stage has a ``src_fid`` column (the input feature id) and a
known CRS. Nothing is dropped here; invalid geometries are dealt with (and recorded) in
:mod:`curvescan.prepare`.
"""

from __future__ import annotations

import os
from typing import Any

import geopandas as gpd
import pandas as pd
import pyproj

from .declare import Param
from .errors import CRSError, InputError

__all__ = ["PARAMETERS", "load", "parse_crs"]

PARAMETERS: tuple[Param, ...] = (
    Param("layer", "str", None, "Layer to read from a multi-layer source (GeoPackage, GPX).",
          stage="read"),
    Param("where", "str", None,
          "Attribute filter on the input layer, an SQL WHERE clause in GDAL's OGR SQL, e.g. "
          "\"highway IN ('primary', 'secondary')\"; features it leaves out are not scanned. "
          "For files read through GDAL (GeoPackage, Shapefile, GeoJSON, FlatGeobuf, ...), not "
          "GeoParquet or a GeoDataFrame (filter those before the scan).", stage="read"),
    Param("assume_crs", "crs", None,
          "CRS to assume when the input has none, e.g. EPSG:4326; never overrides a stored CRS.",
          stage="read"),
)


def parse_crs(value: Any, *, what: str = "CRS") -> pyproj.CRS:
    """Parse anything ``pyproj.CRS.from_user_input`` accepts, or raise CRSError."""
    try:
        return pyproj.CRS.from_user_input(value)
    except (pyproj.exceptions.CRSError, TypeError, ValueError) as exc:
        msg = str(exc).splitlines()[0]
        raise CRSError(f"{what} {value!r} is not a valid CRS ({msg})") from None


def load(source: str | os.PathLike | gpd.GeoDataFrame, config: Any) -> gpd.GeoDataFrame:
    """Return the road layer as a GeoDataFrame with ``src_fid`` and a CRS.

    Parameters
    ----------
    source : path or GeoDataFrame
        A vector file (see :func:`curvescan.io.vector.read_layer`) or a frame.
    config : ScanConfig
        Uses ``layer`` and ``assume_crs``.

    Raises
    ------
    CRSError
        The layer has no CRS and ``assume_crs`` is not given.
    InputError
        The layer has no features or no geometry column.
    """
    if isinstance(source, gpd.GeoDataFrame):
        if config.where is not None:
            from .io.vector import WHERE_NOT_HERE

            raise InputError(WHERE_NOT_HERE)
        frame = source.copy()
        if "src_fid" not in frame.columns:
            index = frame.index
            fids = index.to_numpy() if pd.api.types.is_integer_dtype(index) else range(len(frame))
            frame.insert(0, "src_fid", pd.array(fids, dtype="int64"))
        frame = frame.reset_index(drop=True)
        label = "input frame"
    elif isinstance(source, (str, os.PathLike)):
        from .io.vector import read_layer

        frame = read_layer(source, layer=config.layer, where=config.where)
        label = str(source)
    else:
        raise InputError(f"input must be a path or a GeoDataFrame, not {type(source).__name__}")
    if len(frame) == 0:
        if config.where is not None:
            from .io.vector import no_feature_left

            raise no_feature_left(config.where, label)
        raise InputError(f"{label} has no features")
    if frame.crs is None:
        if config.assume_crs is None:
            raise CRSError(
                f"{label} has no CRS; give one with --assume-crs (e.g. EPSG:4326 for GPS data)"
            )
        frame = frame.set_crs(parse_crs(config.assume_crs, what="--assume-crs"))
    return frame
