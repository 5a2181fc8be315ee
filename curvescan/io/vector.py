"""Vector input and output: the only module that talks to pyogrio.

Reading uses pyogrio with Arrow; writing goes to a temporary file next to the target and
is moved into place only when complete, so a failed run never destroys a good output.
"""

from __future__ import annotations

import itertools
import os
import sqlite3
import tempfile
import warnings
from pathlib import Path
from typing import Any, Callable, Mapping

import geopandas as gpd
import pandas as pd
import pyogrio
import pyproj
import shapely
from pyogrio.errors import DataLayerError, DataSourceError as _PyogrioSourceError

from ..errors import DataQualityWarning, DataSourceError, InputError, OutputExistsError
from ..read import with_src_fid
from ..recording import warn_counted
from . import curved
from .rtree import IndexBuilder

__all__ = ["read_layer", "list_line_layers", "write_layers", "check_output_path", "WkbLayer"]

#: GPX layers that hold lines, in order of preference.
_GPX_LINE_LAYERS = ("tracks", "routes")
#: What GDAL reports for the GeoPackage's "undefined" systems (srs_id 0 and -1): no CRS.
_UNDEFINED_SRS = ("Undefined geographic SRS", "Undefined Cartesian SRS")


def _is_gpx(path: str) -> bool:
    return str(path).lower().endswith(".gpx")


def list_line_layers(path: str) -> list[str]:
    """Return the names of the layers in ``path`` whose geometry type is a line type."""
    try:
        layers = pyogrio.list_layers(path)
    except (_PyogrioSourceError, OSError) as exc:
        raise DataSourceError(_first_line(f"cannot open {path}: {exc}")) from None
    return [str(name) for name, gtype in layers if gtype is None or "Line" in str(gtype)]


def _choose_layer(path: str, layer: str | None) -> str | None:
    try:
        layers = pyogrio.list_layers(path)
    except (_PyogrioSourceError, OSError) as exc:
        raise DataSourceError(_first_line(f"cannot open {path}: {exc}")) from None
    names = [str(n) for n, _ in layers]
    if layer is not None:
        if layer not in names:
            raise InputError(f"layer {layer!r} not found in {path}; layers: {', '.join(names)}")
        return layer
    if _is_gpx(path):
        for name in _GPX_LINE_LAYERS:
            if name in names and pyogrio.read_info(
                    path, layer=name, force_feature_count=True)["features"] > 0:
                return name
        raise InputError(f"{path} has no tracks or routes (GPX waypoints are not lines)")
    lines = [str(n) for n, g in layers if g is not None and "Line" in str(g)]
    if len(names) == 1:
        return names[0]
    if len(lines) == 1:
        return lines[0]
    if not lines:
        raise InputError(f"{path} has no line layer; layers: {', '.join(names)}")
    warnings.warn(
        f"{path} has several line layers ({', '.join(lines)}); reading {lines[0]!r} "
        "(choose with --layer)",
        DataQualityWarning,
        stacklevel=3,
    )
    return lines[0]


def read_layer(path: str | os.PathLike, /, layer: str | None = None,
               where: str | None = None) -> gpd.GeoDataFrame:
    """Read one vector layer into a GeoDataFrame with a ``src_fid`` column.

    Parameters
    ----------
    path : str or path-like
        Any file or folder pyogrio reads: GeoPackage, GeoParquet, Shapefile, GeoJSON,
        FlatGeobuf, GPX (tracks, else routes).
    layer : str, optional
        Layer name; by default the only layer, or the only line layer.
    where : str, optional
        OGR SQL WHERE clause; not for GeoParquet.

    Returns
    -------
    GeoDataFrame
        The features in file order; ``src_fid`` holds the source feature id (the
        GeoPackage/Shapefile FID, else the 0-based row number).

    Raises
    ------
    DataSourceError
        The path does not exist or cannot be read.
    InputError
        The layer does not exist, or the source has no line layer.
    """
    path = str(path)
    if not os.path.exists(path) and "://" not in path and not path.startswith("/vsi"):
        raise DataSourceError(f"input not found: {path}")
    if path.lower().endswith((".parquet", ".geoparquet")) or (
        os.path.isdir(path) and any(p.suffix == ".parquet" for p in Path(path).glob("*.parquet"))
    ):
        if where is not None:
            raise InputError(WHERE_NOT_HERE)
        return _read_parquet(path)
    chosen = _choose_layer(path, layer)
    try:
        frame = read_ogr(path, layer=chosen, where=where)
    except (_PyogrioSourceError, DataLayerError, OSError) as exc:
        if where is not None:
            check_where(path, chosen, where)
        raise DataSourceError(_first_line(f"cannot read {path}: {exc}")) from None
    frame.index.name = None
    if frame.crs is not None and frame.crs.name in _UNDEFINED_SRS:
        frame = frame.set_crs(None, allow_override=True)  # GeoPackage srs_id 0 / -1
    frame = with_src_fid(frame, frame.index.to_numpy(dtype="int64"), label=path)
    return frame.reset_index(drop=True)


