"""Stage: read. A road layer from a file or a GeoDataFrame, with source ids and a CRS.

The frame that leaves this stage has a ``src_fid`` column (the input feature id) and a
known CRS. Nothing is dropped here; invalid geometries are dealt with (and recorded) in
:mod:`curvescan.prepare`.
"""

from __future__ import annotations

import os
import warnings
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj

from .declare import Param
from .errors import CRSError, DataQualityWarning, InputError

__all__ = ["PARAMETERS", "load", "parse_crs", "with_src_fid", "set_aside_src_fid", "usable_ids"]

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


def usable_ids(values: pd.Series) -> bool:
    """Whether ``values`` can serve as feature ids: integers, none missing, all different."""
    if pd.api.types.is_bool_dtype(values) or values.isna().any():
        return False
    if pd.api.types.is_float_dtype(values):
        v = values.to_numpy(dtype=float)
        if not (np.isfinite(v).all() and (v == np.round(v)).all()):
            return False
    elif not pd.api.types.is_integer_dtype(values):
        return False
    return bool(values.is_unique)


def set_aside_src_fid(frame: gpd.GeoDataFrame, label: str,
                      why: str | None = None) -> gpd.GeoDataFrame:
    """``frame`` with its ``src_fid`` field renamed (``src_fid_input``), warned: the field
    is data, not the feature ids (``why`` says what the ids are instead)."""
    new = "src_fid_input"
    while new in frame.columns:
        new += "_"
    why = why or "it is not a unique integer for every row; the row numbers are"
    warnings.warn(f"{label} has a field src_fid; read as {new!r} ({why} the src_fid of the "
                  "output)", DataQualityWarning, stacklevel=4)
    return frame.rename(columns={"src_fid": new})


def with_src_fid(frame: gpd.GeoDataFrame, fids: Any = None, *,
                 label: str = "the input") -> gpd.GeoDataFrame:
    """``frame`` with a ``src_fid`` column of feature ids (in place where it inserts one).

    ``fids`` (the FIDs of a file read through GDAL) are the ids where given; else a
    ``src_fid`` column the frame has already (the ids :func:`load` gave it), else an
    integer index without repeats, else the row numbers. A ``src_fid`` field of the data
    that is not used as the ids (the file's FIDs are, or it is not a unique integer for
    every row) is kept under another name, with a warning, never mixed up with the ids.
    """
    if "src_fid" in frame.columns:
        if fids is None and usable_ids(frame["src_fid"]):
            if not pd.api.types.is_integer_dtype(frame["src_fid"]):
                frame["src_fid"] = frame["src_fid"].astype("int64")
            return frame
        frame = set_aside_src_fid(frame, label, "the feature ids are" if fids is not None
                                  else None)
    if fids is None:
        index = frame.index
        usable = pd.api.types.is_integer_dtype(index) and index.is_unique
        fids = index.to_numpy() if usable else np.arange(len(frame))
    frame.insert(0, "src_fid", pd.array(np.asarray(fids), dtype="int64"))
    return frame


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
        if source._geometry_column_name not in source.columns:
            raise InputError("the input frame has no active geometry column; set one with "
                             "GeoDataFrame.set_geometry")
        frame = with_src_fid(source.copy(), label="the input frame")
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
