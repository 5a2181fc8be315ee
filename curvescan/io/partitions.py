"""Partitioned reading and streaming GeoPackage writing for partitioned scans.

A :class:`PartitionSource` describes the partitions of an input without reading it:

* a GeoParquet file or a folder of GeoParquet files: the partitions of
  :func:`dask_geopandas.read_parquet` (one per file, or per row group where dask-geopandas
  splits them), each read by the task that needs it;
* any other file GDAL reads (GeoPackage, Shapefile, FlatGeobuf, ...): ranges of
  ``partition_features`` features read with ``pyogrio`` (``skip_features``/``max_features``);
* a GeoDataFrame already in memory: row ranges of it.

The description is small and picklable, so it travels to dask workers and every worker
reads its own partition (geometries are never pickled from the client).

Results travel back the other way as :class:`ArrowLayer` (an Arrow table with WKB
geometry, made on the worker), which the client writes without building a geometry.
:class:`GpkgAppender` writes output layers partition by partition into one temporary
GeoPackage that replaces the target only when complete; :class:`ArrowSpill` keeps the
rows of a ranked layer on disk until every partition is in and the ranks are known.
"""

from __future__ import annotations

import os
import sqlite3
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Mapping

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyogrio
import shapely

from ..errors import DataSourceError, InputError
from ..read import set_aside_src_fid, usable_ids, with_src_fid
from .rtree import IndexBuilder
from .vector import (NO_INDEX, WHERE_NOT_HERE, _choose_layer, _first_line, check_output_path,
                     check_where, no_feature_left, read_ogr)

__all__ = ["PartitionSource", "open_partitions", "is_parquet", "GpkgAppender", "ArrowLayer",
           "ArrowSpill"]


def is_parquet(path: str) -> bool:
    """Whether ``path`` is a GeoParquet file or a folder holding ``.parquet`` files."""
    p = Path(path)
    if p.suffix.lower() in (".parquet", ".geoparquet"):
        return True
    return p.is_dir() and any(p.glob("*.parquet"))


@dataclass
class PartitionSource:
    """The partitions of one input; ``read(i)`` returns partition ``i`` as a GeoDataFrame.

    Attributes
    ----------
    kind : str
        ``parquet``, ``ogr`` or ``frame``.
    crs : pyproj.CRS or None
        The stored CRS (None when the input has none).
    bounds : ndarray (4,) or None
        Total bounds in the stored CRS, when known without reading the data.
    n : int
        Number of partitions.
    """

    kind: str
    path: str | None
    crs: Any
    bounds: np.ndarray | None
    n: int
    layer: str | None = None
    where: str | None = None  # OGR SQL filter of an ``ogr`` source
    ranges: list[tuple[int, int]] = field(default_factory=list)
    parts: list[Any] = field(default_factory=list)  # dask delayed objects or frames
    columns: list[str] = field(default_factory=list)
    geometry: str | None = None  # geometry column of a ``parquet`` source

    def payload(self, i: int) -> Any:
        """Return what a task needs besides this description to read partition ``i``.

        For an in-memory frame, the slice itself (possibly a future of a scattered slice,
        which dask resolves when it is passed as a task argument); else None.
        """
        return self.parts[i] if self.kind == "frame" else None

    def _read_wkb(self, i: int) -> gpd.GeoDataFrame:
        """Partition ``i`` of a GeoParquet folder read as plain Parquet (dask makes the same
        partitions), its invalid geometries missing (warned)."""
        import dask.dataframe as dd

        from .vector import geometries_from_wkb

        raw = dd.read_parquet(self.path).partitions[i].compute(scheduler="sync")
        geoms = geometries_from_wkb(np.asarray(raw.pop(self.geometry), dtype=object),
                                    stacklevel=4)
        return gpd.GeoDataFrame(raw, geometry=gpd.GeoSeries(geoms, index=raw.index),
                                crs=self.crs)

    def light(self) -> "PartitionSource":
        """Return the description without in-memory slices (cheap to send with every task)."""
        if self.kind != "frame":
            return self
        return PartitionSource(self.kind, self.path, self.crs, self.bounds, self.n,
                               columns=self.columns)

    def read(self, i: int, payload: Any = None) -> gpd.GeoDataFrame:
        """Partition ``i``; ``src_fid`` is present for ``ogr`` and ``frame`` sources."""
        if self.kind == "parquet":
            try:
                try:
                    frame = self.parts[i].compute(scheduler="sync")
                except shapely.errors.GEOSException:  # a geometry GEOS refuses
                    frame = self._read_wkb(i)
            except (ValueError, OSError) as exc:
                raise DataSourceError(_first_line(f"cannot read {self.path}: {exc}")) from None
            if "src_fid" in frame.columns and not usable_ids(frame["src_fid"]):
                frame = set_aside_src_fid(frame, self.path)  # rows numbered as without
            return frame.reset_index(drop=True)
        if self.kind == "ogr":
            skip, count = self.ranges[i]
            try:
                frame = read_ogr(self.path, layer=self.layer, skip_features=skip,
                                 max_features=count, where=self.where)
            except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError,
                    OSError) as exc:
                raise DataSourceError(_first_line(f"cannot read {self.path}: {exc}")) from None
            frame.index.name = None
            frame = with_src_fid(frame, frame.index.to_numpy(dtype="int64"), label=self.path)
            return frame.reset_index(drop=True)
        return payload if payload is not None else self.parts[i]