def read_ogr(path: str, **kwargs: Any) -> gpd.GeoDataFrame:
    """:func:`pyogrio.read_dataframe` (Arrow, FIDs as the index), curved geometries too.

    Shapely reads only linear geometries; a layer holding circular arcs
    (CircularString, CompoundCurve, MultiCurve) is read again as raw WKB and its arcs are
    stroked into lines (:mod:`curvescan.io.curved`), with a counted warning.
    """
    try:
        return pyogrio.read_dataframe(path, use_arrow=True, fid_as_index=True, **kwargs)
    except NotImplementedError:  # "Nonlinear geometry types are not currently supported"
        pass
    except shapely.errors.GEOSException:  # a geometry GEOS refuses (a line of one point)
        pass
    meta, table = pyogrio.read_arrow(path, return_fids=True, **kwargs)
    geom_name = meta["geometry_name"] or "wkb_geometry"
    names = table.column_names
    fid_name = names[0]  # return_fids puts the FIDs first
    blobs = table[geom_name].to_numpy(zero_copy_only=False)
    geoms, counts = curved.from_wkb(blobs)
    _warn_unreadable(blobs, geoms, stacklevel=3)
    frame = table.drop_columns([fid_name, geom_name]).to_pandas()
    frame.index = pd.Index(table[fid_name].to_numpy(), name=None)
    if counts:
        what = ", ".join(f"{n} {k}" for k, n in sorted(counts.items()))
        warnings.warn(f"{sum(counts.values())} curved geometries ({what}) read as lines: "
                      f"arcs stroked every {curved.ARC_STEP_DEG:g} degree of turn",
                      DataQualityWarning, stacklevel=2)
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, index=frame.index),
                            crs=meta["crs"])


def geometries_from_wkb(blobs: Any, stacklevel: int = 2) -> Any:
    """Geometries of WKB ``blobs``; those GEOS refuses (a line of one point) become missing,
    counted in a warning."""
    geoms, _ = curved.from_wkb(blobs)
    _warn_unreadable(blobs, geoms, stacklevel + 1)
    return geoms


def _warn_unreadable(blobs: Any, geoms: Any, stacklevel: int) -> None:
    unreadable = int(sum(b is not None for b in blobs[pd.isna(geoms)]))
    if unreadable:
        warn_counted("{unreadable} geometries could not be read (invalid, e.g. a line of one "
                     "point) and are skipped as missing", DataQualityWarning,
                     {"unreadable": unreadable}, stacklevel=stacklevel + 1)


#: Why ``--where`` is refused on a source GDAL does not read.
WHERE_NOT_HERE = ("--where filters files read through GDAL, not GeoParquet or a GeoDataFrame; "
                  "filter those before the scan")


def no_feature_left(where: str, label: str) -> InputError:
    """The error for a ``--where`` that keeps no feature of ``label``."""
    return InputError(f"--where {where!r} leaves no feature of {label}")


def check_where(path: str, layer: Any, where: str) -> None:
    """Raise a one-line InputError where ``where`` is not a filter the layer accepts."""
    try:
        pyogrio.read_bounds(path, layer=layer, where=where, max_features=1)
    except (_PyogrioSourceError, DataLayerError, OSError, ValueError) as exc:
        raise InputError(_first_line(f"--where {where!r} is not a filter {path} accepts: "
                                     f"{exc}")) from None


def _read_parquet(path: str) -> gpd.GeoDataFrame:
    try:
        try:
            frame = gpd.read_parquet(path)
        except shapely.errors.GEOSException:  # a geometry GEOS refuses (a line of one point)
            frame = _read_parquet_wkb(path)
    except (ValueError, OSError, KeyError) as exc:
        raise DataSourceError(_first_line(f"cannot read GeoParquet {path}: {exc}")) from None
    return with_src_fid(frame.reset_index(drop=True), label=path)


