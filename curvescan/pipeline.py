"""The scan pipeline: read -> prepare -> geometry -> terrain -> physics -> assess -> export.

:func:`scan` runs every stage in memory and returns a :class:`ScanResult` holding the
output layers as GeoDataFrames; :meth:`ScanResult.to_gpkg` writes them.
"""

from __future__ import annotations

import ctypes
import logging
import os
import time
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import Any, Callable

import geopandas as gpd
import numpy as np
import pandas as pd

from . import assess, physics, terrain
from ._version import __version__
from .attributes import (
    first_value,
    orient_to_features,
    reduce_rows,
    reversed_at,
    rows_on,
    sorted_unique,
    src_fid_text,
)
from .cautions import CAUTION
from .config import SCAN_PARAMETERS, make_config
from .errors import DataQualityWarning, InputError
from .export import (CONTRACT_FIELDS, check_output_crs, order_columns, output_crs, run_table,
                     write_gpkg)
from .geometry import chord_tolerance_for, find_curves
from .geometry.pieces import substrings
from .geometry.resample import global_measure, interpolate
from .io.vector import WkbLayer
from .prepare import point_scale, prepare, roundabout_rows
from .read import load
from .recording import describe, merge, record_warnings, warn_again, warn_counted
from .speeds import parse_speeds
from .terrain_attr import auto_bare_percent

__all__ = ["scan", "ScanResult"]

log = logging.getLogger(__name__)

Progress = Callable[[str, float], None]