def open_partitions(source: Any, *, layer: str | None, partition_features: int,
                    client: Any = None, where: str | None = None) -> PartitionSource:
    """Describe the partitions of ``source`` (path or GeoDataFrame) without reading them.

    ``client`` (a dask distributed client) is used to scatter the slices of an in-memory
    frame to the workers. ``where`` (OGR SQL) filters a file read through GDAL; the
    partitions are ranges of the features it keeps.
    """
    if where is not None and (isinstance(source, gpd.GeoDataFrame) or is_parquet(str(source))):
        raise InputError(WHERE_NOT_HERE)
    if isinstance(source, gpd.GeoDataFrame):
        source = with_src_fid(source.copy(), label="the input frame")  # as load gives it
        starts = list(range(0, len(source), partition_features)) or [0]
        parts = [source.iloc[a:a + partition_features].reset_index(drop=True) for a in starts]
        if client is not None and not _in_process(client):
            parts = client.scatter(parts)
        from ..prepare import finite_bounds

        bounds = finite_bounds(source.geometry.values) if len(source) else None
        return PartitionSource("frame", None, source.crs, bounds, len(parts), parts=parts,
                               columns=list(source.columns))
    path = str(source)
    if not os.path.exists(path) and "://" not in path and not path.startswith("/vsi"):
        raise DataSourceError(f"input not found: {path}")
    if is_parquet(path):
        return _parquet(path)
    chosen = _choose_layer(path, layer)
    try:
        info = pyogrio.read_info(path, layer=chosen, force_feature_count=True,
                                 force_total_bounds=True)
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError) as exc:
        raise DataSourceError(_first_line(f"cannot read {path}: {exc}")) from None
    total = int(info["features"])
    if where is not None and total:
        # the features the filter keeps, and their extent (the working CRS is chosen from
        # it, as a single-process scan does from the filtered frame)
        try:
            _, env = pyogrio.read_bounds(path, layer=chosen, where=where)
        except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError):
            check_where(path, chosen, where)
            raise
        total = env.shape[1]
        env = np.where(np.isfinite(env), env, np.nan)  # a vertex at infinity: left out
        if total == 0:
            raise no_feature_left(where, path)
        info["total_bounds"] = (np.nanmin(env[0]), np.nanmin(env[1]), np.nanmax(env[2]),
                                np.nanmax(env[3]))
    if total == 0:
        raise InputError(f"{path} has no features")
    ranges = [(a, min(partition_features, total - a)) for a in range(0, total, partition_features)]
    crs = info.get("crs")
    bounds = np.asarray(info["total_bounds"], dtype=float) if "total_bounds" in info else None
    return PartitionSource("ogr", path, gpd.GeoSeries([], crs=crs).crs if crs else None,
                           bounds, len(ranges), layer=chosen, where=where, ranges=ranges,
                           columns=list(info["fields"]))


def _parquet(path: str) -> PartitionSource:
    import dask_geopandas

    try:
        ddf = dask_geopandas.read_parquet(path)
    except (ValueError, OSError) as exc:
        raise DataSourceError(_first_line(f"cannot read GeoParquet {path}: {exc}")) from None
    bounds = None
    spatial = getattr(ddf, "spatial_partitions", None)
    if spatial is not None and len(spatial) == ddf.npartitions:
        bounds = np.asarray(spatial.total_bounds, dtype=float)
    return PartitionSource("parquet", path, ddf.crs, bounds, ddf.npartitions,
                           parts=list(ddf.to_delayed()), columns=list(ddf.columns),
                           geometry=ddf.geometry.name)