def _read_parquet_wkb(path: str) -> gpd.GeoDataFrame:
    """A WKB-encoded GeoParquet file whose invalid geometries become missing (warned)."""
    import json

    import pyarrow.parquet as pq

    table = pq.read_table(path)
    meta = json.loads(table.schema.metadata[b"geo"])
    name = meta["primary_column"]
    crs = meta["columns"][name].get("crs", "OGC:CRS84")  # the GeoParquet default
    geoms = geometries_from_wkb(table[name].to_numpy(zero_copy_only=False), stacklevel=4)
    frame = table.drop_columns([name]).to_pandas().reset_index(drop=True)
    crs = None if crs is None else pyproj.CRS.from_user_input(crs)
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, index=frame.index), crs=crs)


def check_output_path(path: str | os.PathLike, overwrite: bool,
                      suffix: str | None = None) -> Path:
    """Refuse an existing output without ``overwrite``, a folder that cannot be written,
    and (with ``suffix``, e.g. ``.gpkg``) a name with another extension."""
    target = Path(path)
    if suffix is not None and target.suffix.lower() != suffix:
        raise InputError(f"the output is a GeoPackage: give a file name ending in {suffix}, "
                         f"not {target.name!r}")
    if target.exists() and not overwrite:
        raise OutputExistsError(f"output exists: {target} (use --overwrite to replace it)")
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise DataSourceError(f"output folder does not exist: {folder}")
    if not os.access(folder, os.W_OK):
        raise DataSourceError(f"output folder is not writable: {folder}")
    try:  # os.access trusts the permission bits; a read-only mount or ACL still refuses
        fd, probe = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".probe", dir=folder)
    except OSError as exc:
        raise DataSourceError(f"output folder is not writable: {folder} "
                              f"({exc.strerror or exc})") from None
    os.close(fd)
    os.unlink(probe)
    return target


def write_layers(
    path: str | os.PathLike,
    layers: Mapping[str, pd.DataFrame | WkbLayer],
    *,
    overwrite: bool = False,
    layer_metadata: Mapping[str, Mapping[str, str]] | None = None,
    finish: Callable[[str], Any] | None = None,
) -> Path:
    """Write several layers into one GeoPackage, atomically.

    Layers are written in the given order to a temporary file in the target's folder;
    ``finish(temporary_path)`` may then add to it (layer styles), and only then does the
    file replace the target in one rename. Frames without geometry become attribute
    tables.
    """
    target = check_output_path(path, overwrite, suffix=".gpkg")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part.gpkg", dir=target.parent)
    os.close(fd)
    os.unlink(tmp)
    index = IndexBuilder()
    try:
        for name, frame in layers.items():
            meta = dict((layer_metadata or {}).get(name, {}))
            kwargs = {"layer": name, "driver": "GPKG", "append": os.path.exists(tmp),
                      "layer_options": NO_INDEX}
            if not kwargs["append"]:  # GeoPackage 1.3: desktop GIS on GDAL < 3.7 warn on 1.4
                kwargs["dataset_options"] = {"VERSION": "1.3"}
            if meta:
                kwargs["layer_metadata"] = meta
            stream = _arrow_stream(frame, index, name)
            if stream is not None:  # batches: never the whole layer as WKB at once
                reader, geometry = stream
                pyogrio.write_arrow(reader, tmp, **geometry, **kwargs)
            elif isinstance(frame, WkbLayer):
                pyogrio.write_dataframe(frame.to_geodataframe(), tmp, use_arrow=True, **kwargs)
            elif isinstance(frame, gpd.GeoDataFrame):
                pyogrio.write_dataframe(frame, tmp, use_arrow=True, **kwargs)
            else:
                pyogrio.write_dataframe(
                    pd.DataFrame(frame), tmp, use_arrow=True, **kwargs
                )
        index.build(tmp)
        if finish is not None:
            finish(tmp)
        os.replace(tmp, target)
    except Exception as exc:
        if os.path.exists(tmp):
            os.unlink(tmp)
        if isinstance(exc, (_PyogrioSourceError, DataLayerError, OSError, sqlite3.Error)):
            raise DataSourceError(_first_line(f"cannot write {target}: {exc}")) from None
        raise
    return target


#: Rows per Arrow batch when writing a layer: bounds the memory the write needs.
WRITE_BATCH_ROWS = 65536

#: Layer creation options of every output layer: no spatial index while rows are written;
#: :mod:`curvescan.io.rtree` builds it once all rows are in (GDAL would otherwise update
#: it row by row on every append to an existing layer).
NO_INDEX = {"SPATIAL_INDEX": "NO"}

#: Layer geometry type names, by shapely type id.
_TYPE_NAMES = {0: "Point", 1: "LineString", 2: "LineString", 3: "Polygon",
               4: "MultiPoint", 5: "MultiLineString", 6: "MultiPolygon"}


