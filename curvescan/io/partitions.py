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
:class:`GpkgAppender` writes output layers partition by partition into one temporary
GeoPackage that replaces the target only when complete.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio

from ..errors import DataSourceError, InputError
from .vector import _choose_layer, _first_line, check_output_path

__all__ = ["PartitionSource", "open_partitions", "is_parquet", "GpkgAppender"]


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
    ranges: list[tuple[int, int]] = field(default_factory=list)
    parts: list[Any] = field(default_factory=list)  # dask delayed objects or frames
    columns: list[str] = field(default_factory=list)

    def payload(self, i: int) -> Any:
        """Return what a task needs besides this description to read partition ``i``.

        For an in-memory frame, the slice itself (possibly a future of a scattered slice,
        which dask resolves when it is passed as a task argument); else None.
        """
        return self.parts[i] if self.kind == "frame" else None

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
                frame = self.parts[i].compute(scheduler="sync")
            except (ValueError, OSError) as exc:
                raise DataSourceError(_first_line(f"cannot read {self.path}: {exc}")) from None
            return frame.reset_index(drop=True)
        if self.kind == "ogr":
            skip, count = self.ranges[i]
            try:
                frame = pyogrio.read_dataframe(self.path, layer=self.layer, use_arrow=True,
                                               fid_as_index=True, skip_features=skip,
                                               max_features=count)
            except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError,
                    OSError) as exc:
                raise DataSourceError(_first_line(f"cannot read {self.path}: {exc}")) from None
            frame.index.name = None
            frame.insert(0, "src_fid", frame.index.to_numpy(dtype="int64"))
            return frame.reset_index(drop=True)
        return payload if payload is not None else self.parts[i]


def open_partitions(source: Any, *, layer: str | None, partition_features: int,
                    client: Any = None) -> PartitionSource:
    """Describe the partitions of ``source`` (path or GeoDataFrame) without reading them.

    ``client`` (a dask distributed client) is used to scatter the slices of an in-memory
    frame to the workers.
    """
    if isinstance(source, gpd.GeoDataFrame):
        if "src_fid" not in source.columns:  # the ids curvescan.read.load gives a frame
            index = source.index
            fids = index.to_numpy() if pd.api.types.is_integer_dtype(index) else range(len(source))
            source = source.copy()
            source.insert(0, "src_fid", pd.array(fids, dtype="int64"))
        starts = list(range(0, len(source), partition_features)) or [0]
        parts = [source.iloc[a:a + partition_features].reset_index(drop=True) for a in starts]
        if client is not None and not _in_process(client):
            parts = client.scatter(parts)
        bounds = source.total_bounds if len(source) else None
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
    if total == 0:
        raise InputError(f"{path} has no features")
    ranges = [(a, min(partition_features, total - a)) for a in range(0, total, partition_features)]
    crs = info.get("crs")
    bounds = np.asarray(info["total_bounds"], dtype=float) if "total_bounds" in info else None
    return PartitionSource("ogr", path, gpd.GeoSeries([], crs=crs).crs if crs else None,
                           bounds, len(ranges), layer=chosen, ranges=ranges,
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
                           parts=list(ddf.to_delayed()), columns=list(ddf.columns))


def _in_process(client: Any) -> bool:
    cluster = getattr(client, "cluster", None)
    return bool(cluster is not None and getattr(cluster, "processes", True) is False)


class GpkgAppender:
    """Write output layers partition by partition into one GeoPackage, atomically.

    Layers are appended to a temporary file next to the target, in the order they first
    arrive; :meth:`close` writes any layer never seen (empty), then the last layers, and
    moves the file into place. :meth:`abort` removes the temporary file.
    """

    def __init__(self, path: str | os.PathLike, *, overwrite: bool,
                 descriptions: Mapping[str, str]) -> None:
        self.target = check_output_path(path, overwrite)
        fd, tmp = tempfile.mkstemp(prefix=f".{self.target.name}.", suffix=".part.gpkg",
                                   dir=self.target.parent)
        os.close(fd)
        os.unlink(tmp)
        self.tmp = tmp
        self.descriptions = dict(descriptions)
        self.written: set[str] = set()
        self.templates: dict[str, pd.DataFrame] = {}

    def append(self, name: str, frame: pd.DataFrame) -> None:
        """Append the rows of ``frame`` to layer ``name`` (created on first rows)."""
        frame = _text_columns(frame)
        if len(frame) == 0:
            self.templates.setdefault(name, frame)
            return
        kwargs: dict[str, Any] = {"layer": name, "driver": "GPKG",
                                  "append": os.path.exists(self.tmp)}
        if name not in self.written and name in self.descriptions:
            kwargs["layer_metadata"] = {"DESCRIPTION": self.descriptions[name]}
        try:
            pyogrio.write_dataframe(frame if isinstance(frame, gpd.GeoDataFrame)
                                    else pd.DataFrame(frame), self.tmp, use_arrow=True,
                                    **kwargs)
        except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError,
                OSError) as exc:
            self.abort()
            raise DataSourceError(_first_line(f"cannot write {self.target}: {exc}")) from None
        self.written.add(name)

    def close(self, last: Mapping[str, pd.DataFrame]) -> Path:
        """Write empty layers never filled and the ``last`` layers; move into place."""
        for name, frame in self.templates.items():
            if name not in self.written:
                self.written.discard(name)
                self._write_empty(name, frame)
        for name, frame in last.items():
            self.append(name, frame)
        os.replace(self.tmp, self.target)
        return self.target

    def _write_empty(self, name: str, frame: pd.DataFrame) -> None:
        kwargs: dict[str, Any] = {"layer": name, "driver": "GPKG",
                                  "append": os.path.exists(self.tmp)}
        if name in self.descriptions:
            kwargs["layer_metadata"] = {"DESCRIPTION": self.descriptions[name]}
        pyogrio.write_dataframe(frame, self.tmp, **kwargs)
        self.written.add(name)

    def abort(self) -> None:
        """Remove the temporary file (the target is left as it was)."""
        if os.path.exists(self.tmp):
            os.unlink(self.tmp)


def _text_columns(frame: pd.DataFrame) -> pd.DataFrame:
    obj = [c for c in frame.columns if frame[c].dtype == object and c != "geometry"]
    if not obj:
        return frame
    return frame.assign(**{c: frame[c].astype("string") for c in obj})