def _in_process(client: Any) -> bool:
    cluster = getattr(client, "cluster", None)
    return bool(cluster is not None and getattr(cluster, "processes", True) is False)


@dataclass
class ArrowLayer:
    """One output layer of one partition as an Arrow table, ready for the GeoPackage.

    Made on the worker by :meth:`from_frame` (geometry to WKB, text columns to strings,
    the geometry type and CRS as :func:`pyogrio.write_dataframe` would decide them), so
    that the client only renumbers ids and hands the table to GDAL. :meth:`with_boxes`
    adds the envelopes the GeoPackage's spatial index needs, also on the worker.
    """

    table: pa.Table
    geometry_type: str | None
    crs: str | None
    path: str | None = None  # the Arrow IPC file that holds exactly this table, if any
    boxes: np.ndarray | None = None  # (rows, 4) float32 envelopes for the RTree, if known

    @classmethod
    def from_frame(cls, frame: pd.DataFrame) -> "ArrowLayer":
        """Convert a layer (GeoDataFrame, or DataFrame without geometry)."""
        frame = _text_columns(frame)
        geometry_type = crs = None
        if isinstance(frame, gpd.GeoDataFrame) and frame.geometry.name in frame.columns:
            name = frame.geometry.name
            values = np.asarray(frame.geometry.values, dtype=object)
            geometry_type, values = _geometry_type(values)
            if frame.crs is not None:
                epsg = frame.crs.to_epsg()
                crs = f"EPSG:{epsg}" if epsg else frame.crs.to_wkt("WKT1_GDAL")
            frame = pd.DataFrame(frame, copy=False).assign(
                **{name: pd.Series(shapely.to_wkb(values), index=frame.index, dtype=object)})
        table = pa.Table.from_pandas(pd.DataFrame(frame, copy=False), preserve_index=False)
        if geometry_type is not None:
            table = _set_type(table, name, pa.binary())
        for fld in table.schema:  # GDAL takes no null type: a string, as pyogrio makes it
            if pa.types.is_null(fld.type):
                table = _set_type(table, fld.name, pa.string())
        return cls(table, geometry_type, crs)

    def with_boxes(self) -> "ArrowLayer":
        """The layer with the envelopes of its geometries (:func:`rtree.index_boxes`)."""
        if self.geometry_type is None or self.boxes is not None:
            return self
        from .rtree import index_boxes

        return replace(self, boxes=index_boxes(self.table.column("geometry")))

    def to_file(self, path: str) -> "ArrowFile":
        """Write the table to the Arrow IPC file ``path``; return its small description
        (which carries the envelopes, if known).

        A worker process of a local cluster hands its result over this way: the client
        maps the file instead of receiving the table through a socket.
        """
        with pa.OSFile(path, "wb") as sink, pa.ipc.new_file(sink, self.table.schema) as w:
            w.write_table(self.table)
        return ArrowFile(path, self.table.num_rows, self.geometry_type, self.crs, self.boxes)

    def __len__(self) -> int:
        return self.table.num_rows

    @property
    def columns(self) -> list[str]:
        return self.table.column_names

    def shifted(self, shift: Mapping[str, int]) -> "ArrowLayer":
        """Return the layer with ``shift[c]`` added to each of its columns ``c``."""
        table = self.table
        for col, by in shift.items():
            if col in table.column_names and by:
                k = table.schema.get_field_index(col)
                table = table.set_column(k, table.schema.field(k),
                                         pc.add(table[col], pa.scalar(by, table[col].type)))
        return ArrowLayer(table, self.geometry_type, self.crs, boxes=self.boxes)

    def replaced(self, column: str, values: np.ndarray) -> "ArrowLayer":
        """Return the layer with ``column`` (which must exist) holding ``values``."""
        k = self.table.schema.get_field_index(column)
        field = self.table.schema.field(k)
        table = self.table.set_column(k, field, pa.array(values, type=field.type))
        return ArrowLayer(table, self.geometry_type, self.crs, boxes=self.boxes)

    def head(self, n: int) -> "ArrowLayer":
        """The first ``n`` rows."""
        return ArrowLayer(self.table.slice(0, n), self.geometry_type, self.crs,
                          boxes=None if self.boxes is None else self.boxes[:n])

    def frame(self, columns: list[str]) -> pd.DataFrame:
        """The given columns (those present) as a plain DataFrame, no geometry.

        A copy: a zero-copy column would keep alive the buffer it lies in, which may hold
        the whole partition (a received message, or a pandas block of every float column).
        """
        table = self.table.select([c for c in columns if c in self.table.column_names])
        return table.to_pandas().copy(deep=True)

    def empty(self) -> "ArrowLayer":
        """No rows, the same schema (and no reference to this layer's buffers)."""
        return ArrowLayer(self.table.schema.empty_table(), self.geometry_type, self.crs)

    def to_frame(self) -> gpd.GeoDataFrame | pd.DataFrame:
        """Back to a (Geo)DataFrame (a copy); text columns come back as Python strings."""
        frame = self.table.to_pandas().copy(deep=True)
        if self.geometry_type is None:
            return frame
        geom = shapely.from_wkb(frame.pop("geometry").to_numpy(dtype=object))
        return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geom, index=frame.index,
                                                              crs=self.crs))