class WkbLayer:
    """A layer whose geometries are WKB (an Arrow binary column): written without GEOS.

    ``table`` holds the attribute columns and the WKB in column ``geometry`` (last);
    every geometry is of ``geometry_type``. :meth:`to_geodataframe` builds the shapely
    geometries, for readers who want them.
    """

    def __init__(self, table: pd.DataFrame, crs: Any, geometry_type: str) -> None:
        self.table = table
        self.crs = crs
        self.geometry_type = geometry_type

    def __len__(self) -> int:
        return len(self.table)

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """The layer as a GeoDataFrame (shapely geometries decoded from the WKB)."""
        import shapely

        geoms = shapely.from_wkb(self.table["geometry"].to_numpy(dtype=object))
        frame = self.table.drop(columns="geometry")
        frame["geometry"] = gpd.GeoSeries(geoms, index=frame.index, crs=self.crs)
        return gpd.GeoDataFrame(frame, geometry="geometry", crs=self.crs, copy=False)


def _gdal_crs(crs: Any) -> str | None:
    """The CRS as pyogrio hands it to GDAL: ``EPSG:n`` where there is a code, else WKT1."""
    if crs is None:
        return None
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else crs.to_wkt("WKT1_GDAL")


def _arrow_stream(frame: Any, index: Any = None,
                  name: str = "") -> tuple[Any, dict[str, Any]] | None:
    """The layer as a stream of Arrow batches with WKB geometry, and its geometry fields.

    Covers :class:`WkbLayer` and layers of one geometry type whose columns Arrow converts
    unambiguously (no ``object`` columns); returns None for anything else, which
    pyogrio's own conversion writes. The fields and values written are those
    ``pyogrio.write_dataframe`` writes. ``index`` (a :class:`curvescan.io.rtree.IndexBuilder`)
    records the envelopes of the batches as layer ``name``.
    """
    import numpy as np
    import pyarrow as pa
    import shapely

    wkb_given = isinstance(frame, WkbLayer)
    if wkb_given:
        if len(frame) == 0:
            return None
        geometry: dict[str, Any] = {"geometry_name": "geometry",
                                    "geometry_type": frame.geometry_type,
                                    "crs": _gdal_crs(frame.crs)}
        geom_name, frame = "geometry", frame.table
    else:
        geom_name = None
        if isinstance(frame, gpd.GeoDataFrame):
            try:
                geom_name = frame.geometry.name
            except AttributeError:  # no active geometry column
                return None
    attrs = [c for c in frame.columns if c != geom_name]
    if any(frame[c].dtype == object for c in attrs) or len(frame) == 0:
        return None
    if geom_name is not None and not wkb_given:
        values = np.asarray(frame.geometry.values)
        types = np.unique(shapely.get_type_id(values))
        types = types[types >= 0]
        if len(types) != 1 or int(types[0]) not in _TYPE_NAMES:
            return None
        has_z = bool(np.any(shapely.has_z(values)))
        geometry = {"geometry_name": geom_name,
                    "geometry_type": _TYPE_NAMES[int(types[0])] + (" Z" if has_z else ""),
                    "crs": _gdal_crs(frame.crs)}
    elif geom_name is None:
        geometry = {}

    def batch(start: int) -> pa.RecordBatch:
        part = frame.iloc[start:start + WRITE_BATCH_ROWS]
        cols = attrs + [geom_name] if wkb_given else attrs  # WKB is Arrow binary already
        table = pa.Table.from_pandas(pd.DataFrame(part[cols], copy=False),
                                     preserve_index=False)
        for i, field in enumerate(table.schema):  # GDAL has no Arrow null type
            if pa.types.is_null(field.type):
                table = table.set_column(i, field.with_type(pa.string()),
                                         table[i].cast(pa.string()))
        if geom_name is not None and not wkb_given:
            wkb = shapely.to_wkb(np.asarray(part.geometry.values))
            table = table.append_column(geom_name, pa.array(wkb, type=pa.binary()))
        out = table.combine_chunks().to_batches()[0]
        if index is not None and geom_name is not None:
            index.add(name, out.column(geom_name))
        return out

    first = batch(0)
    rest = (batch(start) for start in range(WRITE_BATCH_ROWS, len(frame), WRITE_BATCH_ROWS))
    reader = pa.RecordBatchReader.from_batches(first.schema, itertools.chain([first], rest))
    return reader, geometry


def _first_line(text: str) -> str:
    return text.strip().splitlines()[0] if text.strip() else text