@dataclass
class ScanResult:
    """The layers of one scan.

    Attributes
    ----------
    curves, segments, hazards : GeoDataFrame
        The output layers (DESIGN.md section 4), in the output CRS.
    run : dict
        The run record (version, inputs, CRS, parameters, friction, counts, warnings,
        skipped input rows, cautions).
    extra : dict of str to DataFrame
        Further layers written after the contract layers (e.g. ``winter``).
    """

    curves: gpd.GeoDataFrame
    segments: gpd.GeoDataFrame
    hazards: gpd.GeoDataFrame
    run: dict[str, Any]
    extra: dict[str, pd.DataFrame] = field(default_factory=dict)
    descriptions: dict[str, str] = field(default_factory=dict)

    def layers(self) -> dict[str, Any]:
        """All layers in write order, the run record as a one-row table last.

        Layers still held as WKB (:class:`~curvescan.io.vector.WkbLayer`) are returned as
        such: writing them needs no shapely geometries.
        """
        stored = self.__dict__
        out: dict[str, Any] = {name: stored[f"_{name}"]
                               for name in ("curves", "segments", "hazards")}
        out.update(stored["_extra"])
        out["run"] = run_table(self.run)
        return out

    def layer_descriptions(self) -> dict[str, str]:
        """A one-line description per layer, stored in the GeoPackage metadata."""
        base = {
            "curves": "Horizontal curves found, one row per curve. " + CAUTION,
            "segments": "Every chain cut into tangent, transition and curve pieces.",
            "hazards": "Curves whose posted speed exceeds a computed limit. " + CAUTION,
            "run": "Record of the run: inputs, parameters, friction, counts, warnings.",
        }
        base.update(self.descriptions)
        return base

    def to_gpkg(self, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
        """Write all layers to one GeoPackage (atomically); return its path."""
        return write_gpkg(self, path, overwrite=overwrite)

    def after_write(self, path: str | os.PathLike) -> None:
        """Store layer styles in the written GeoPackage (see :mod:`curvescan.styles`)."""
        from .styles import write_styles

        write_styles(path, {name: getattr(layer, "table", layer)
                            for name, layer in self.layers().items()})

    def attributes(self, name: str) -> pd.DataFrame:
        """The fields of layer ``name`` (``curves``, ``hazards``, ``winter``, ...) without
        decoding its geometries."""
        stored = self.__dict__
        layer = stored[f"_{name}"] if f"_{name}" in stored else stored["_extra"][name]
        return getattr(layer, "table", layer)


def _layer_property(name: str) -> property:
    """A ScanResult layer: held as given, made a GeoDataFrame the first time it is read."""
    key = f"_{name}"

    def get(self: ScanResult) -> Any:
        layer = self.__dict__[key]
        if isinstance(layer, WkbLayer):
            layer = self.__dict__[key] = layer.to_geodataframe()
        return layer

    def put(self: ScanResult, value: Any) -> None:
        self.__dict__[key] = value

    return property(get, put, doc=f"The ``{name}`` layer (GeoDataFrame).")


def _extra_property() -> property:
    def get(self: ScanResult) -> dict[str, Any]:
        extra = self.__dict__["_extra"]
        if any(isinstance(v, WkbLayer) for v in extra.values()):
            extra = self.__dict__["_extra"] = {
                k: v.to_geodataframe() if isinstance(v, WkbLayer) else v
                for k, v in extra.items()}
        return extra

    def put(self: ScanResult, value: dict[str, Any]) -> None:
        self.__dict__["_extra"] = value

    return property(get, put, doc="Further layers (GeoDataFrames), e.g. ``winter``.")


# Layers are stored as the scan made them (WKB, see WkbLayer) and decoded on first read,
# so that a scan written straight to a GeoPackage never builds shapely geometries.
for _name in ("curves", "segments", "hazards"):
    setattr(ScanResult, _name, _layer_property(_name))
ScanResult.extra = _extra_property()  # type: ignore[assignment]


def scan(source: Any, *, dem: str | os.PathLike | None = None,
         progress: Progress | None = None, **parameters: Any) -> ScanResult:
    """Find and assess every horizontal curve of a road layer.

    Parameters
    ----------
    source : path or GeoDataFrame
        The road centreline layer (GeoPackage, GeoParquet, Shapefile, GeoJSON, FlatGeobuf,
        GPX tracks or routes) or a GeoDataFrame with a CRS.
    dem : path, optional
        A DEM raster for superelevation and grade.
    progress : callable, optional
        Called as ``progress(stage_name, fraction_done)``.
    **parameters
        Any declared parameter (see ``curvescan scan --help`` or
        :data:`curvescan.config.SCAN_PARAMETERS`), e.g. ``speed_field="maxspeed"``.

    Returns
    -------
    ScanResult

    Raises
    ------
    curvescan.errors.CurvescanError
        For unusable input (with a one-line message).
    """
    config = parameters.pop("config", None)
    config = make_config(config, **parameters)
    check_output_crs(config.output_crs)  # fail before the work, not after
    from . import parallel

    if parallel.wants_partitions(source, config):
        return parallel.scan_partitioned(source, dem=dem, progress=progress, config=config)
    report = progress or (lambda stage, frac: None)
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    with record_warnings() as caught:
        frame = _timed(timings, "read", lambda: load(source, config))
        report("read", 0.1)
        _check_fields(frame, config)
        # the superelevation unit (auto) is the whole layer's, not only its curves'
        bare_percent = auto_bare_percent(terrain.field_largest_bare(frame, config))
        chains = _timed(timings, "prepare", lambda: prepare(frame, config))
        frame = _attributes_only(frame)  # free the input geometries: chains hold them now
        _return_freed_memory()
        report("prepare", 0.25)
        layers, speed_report, terrain_record, vertex_record = scan_chains(
            frame, chains, config, dem, report, timings, wkb=True,
            superelevation_bare_percent=bare_percent)
    caught = merge(caught)
    messages = describe(caught)
    warn_again(caught)
    timings["total"] = time.perf_counter() - t0
    curves_l, segments_l, hazards_l, extra_l, assess_summary = layers
    run = _run_record(source, dem, config, chains, frame, curves_l.table, hazards_l.table,
                      segments_l.table, speed_report, messages, timings)
    run["terrain"] = terrain_record
    run["vertices"] = vertex_record
    run["assessment"] = assess_summary
    return ScanResult(curves=curves_l, segments=segments_l, hazards=hazards_l, run=run,
                      extra=extra_l, descriptions=dict(assess.DESCRIPTIONS))


def scan_chains(frame: gpd.GeoDataFrame, chains: Any, config: Any, dem: Any,
                report: Progress, timings: dict[str, float], *, wkb: bool = False,
                superelevation_bare_percent: bool | None = None
                ) -> tuple[tuple, dict, dict, dict]:
    """Run the stages after prepare (geometry, terrain, physics, assess) on prepared chains.

    Used by :func:`scan` and, once per partition, by :mod:`curvescan.parallel`.
    ``superelevation_bare_percent`` is the ``auto`` superelevation unit decided on the
    whole input layer (:func:`curvescan.terrain.field_largest_bare`), handed to
    :func:`curvescan.terrain.evaluate`.

    Returns
    -------
    layers : tuple
        ``(curves, segments, hazards, extra, assessment)``: three GeoDataFrames in the
        output CRS, a dict of further layers (``winter``) and the assess stage's run-record
        summary. ``severity_rank`` / ``winter_rank`` are ranks within this call; merged
        partitions re-rank with :func:`curvescan.assess.rerank`. With ``wkb``, the layers
        are :class:`~curvescan.io.vector.WkbLayer` (geometries as WKB, no GEOS objects:
        less memory and a faster write), and the vertex arrays of ``chains`` are released
        once the layers no longer need them (:meth:`Chains.release_vertices`).
    speed_report, terrain_record, vertex_record : dict
        The posted-speed parsing report, the terrain stage's run record, and the geometry
        stage's vertex counts (input vertices, those left out as carrying no shape, chains
        found densified).
    """
    geo_config = chord_tolerance_for(config, frame.crs)
    geo = _timed(timings, "geometry", lambda: find_curves(
        chains, geo_config, keep_stations=dem is not None,
        progress=lambda done: report("geometry", 0.25 + 0.25 * done)))
    report("geometry", 0.5)
    _return_freed_memory()
    curves = geo.curves
    measure = global_measure(chains.measure, chains.offsets)
    _to_ground(curves, chains, measure)
    curves.attrs["crs"] = chains.crs.to_wkt()
    # the input rows each curve lies on: for src_fids, posted speeds and assess's fields
    curve_rows = rows_on(chains, curves["chain_id"].to_numpy(), curves["s_start_m"].to_numpy(),
                         curves["s_end_m"].to_numpy(), measure)
    del measure  # _layers makes its own, to be able to drop it with the chains' vertices
    speed_report = _attach_attributes(curves, frame, config, curve_rows)
    _mark_roundabouts(curves, frame, config, curve_rows, chains.ring_rows)
    ter = _timed(timings, "terrain",
                 partial(terrain.evaluate, curves, geo.stations, config,
                         None if dem is None else str(dem),
                         superelevation_bare_percent=superelevation_bare_percent))
    terrain_record = terrain.run_record(ter)
    vertex_record = dict(geo.vertices)
    curves = curves.join(ter.drop(columns=[c for c in ter.columns if c in curves.columns]))
    report("terrain", 0.65)
    phys = _timed(timings, "physics", lambda: physics.evaluate(curves, config))
    curves = curves.join(phys.drop(columns=[c for c in phys.columns if c in curves.columns]))
    report("physics", 0.8)
    del ter, phys
    segments = geo.segments
    del geo
    layers = _timed(timings, "assess",
                    lambda: _layers(curves, segments, chains, frame, config, curve_rows,
                                    release=wkb))
    if not wkb:
        c, sg, hz, extra, summary = layers
        layers = (c.to_geodataframe(), sg.to_geodataframe(), hz.to_geodataframe(),
                  {k: v.to_geodataframe() for k, v in extra.items()}, summary)
    report("assess", 0.95)
    return layers, speed_report, terrain_record, vertex_record


#: Curve fields that are ground lengths: divided by the working CRS's point scale factor.
_GROUND_LENGTHS = ("radius_m", "radius_se_m", "length_m", "circular_length_m",
                   "transition_in_m", "transition_out_m", "fit_rmse_m")


def _to_ground(curves: pd.DataFrame, chains: Any,
               measure: tuple[np.ndarray, np.ndarray]) -> None:
    """Turn map lengths into ground lengths in place (``scale_factor`` = map / ground).

    The local transverse Mercator the scan chooses is true to scale within 0.1 %; a kept
    projected input CRS (UTM: 0.9996 on its central meridian) is corrected here. Measures
    along the chain (``s_*_m``, ``circ_*_m``) stay map measures: they locate the curve.
    """
    if not len(curves):
        curves["scale_factor"] = pd.Series(dtype=float)
        return
    gm, base = measure
    chain = curves["chain_id"].to_numpy()
    mid = 0.5 * (curves["circ_start_m"].to_numpy() + curves["circ_end_m"].to_numpy())
    xy = interpolate(chains.coords, gm, chains.offsets, chain, mid + base[chain])
    k = point_scale(chains.crs, xy[:, 0], xy[:, 1])
    for col in _GROUND_LENGTHS:
        if col in curves.columns:
            curves[col] = curves[col].to_numpy(dtype=float) / k
    curves["scale_factor"] = k


def _attributes_only(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """The input frame with null geometries: the stages after prepare read attributes only."""
    name = frame.geometry.name
    crs = frame.crs
    rest = pd.DataFrame(frame.drop(columns=name), copy=False)
    rest[name] = gpd.GeoSeries(np.full(len(rest), None, dtype=object), index=rest.index,
                               crs=crs)
    return gpd.GeoDataFrame(rest, geometry=name, crs=crs)


def _return_freed_memory() -> None:
    """Hand freed heap memory back to the system (glibc's ``malloc_trim``; else nothing).

    The input's GEOS geometries are many small allocations: freed, they stay resident
    (and count in the peak) until trimmed.
    """
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # not glibc
        pass


def _timed(timings: dict, name: str, fn: Callable[[], Any]) -> Any:
    t = time.perf_counter()
    out = fn()
    timings[name] = round(time.perf_counter() - t, 4)
    log.debug("%s took %.3f s", name, timings[name])
    return out


def _check_fields(frame: gpd.GeoDataFrame, config: Any) -> None:
    """Refuse a field the user named that the layer does not have (list those it has).

    A field parameter left at a non-empty default (such as ``lanes``) is used only where
    the layer has it.
    """
    names = [c for c in frame.columns if c != frame.geometry.name]
    for p in SCAN_PARAMETERS:
        if p.kind != "field":
            continue
        value = getattr(config, p.name, None)
        if value is not None and value not in frame.columns and value != p.default:
            flag = p.flag
            raise InputError(f"{flag}: field {value!r} not found; fields: {', '.join(map(str, names))}")


def _mark_roundabouts(curves: pd.DataFrame, frame: gpd.GeoDataFrame, config: Any,
                      curve_rows: tuple[np.ndarray, np.ndarray],
                      shaped: np.ndarray | None = None) -> None:
    """Set ``on_ring`` also on curves lying on features marked as roundabouts, or
    recognised as one by their shape (rows ``shaped``), in place."""
    ring = roundabout_rows(frame, config)
    if ring is None:
        ring = np.zeros(len(frame), dtype=bool)
    if shaped is not None and len(shaped):
        ring = ring.copy()
        ring[shaped] = True
    if not ring.any() or not len(curves):
        return
    groups, rows = curve_rows
    hit = np.zeros(len(curves), dtype=bool)
    hit[groups[ring[rows]]] = True
    curves["on_ring"] = curves["on_ring"].to_numpy(dtype=bool) | hit


def _attach_attributes(curves: pd.DataFrame, frame: gpd.GeoDataFrame, config: Any,
                       curve_rows: tuple[np.ndarray, np.ndarray]) -> dict:
    """Add ``src_fids``, ``posted_kmh`` and raw attribute columns to ``curves`` in place.

    ``curve_rows`` are the ``(curve, input row)`` pairs of :func:`rows_on`.
    """
    n = len(curves)
    groups, rows = curve_rows
    src = frame["src_fid"].to_numpy()
    curves.insert(1, "src_fids", src_fid_text(groups, rows, src, n))
    report: dict[str, Any] = {"field": None, "looked_for": config.speed_field}
    if config.speed_field is not None and config.speed_field in frame.columns:
        speeds, report = parse_speeds(frame[config.speed_field], config.speed_unit,
                                      config=config)
        report["field"] = config.speed_field
        if report["unparsed"]:
            warn_counted("{unparsed} posted-speed values in {field} could not be parsed (kept "
                         "as unknown), e.g. {examples}", DataQualityWarning,
                         {"unparsed": report["unparsed"]}, {"field": repr(config.speed_field)},
                         report["unparsed_examples"], stacklevel=3)
        curves["posted_kmh"] = reduce_rows(groups, rows, speeds, n, how="max")
    else:
        curves["posted_kmh"] = np.nan
    for attr, param in (("attr_superelevation", "superelevation_field"),
                        ("attr_lanes", "lanes_field"), ("attr_width_m", "width_field")):
        name = getattr(config, param, None)
        if name is not None and name in frame.columns:
            curves[attr] = first_value(groups, rows, frame[name].to_numpy(dtype=object), n)
    return report


def _layers(curves: pd.DataFrame, segments: pd.DataFrame, chains: Any,
            frame: gpd.GeoDataFrame, config: Any, curve_rows: tuple[np.ndarray, np.ndarray],
            release: bool):
    """The output layers as :class:`WkbLayer`: lines made once, as WKB in the output CRS.

    Hazards and winter rows carry the WKB of their curves. Everything that needs the
    chains' vertices comes first; with ``release`` they are dropped before assess adds
    the hazards and winter layers (lower peak memory).
    """
    crs, project = output_crs(chains.crs, frame.crs, config.output_crs)
    measure = global_measure(chains.measure, chains.offsets)
    chain = curves["chain_id"].to_numpy()
    geom = substrings(chains, chain, curves["s_start_m"].to_numpy(),
                      curves["s_end_m"].to_numpy(), measure, project=project, wkb=True)
    curves = curves.copy(deep=False)  # new columns only: the caller's table is not changed
    curves["geometry"] = pd.arrays.ArrowExtensionArray(geom)
    del geom
    # the stages work in the chain's direction; remember where a curve's own feature
    # runs the other way, to report directions as that feature is digitised
    curves["_against"] = reversed_at(
        chains, chain, 0.5 * (curves["circ_start_m"].to_numpy() + curves["circ_end_m"].to_numpy()),
        measure)
    seg_chain = segments["chain_id"].to_numpy()
    g, r = rows_on(chains, seg_chain, segments["s_start_m"].to_numpy(),
                   segments["s_end_m"].to_numpy(), measure)
    segments = segments.copy(deep=False)  # copy-on-write: the new columns stay here
    segments.insert(0, "segment_id", np.arange(1, len(segments) + 1, dtype=np.int64))
    segments["src_fids"] = src_fid_text(g, r, frame["src_fid"].to_numpy(), len(segments))
    segments["road_name"] = assess.segment_names(frame, g, r, len(segments), config)
    del g, r
    segments["geometry"] = pd.arrays.ArrowExtensionArray(
        substrings(chains, seg_chain, segments["s_start_m"].to_numpy(),
                   segments["s_end_m"].to_numpy(), measure, project=project, wkb=True))
    lengths = chains.lengths
    del measure
    if release:
        chains.release_vertices()
    judged = assess.evaluate(curves, frame, chains, config, curve_rows, chain_lengths=lengths)
    del curves
    out = []
    for layer in (judged.curves, segments, judged.hazards, judged.winter):
        if "_against" in layer.columns:
            layer = orient_to_features(layer, layer["_against"].to_numpy(dtype=bool))
        layer = layer.drop(columns=[c for c in layer.columns
                                    if c.startswith("attr_") or c == "_against"])
        table = pd.DataFrame(order_columns(layer, CONTRACT_FIELDS if len(out) < 3 else ()),
                             copy=False)
        out.append(WkbLayer(table, crs, "LineString"))
    return out[0], out[1], out[2], {"winter": out[3]}, judged.summary


def _covered_fids(texts: pd.Series) -> set:
    """Return the source ids named in comma-separated id texts (vectorised in Arrow)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    text = pa.array(texts.astype(str), type=pa.string(), from_pandas=True)
    parts = pc.list_flatten(pc.split_pattern(text, ","))
    parts = pc.filter(parts, pc.not_equal(parts, ""))
    return set(sorted_unique(pc.cast(parts, pa.int64()).to_numpy()).tolist())


def _run_record(source, dem, config, chains, frame, curves, hazards, segments, speed_report,
                messages, timings) -> dict[str, Any]:
    covered = _covered_fids(segments["src_fids"])
    skipped = list(chains.skipped)
    skipped_ids = {s["src_fid"] for s in skipped}
    lost = sorted(set(frame["src_fid"].astype(int)) - covered - skipped_ids)
    for fid in lost:  # should not happen; recorded rather than silent
        skipped.append({"src_fid": fid, "reason": "not covered by any segment"})
    return {
        "curvescan_version": __version__,
        "created_utc": pd.Timestamp.now(tz="UTC").isoformat(timespec="seconds"),
        "input": str(source) if not isinstance(source, gpd.GeoDataFrame) else "GeoDataFrame",
        "input_layer": config.layer,
        "input_crs": frame.crs.to_string() if frame.crs is not None else None,
        "working_crs": chains.crs.to_wkt(),
        "dem": None if dem is None else str(dem),
        # defaults that depend on the input as used
        "parameters": chord_tolerance_for(config, frame.crs).as_dict(),
        "physics": physics.run_record(config),
        "input_features": int(len(frame)),
        "chains": int(chains.n_chains),
        "roundabout_features_by_shape": int(len(chains.ring_rows)),
        "curves": int(len(curves)),
        "hazards": int(len(hazards)),
        "segments": int(len(segments)),
        "skipped_features": int(len(skipped)),
        "skipped": skipped,
        "posted_speed": speed_report,
        "notes": chains.notes,
        "warnings": messages,
        "timings_s": timings,
        "caution": CAUTION,
    }