@dataclass
class ArrowFile:
    """An :class:`ArrowLayer` written to an Arrow IPC file by :meth:`ArrowLayer.to_file`."""

    path: str
    n_rows: int
    geometry_type: str | None
    crs: str | None
    boxes: np.ndarray | None = None

    def open(self) -> ArrowLayer:
        """The layer, memory-mapped: its rows are read from the page cache, not copied."""
        with pa.memory_map(self.path) as src:
            table = pa.ipc.open_file(src).read_all()
        return ArrowLayer(table, self.geometry_type, self.crs, path=self.path,
                          boxes=self.boxes)


def _set_type(table: pa.Table, name: str, typ: pa.DataType) -> pa.Table:
    k = table.schema.get_field_index(name)
    return table.set_column(k, table.schema.field(k).with_type(typ), table[name].cast(typ))


def _geometry_type(values: np.ndarray) -> tuple[str, np.ndarray]:
    """The GeoPackage geometry type of ``values`` (as pyogrio decides it for GPKG)."""
    present = values[~(shapely.is_missing(values) | shapely.is_empty(values))]
    kinds = set(shapely.get_type_id(present).tolist())
    names = {1: "LineString", 5: "MultiLineString", 0: "Point", 3: "Polygon"}
    if kinds == {1, 5}:  # single and multi lines: GPKG wants one type, promote
        values = values.copy()
        single = shapely.get_type_id(values) == 1
        values[single] = [shapely.multilinestrings([g]) for g in values[single]]
        kind = "MultiLineString"
    elif len(kinds) == 1:
        kind = names.get(kinds.pop(), "Unknown")
    else:
        kind = "Unknown"
    if kind != "Unknown" and len(present) and shapely.has_z(present).any():
        kind += " Z"
    return kind, values


class ArrowSpill:
    """The rows of one layer in Arrow IPC files, appended by partition, read in any order.

    Ranked layers (``hazards``, ``winter``) are written only once every partition is in;
    until then their rows wait here on disk, and the client keeps only the ranking keys.
    A layer that already lies in a file of its own (:meth:`ArrowFile.open`, written by a
    worker) is adopted as it is, with the id shifts to apply when its rows are read;
    other layers are copied into a file of the spill.
    """

    def __init__(self, folder: str | os.PathLike, name: str) -> None:
        self.folder, self.name = os.fspath(folder), name
        self.sources: list[tuple[str, dict[str, int]]] = []  # (file, id shifts), in order
        self.writer: Any = None
        self.schema: pa.Schema | None = None
        self.geometry_type: str | None = None
        self.crs: str | None = None
        self.n = 0
        self.boxes: list[np.ndarray | None] = []  # envelopes of the appended rows, in order

    def append(self, layer: ArrowLayer, shift: Mapping[str, int] | None = None) -> None:
        """Append the rows of ``layer`` with ``shift[c]`` added to its columns ``c``
        (schema as the first layer's)."""
        table = layer.table
        if self.schema is None:
            self.schema, self.geometry_type, self.crs = table.schema, layer.geometry_type, \
                layer.crs
        if len(table) and not self.n:
            self.geometry_type = layer.geometry_type
        elif len(table) and layer.geometry_type != self.geometry_type:
            self.geometry_type = "Unknown"
        shift = {c: by for c, by in (shift or {}).items() if by and c in table.column_names}
        if layer.path is not None:  # the file holds the table as it is: keep it
            self._close()
            self.sources.append((layer.path, shift))
        else:
            table = _conform(ArrowLayer(table, None, None).shifted(shift).table, self.schema)
            if self.writer is None:
                path = os.path.join(self.folder, f"{self.name}.{len(self.sources)}.arrows")
                self.writer = pa.ipc.new_file(path, self.schema)
                self.sources.append((path, {}))
            self.writer.write_table(table)
        self.n += table.num_rows
        self.boxes.append(layer.boxes)

    def _close(self) -> None:
        if self.writer is not None:
            self.writer.close()
            self.writer = None

    def take(self, rows: np.ndarray) -> ArrowLayer:
        """Rows ``rows`` (in that order). Memory-mapped: only the rows read are loaded."""
        self._close()
        rows = np.asarray(rows, dtype=np.int64)
        batches = []  # (record batch, id shifts of its file)
        for path, shift in self.sources:
            with pa.memory_map(path) as src:
                reader = pa.ipc.open_file(src)
                batches += [(reader.get_batch(i), shift)
                            for i in range(reader.num_record_batches)]
        # take batch by batch: a take over the whole (chunked) table would first
        # concatenate every batch, that is copy every file into memory
        starts = np.concatenate([[0], np.cumsum([b.num_rows for b, _ in batches])])
        batch = np.searchsorted(starts, rows, side="right") - 1
        by_batch = np.argsort(batch, kind="stable")
        pieces = []
        for b, sel in _groups(batch, by_batch):
            record, shift = batches[b]
            piece = pa.Table.from_batches([record.take(pa.array(rows[sel] - starts[b]))])
            pieces.append(_conform(ArrowLayer(piece, None, None).shifted(shift).table,
                                   self.schema))
        table = (pa.concat_tables(pieces) if pieces else self.schema.empty_table())
        back = np.empty_like(by_batch)
        back[by_batch] = np.arange(len(rows))
        table = table.combine_chunks().take(pa.array(back))
        boxes = None
        if self.boxes and all(b is not None for b in self.boxes):
            if len(self.boxes) > 1:  # once: later takes find them joined
                self.boxes = [np.concatenate(self.boxes)]
            boxes = self.boxes[0][rows]
        return ArrowLayer(table, self.geometry_type, self.crs, boxes=boxes)


def _conform(table: pa.Table, schema: pa.Schema) -> pa.Table:
    """``table`` with the columns and types of ``schema``."""
    return table if table.schema == schema else table.select(schema.names).cast(schema)


def _groups(labels: np.ndarray, order: np.ndarray):
    """``(label, indices)`` for each label, ``order`` sorting ``labels`` (stable)."""
    sorted_labels = labels[order]
    cut = np.flatnonzero(np.diff(sorted_labels)) + 1
    for sel in np.split(order, cut) if len(order) else []:
        yield int(labels[sel[0]]), sel


class GpkgAppender:
    """Write output layers partition by partition into one GeoPackage, atomically.

    Layers are appended to a temporary file next to the target, in the order they first
    arrive; :meth:`close` writes any layer never seen (empty), then the last layers, and
    moves the file into place. :meth:`abort` removes the temporary file. :meth:`spill`
    gives an :class:`ArrowSpill` in a temporary folder next to the target, removed by
    :meth:`close` and :meth:`abort`.
    """

    def __init__(self, path: str | os.PathLike, *, overwrite: bool,
                 descriptions: Mapping[str, str]) -> None:
        self.target = check_output_path(path, overwrite, suffix=".gpkg")
        fd, tmp = tempfile.mkstemp(prefix=f".{self.target.name}.", suffix=".part.gpkg",
                                   dir=self.target.parent)
        os.close(fd)
        os.unlink(tmp)
        self.tmp = tmp
        self.spill_dir: str | None = None
        self.descriptions = dict(descriptions)
        self.written: set[str] = set()
        self.templates: dict[str, Any] = {}
        self.index: IndexBuilder | None = None

    def _folder(self) -> str:
        if self.spill_dir is None:
            self.spill_dir = tempfile.mkdtemp(prefix=f".{self.target.name}.",
                                              suffix=".spill", dir=self.target.parent)
        return self.spill_dir

    def folder(self) -> str:
        """The temporary folder next to the target (made on first use), removed by
        :meth:`close` and :meth:`abort`: spill files, and the result files of workers."""
        return self._folder()

    def spill(self, name: str) -> ArrowSpill:
        """A new spill file for layer ``name``."""
        return ArrowSpill(self._folder(), name)

    def append(self, name: str, frame: pd.DataFrame | ArrowLayer) -> None:
        """Append the rows of ``frame`` to layer ``name`` (created on first rows)."""
        if not isinstance(frame, ArrowLayer):
            frame = _text_columns(frame)
        if len(frame) == 0:
            self.templates.setdefault(name, frame.empty() if isinstance(frame, ArrowLayer)
                                      else frame)
            return
        kwargs: dict[str, Any] = {"layer": name, "driver": "GPKG",
                                  "append": os.path.exists(self.tmp)}
        if not kwargs["append"]:  # GeoPackage 1.3, as export.write_gpkg writes it
            kwargs["dataset_options"] = {"VERSION": "1.3"}
        if name not in self.written:  # spatial indexes are built once, in close()
            kwargs["layer_options"] = NO_INDEX
            if name in self.descriptions:
                kwargs["layer_metadata"] = {"DESCRIPTION": self.descriptions[name]}
        try:
            if isinstance(frame, ArrowLayer):
                geo = {} if frame.geometry_type is None else {
                    "geometry_name": "geometry", "geometry_type": frame.geometry_type,
                    "crs": frame.crs}
                pyogrio.write_arrow(frame.table, self.tmp, **geo, **kwargs)
                if frame.geometry_type is not None:
                    if self.index is None:
                        self.index = IndexBuilder(self._folder())
                    self.index.add(name, frame.table.column("geometry"), frame.boxes)
            else:
                pyogrio.write_dataframe(frame if isinstance(frame, gpd.GeoDataFrame)
                                        else pd.DataFrame(frame), self.tmp, use_arrow=True,
                                        **kwargs)
        except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError,
                OSError) as exc:
            self.abort()
            raise DataSourceError(_first_line(f"cannot write {self.target}: {exc}")) from None
        self.written.add(name)

    def close(self, last: Mapping[str, pd.DataFrame],
              finish: Callable[[str], Any] | None = None) -> Path:
        """Write empty layers never filled and the ``last`` layers, call ``finish(path)``
        on the temporary file (layer styles), then move it into place."""
        for name, frame in self.templates.items():
            if name not in self.written:
                self._write_empty(name, frame)
        for name, frame in last.items():
            self.append(name, frame)
        try:
            if self.index is not None:
                self.index.build(self.tmp)
            else:
                IndexBuilder().build(self.tmp)
        except sqlite3.Error as exc:
            self.abort()
            raise DataSourceError(_first_line(f"cannot write {self.target}: {exc}")) from None
        except BaseException:
            self.abort()
            raise
        if finish is not None:
            finish(self.tmp)
        os.replace(self.tmp, self.target)
        self._drop_spill()
        return self.target

    def _write_empty(self, name: str, frame: pd.DataFrame | ArrowLayer) -> None:
        if isinstance(frame, ArrowLayer):
            frame = frame.to_frame()
        kwargs: dict[str, Any] = {"layer": name, "driver": "GPKG",
                                  "append": os.path.exists(self.tmp)}
        if not kwargs["append"]:
            kwargs["dataset_options"] = {"VERSION": "1.3"}
        if name in self.descriptions:
            kwargs["layer_metadata"] = {"DESCRIPTION": self.descriptions[name]}
        pyogrio.write_dataframe(frame, self.tmp, layer_options=NO_INDEX, **kwargs)
        self.written.add(name)

    def abort(self) -> None:
        """Remove the temporary file (the target is left as it was)."""
        if os.path.exists(self.tmp):
            os.unlink(self.tmp)
        self._drop_spill()

    def _drop_spill(self) -> None:
        if self.spill_dir is not None:
            import shutil

            shutil.rmtree(self.spill_dir, ignore_errors=True)
            self.spill_dir = None


def _text_columns(frame: pd.DataFrame) -> pd.DataFrame:
    obj = [c for c in frame.columns if frame[c].dtype == object and c != "geometry"]
    if not obj:
        return frame
    return frame.assign(**{c: frame[c].astype("string") for c in obj})
