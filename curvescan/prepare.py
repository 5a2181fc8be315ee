"""Stage: prepare. Clean line parts in a metric CRS, joined into chains.

* Geographic input is projected to a local transverse Mercator CRS centred on the data
  (scale error under 0.1 % within about 280 km of the centre); a projected CRS whose
  scale is far from true (for example web Mercator) is re-projected the same way.
* Multi-part lines are exploded, Z/M dropped, repeated vertices and spikes removed.
  Anything unusable is recorded in the skipped list with a reason, never silently lost.
* Parts whose ends meet the end of exactly one other part (within a tolerance) are joined
  into one chain, reversing parts where needed, so a curve digitised across two features
  is one curve. With a grouping field, only parts with equal values are joined.

Everything is vectorised over flat coordinate arrays; chain order is found by pointer
jumping (list ranking), not by walking the network in Python.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import TransverseMercatorConversion
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from .declare import Param
from .errors import CRSError, DataQualityWarning, InputError
from .geometry import _kernels as kn
from .geometry.pieces import MIN_PIECE_M
from .recording import warn_counted
from .read import parse_crs

__all__ = ["PARAMETERS", "Chains", "prepare", "working_crs", "point_scale"]

PARAMETERS: tuple[Param, ...] = (
    Param("crs", "crs", None,
          "Metric CRS to compute in (default: a local transverse Mercator chosen from the "
          "data's extent when the input is geographic or strongly distorted).", stage="prepare"),
    Param("join_tolerance_m", "float", 0.5,
          "Distance within which two line ends count as meeting, for joining features into "
          "chains.", unit="m", stage="prepare", minimum=0.0, maximum=50.0),
    Param("join_field", "field", None,
          "Only join features into a chain where this field (road name or ref) is equal.",
          stage="prepare"),
    Param("through_junction_deg", "float", 45.0,
          "Where three or more line ends meet, join the two that continue each other most "
          "straightly (turning at most this angle) into one chain, so a side road joining "
          "mid-curve does not cut the curve in two; 0 joins only where exactly two ends "
          "meet.", unit="deg", stage="prepare", minimum=0.0, maximum=90.0),
    Param("roundabout_field", "field", "junction",
          "Field marking roundabouts (OSM junction=roundabout or circular; also yes, true, "
          "1), used where present: roundabout features join only with each other, and "
          "their curves are marked on_ring (a junction, not a curve of the open road).",
          stage="prepare"),
    Param("drop_duplicates", "bool", True,
          "Skip features (or parts) whose line repeats an earlier one's, vertex for vertex in "
          "either direction; each is listed in the run record's skipped with the feature it "
          "repeats. A duplicate would report its curves and hazards twice.", stage="prepare"),
    Param("ring_max_diameter_m", "float", 100.0,
          "Recognise untagged roundabouts by their shape: features that close into a round "
          "loop (turning one way all round, area at least 0.85 of a circle of the same "
          "perimeter) no wider than this are treated as a roundabout (see "
          "--roundabout-field); 0 turns the recognition off.", unit="m", stage="prepare",
          minimum=0.0, maximum=500.0),
    Param("spike_angle_deg", "float", 150.0,
          "A vertex where the line turns back by more than this angle is a digitising spike "
          "and is removed.", unit="deg", stage="prepare", minimum=90.0, maximum=180.0,
          advanced=True),
)

#: The declared default roundabout field (OSM's tag), used only where a layer has it.
_ROUNDABOUT_DEFAULT = next(p.default for p in PARAMETERS if p.name == "roundabout_field")

#: Values of the roundabout field that mark a roundabout (lower case, trimmed).
ROUNDABOUT_VALUES = frozenset({"roundabout", "circular", "yes", "true", "1", "y"})

#: Two parts that leave their common end within this angle of each other double back: they
#: are not joined into one chain (a duplicated or overlapping feature).
UTURN_DEG = 30.0

#: Parts no longer than this (m) are skipped: the output leaves out pieces this short
#: (:func:`curvescan.geometry.pieces.piece_table`), so such a part would be in no segment.
MIN_PART_LENGTH_M = MIN_PIECE_M

#: Largest point scale error tolerated in a projected input CRS before re-projecting.
_MAX_SCALE_ERROR = 0.002


@dataclass
class Chains:
    """Joined, cleaned lines as flat arrays.

    Attributes
    ----------
    coords : ndarray (n_vertices, 2)
        Vertex coordinates in the working CRS (m), chain after chain.
    offsets : ndarray (n_chains + 1,)
        Vertices of chain ``i`` are ``coords[offsets[i]:offsets[i + 1]]``.
    vertex_row : ndarray (n_vertices,)
        Row of the input frame each vertex comes from (for attribute look-up).
    measure : ndarray (n_vertices,)
        Distance of each vertex along its chain (m).
    crs : pyproj.CRS
        The working CRS.
    rows : RaggedRows
        For each chain, the input rows it is made of, in chain order (``rows[i]``).
    closed : ndarray (n_chains,) of bool
        Whether the chain closes on itself (a ring).
    vertex_reversed : ndarray (n_vertices,) of bool, optional
        Whether the part a vertex comes from runs against the chain's direction.
    skipped : list of dict
        Input features (or parts) left out, each with ``src_fid`` and ``reason``.
    notes : list of str
        Things the stage decided that a user should know (CRS choice, repairs).
    ring_rows : ndarray of int
        Input rows whose parts were recognised as a roundabout by their shape
        (:func:`ring_parts`).
    """

    coords: np.ndarray
    offsets: np.ndarray
    vertex_row: np.ndarray
    measure: np.ndarray
    crs: pyproj.CRS
    rows: Any
    closed: np.ndarray
    vertex_reversed: np.ndarray | None = None
    skipped: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    ring_rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def n_chains(self) -> int:
        """Number of chains."""
        return int(self.offsets.shape[0] - 1)

    @property
    def lengths(self) -> np.ndarray:
        """Length of each chain (m)."""
        last = self.offsets[1:] - 1
        return self.measure[last]

    def release_vertices(self) -> None:
        """Drop the per-vertex arrays (coordinates, measures, rows, directions).

        For a caller that is done with the geometry and keeps the chains only for their
        count, CRS, skipped rows and notes: frees most of their memory.
        """
        empty = np.zeros(0)
        self.coords = np.zeros((0, 2))
        self.measure = empty
        self.vertex_row = np.zeros(0, dtype=np.int64)
        self.vertex_reversed = None


def finite_bounds(geoms: Any) -> np.ndarray:
    """Extent ``(minx, miny, maxx, maxy)`` of the finite coordinates of ``geoms`` (NaN
    where there are none): one vertex at infinity or NaN does not spoil the extent."""
    geoms = np.asarray(geoms, dtype=object)
    b = shapely.bounds(geoms)
    good = np.isfinite(b).all(axis=1)
    boxes = [b[good]]
    odd = ~good & ~shapely.is_empty(geoms) & (shapely.get_type_id(geoms) >= 0)
    if odd.any():
        xy = shapely.get_coordinates(geoms[odd])
        xy = xy[np.isfinite(xy).all(axis=1)]
        boxes.append(np.c_[xy, xy])
    box = np.concatenate(boxes)
    if not len(box):
        return np.full(4, np.nan)
    return np.array([box[:, 0].min(), box[:, 1].min(), box[:, 2].max(), box[:, 3].max()])


def working_crs(frame: gpd.GeoDataFrame, override: Any = None) -> tuple[pyproj.CRS, str]:
    """Choose the metric CRS to compute in, and say why.

    Returns the override when given (it must be projected in metres); the input CRS
    when it is projected, metric and nearly true to scale over the data; otherwise a
    transverse Mercator centred on the data's extent on the input's datum.
    """
    src = frame.crs
    if override is not None:
        crs = parse_crs(override, what="--crs")
        _require_metric(crs, "--crs")
        return crs, f"working CRS given by the user: {crs.to_string()}"
    bounds = finite_bounds(frame.geometry.values)
    if not np.all(np.isfinite(bounds)):
        raise InputError("the input has no coordinates to compute an extent from")
    if src.is_projected:
        _require_metric(src, "the input CRS", allow_feet=True)
        lon, lat = _extent_lonlat(bounds, src)
        error = _scale_error(src, lon, lat)
        unit = src.axis_info[0].unit_conversion_factor if src.axis_info else 1.0
        if error <= _MAX_SCALE_ERROR and abs(unit - 1.0) < 1e-12:
            return src, f"working CRS is the input CRS {src.to_string()}"
        why = f"scale error {error:.2%}" if error > _MAX_SCALE_ERROR else "not in metres"
    elif src.is_geographic:
        if bounds[0] < -360 or bounds[2] > 360 or bounds[1] < -90.5 or bounds[3] > 90.5:
            raise CRSError(
                f"the input CRS {src.name!r} is geographic but coordinates reach "
                f"({bounds[0]:.0f}, {bounds[1]:.0f}, {bounds[2]:.0f}, {bounds[3]:.0f}); "
                "they are not longitude/latitude (GeoJSON is always read as WGS 84)")
        lon, lat = _extent_lonlat(bounds, src)
        why = "input is geographic"
    else:
        raise CRSError(f"the input CRS {src.name!r} is neither geographic nor projected")
    lon0 = float(np.clip(np.median(lon), -180, 180))
    lat0 = float(np.clip(np.median(lat), -89, 89))
    conversion = TransverseMercatorConversion(
        latitude_natural_origin=round(lat0, 4), longitude_natural_origin=round(lon0, 4),
        false_easting=0.0, false_northing=0.0, scale_factor_natural_origin=1.0,
    )
    crs = ProjectedCRS(conversion=conversion, geodetic_crs=src.geodetic_crs,
                       name=f"curvescan local TM {lat0:.4f} {lon0:.4f}")
    return crs, f"working CRS: local transverse Mercator at {lat0:.4f}, {lon0:.4f} ({why})"


def point_scale(crs: pyproj.CRS, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Point scale factor of ``crs`` at map points: map length / ground length.

    For a conformal projection (transverse Mercator, UTM, Lambert conformal) lengths at a
    point scale alike in every direction, so a radius measured on the map divided by this
    factor is the radius on the ground. Returns 1 where pyproj cannot tell.
    """
    x = np.asarray(x, dtype=float)
    if x.size == 0:
        return np.ones(0)
    try:
        to_geo = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
        lon, lat = to_geo.transform(x, np.asarray(y, dtype=float))
        f = pyproj.Proj(crs).get_factors(lon, lat)
        k = np.sqrt(np.asarray(f.meridional_scale) * np.asarray(f.parallel_scale))
    except (pyproj.exceptions.ProjError, pyproj.exceptions.CRSError, RuntimeError):
        return np.ones_like(x)
    return np.where(np.isfinite(k) & (k > 0), k, 1.0)


def _require_metric(crs: pyproj.CRS, what: str, allow_feet: bool = False) -> None:
    if not crs.is_projected:
        raise CRSError(f"{what} must be a projected CRS in metres, got {crs.name!r}")
    unit = crs.axis_info[0].unit_name if crs.axis_info else "metre"
    if unit not in ("metre", "meter") and not (allow_feet and "foot" in unit):
        raise CRSError(f"{what} has unit {unit!r}; a metre-based CRS is needed")


def _extent_lonlat(bounds: np.ndarray, crs: pyproj.CRS) -> tuple[np.ndarray, np.ndarray]:
    xs = np.array([bounds[0], bounds[2], bounds[0], bounds[2], (bounds[0] + bounds[2]) / 2])
    ys = np.array([bounds[1], bounds[1], bounds[3], bounds[3], (bounds[1] + bounds[3]) / 2])
    if crs.is_geographic:
        tr = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    else:
        tr = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon, lat = tr.transform(xs, ys)
    return np.asarray(lon), np.asarray(lat)


def _scale_error(crs: pyproj.CRS, lon: np.ndarray, lat: np.ndarray) -> float:
    try:
        factors = pyproj.Proj(crs).get_factors(lon, lat)
    except (pyproj.exceptions.ProjError, RuntimeError):
        return np.inf
    worst = np.nanmax(np.abs(np.concatenate([factors.meridional_scale,
                                             factors.parallel_scale]) - 1.0))
    return float(worst) if np.isfinite(worst) else np.inf


def prepare(frame: gpd.GeoDataFrame, config: Any) -> Chains:
    """Project, clean and join the road layer into chains.

    Parameters
    ----------
    frame : GeoDataFrame
        Output of :func:`curvescan.read.load` (has ``src_fid`` and a CRS).
    config : ScanConfig
        Uses ``crs``, ``join_tolerance_m``, ``join_field``, ``spike_angle_deg``.

    Returns
    -------
    Chains
    """
    crs, note = working_crs(frame, config.crs)
    notes = [note]
    project = None
    if frame.crs != crs:  # project the coordinates, not the geometries (no GEOS copies)
        project = pyproj.Transformer.from_crs(frame.crs, crs, always_xy=True).transform
    coords, part_row, skipped, (seg, length) = _clean_parts(
        np.asarray(frame.geometry.values, dtype=object), frame, config, project,
        lengths=True)
    if part_row.size == 0:
        raise InputError("the input has no usable line geometries "
                         f"({len(skipped)} features skipped: {_reason_summary(skipped)})")
    screened = screen_parts(coords, frame["src_fid"].to_numpy()[part_row],
                            join_groups(frame, config, part_row), config, length=length)
    del length
    skipped = skipped + screened.skipped
    if skipped:
        warnings.warn(f"{len(skipped)} input features or parts skipped: "
                      f"{_reason_summary(skipped)}", DataQualityWarning, stacklevel=2)
    if screened.dropped.any():
        seg = seg[~screened.dropped[coords[1]]]
    coords, part_row = drop_parts(coords, part_row, screened.dropped)
    chains = _join(coords, part_row, screened.group, config.join_tolerance_m,
                   config.through_junction_deg, seg=seg)
    chains.ring_rows = np.unique(part_row[screened.ring])
    chains.crs = crs
    chains.skipped = skipped
    chains.notes = notes
    return chains


def roundabout_rows(frame: gpd.GeoDataFrame, config: Any) -> np.ndarray | None:
    """Which input rows are roundabouts (``config.roundabout_field``), or None where the
    layer has no such field.

    A value in :data:`ROUNDABOUT_VALUES` (case and spaces aside) marks a roundabout; any
    other value or a blank does not (OSM tags ``junction`` with other junction kinds too).
    A field named other than the default that is missing is an error.
    """
    name = config.roundabout_field
    if name is None:
        return None
    if name not in frame.columns:
        if name != _ROUNDABOUT_DEFAULT:
            raise InputError(f"roundabout field {name!r} not found; fields: "
                             f"{', '.join(map(str, frame.columns.drop('geometry')))}")
        return None
    raw = pd.Series(frame[name].to_numpy(dtype=object))
    text = raw.astype(str).str.strip().str.lower()
    return (raw.notna() & text.isin(ROUNDABOUT_VALUES)).to_numpy()


def join_groups(frame: gpd.GeoDataFrame, config: Any, part_row: np.ndarray
                ) -> np.ndarray | None:
    """Per part, the value parts must share to be joined (None: any parts may join).

    With ``join_field``, its value (a blank never joins); with roundabouts marked
    (:func:`roundabout_rows`), roundabout parts join only each other, whatever their
    ``join_field`` (a roundabout's pieces rarely carry the roads' names), and other parts
    only other parts.
    """
    group = None
    if config.join_field is not None:
        if config.join_field not in frame.columns:
            raise InputError(f"join field {config.join_field!r} not found; fields: "
                             f"{', '.join(map(str, frame.columns.drop('geometry')))}")
        group = frame[config.join_field].to_numpy(dtype=object)[part_row]
    ring = roundabout_rows(frame, config)
    if ring is None:
        return group
    ring = ring[part_row]
    road = np.full(len(part_row), "road", dtype=object) if group is None else np.where(
        pd.notna(group), np.array(["road\x1f" + str(g) for g in group], dtype=object), None)
    return np.where(ring, "roundabout", road)


def duplicate_skips(part_fid: np.ndarray, dup: np.ndarray, of: np.ndarray) -> list[dict]:
    """Skipped-list entries for duplicate parts (``src_fid`` per part)."""
    return [{"src_fid": int(part_fid[i]), "reason": f"duplicate of src_fid {int(part_fid[j])}"}
            for i, j in zip(np.flatnonzero(dup), of[dup])]


def drop_parts(parts: tuple[np.ndarray, np.ndarray], part_row: np.ndarray,
               drop: np.ndarray) -> tuple[tuple[np.ndarray, np.ndarray], np.ndarray]:
    """The cleaned parts without those marked in ``drop``, renumbered."""
    if not drop.any():
        return parts, part_row
    xy, pid = parts
    keep_v = ~drop[pid]
    new_id = np.cumsum(~drop) - 1
    return (_rows(xy, keep_v), new_id[pid[keep_v]]), part_row[~drop]


def _reason_summary(skipped: list[dict]) -> str:
    counts = pd.Series([s["reason"] for s in skipped]).value_counts()
    return "; ".join(f"{n} {reason}" for reason, n in counts.items())


def _rows(xy: np.ndarray, index: np.ndarray) -> np.ndarray:
    """``xy[index]`` (an index or boolean array) of an ``(n, 2)`` float array.

    A C-contiguous float64 array is moved as one 16-byte item per row (a complex view):
    the same bytes, several times faster than numpy's row indexing of a 2-D array.
    """
    if xy.ndim == 2 and xy.shape[1] == 2 and xy.dtype == np.float64 and xy.flags.c_contiguous:
        return xy.view(np.complex128)[:, 0][index].view(np.float64).reshape(-1, 2)
    return xy[index]


def _clean_parts(geoms: np.ndarray, frame: gpd.GeoDataFrame, config: Any,
                 project: Any = None, lengths: bool = False):
    """Explode to single lines, drop Z/M, repeated vertices and spikes; record rejects.

    ``project(x, y) -> (x, y)``, when given, transforms the vertices to the working CRS.
    With ``lengths``, also returns ``(seg, length)``: the length of the segment from each
    vertex to the next (the value beyond a part's last vertex is meaningless) and of each
    part, as :func:`assemble` and :func:`part_shapes` would compute them.
    """
    src_fid = frame["src_fid"].to_numpy()
    skipped: list[dict] = []
    gtype = shapely.get_type_id(geoms)  # -1 for a missing geometry
    missing = (gtype < 0) | shapely.is_empty(geoms)
    for i in np.flatnonzero(missing):
        skipped.append({"src_fid": int(src_fid[i]), "reason": "empty or missing geometry"})
    line_like = np.isin(gtype, (1, 2, 5, 7))  # LineString, LinearRing, Multi..., Collection
    for i in np.flatnonzero(~missing & ~line_like):
        skipped.append({"src_fid": int(src_fid[i]),
                        "reason": f"not a line ({geoms[i].geom_type})"})
    keep = np.flatnonzero(~missing & line_like)
    parts, part_row = _single_parts(geoms, gtype, keep)
    is_line = np.isin(shapely.get_type_id(parts), (1, 2))
    empty_part = is_line & shapely.is_empty(parts)
    for i in np.flatnonzero(~is_line | empty_part):
        skipped.append({"src_fid": int(src_fid[part_row[i]]),
                        "reason": "empty part" if empty_part[i] else "non-line part"})
    if not is_line.all() or empty_part.any():
        keep_part = is_line & ~empty_part
        parts, part_row = parts[keep_part], part_row[keep_part]
    xy, vidx = shapely.get_coordinates(parts, return_index=True)  # 2D: Z/M dropped
    n_coords = shapely.get_num_coordinates(parts)
    del parts
    if project is not None:
        px, py = project(xy[:, 0], xy[:, 1])
        xy[:, 0], xy[:, 1] = px, py
        del px, py
    x, y = xy[:, 0], xy[:, 1]
    finite = np.isfinite(x) & np.isfinite(y)
    all_finite = bool(finite.all())
    # vertices with finite coordinates per part (only read to word a skip reason)
    n_finite = n_coords if all_finite else np.bincount(vidx[finite], minlength=len(part_row))
    if not all_finite:
        warn_counted("{vertices} vertices with non-finite coordinates (NaN or infinite, or "
                     "beyond the range of the working CRS) removed from {features} features",
                     DataQualityWarning, {"vertices": int(np.count_nonzero(~finite)),
                                          "features": len(np.unique(part_row[vidx[~finite]]))},
                     stacklevel=3)
    # drop repeated vertices (and non-finite ones)
    del x, y
    if not all_finite:  # a repeat is judged against the previous finite vertex
        xy, vidx = _rows(xy, finite), vidx[finite]
    del finite
    drop = np.zeros(len(xy), dtype=bool)
    if len(xy) > 1:
        drop[1:] = _repeats(xy, vidx)[0]
    if drop.any():
        keep_v = ~drop
        xy, vidx = _rows(xy, keep_v), vidx[keep_v]
    del drop
    xy, vidx = _remove_spikes(xy, vidx, np.radians(config.spike_angle_deg))
    step = None  # |differences| between successive vertices, when still current
    if len(xy) > 1:  # a spike taken out may leave its two neighbours on one point
        again = np.zeros(len(xy), dtype=bool)
        again[1:], step = _repeats(xy, vidx)
        if again.any():
            xy, vidx = _rows(xy, ~again), vidx[~again]
            step = None
        del again
    counts = np.bincount(vidx, minlength=len(part_row))
    same = vidx[1:] == vidx[:-1]
    seg = np.empty(len(xy))  # seg[i]: vertex i to i + 1 (the last one is never read)
    if step is None:
        np.hypot(np.diff(xy[:, 0]), np.diff(xy[:, 1]), out=seg[:-1])
    else:  # hypot(x, y) = hypot(|x|, |y|) (C99 F.9.4.3): the same lengths
        np.hypot(step[:, 0], step[:, 1], out=seg[:-1])
    del step
    seg[-1:] = 0.0
    # a part's first vertex adds the 0 of the segment before it to the part's sum first
    # (0 + 0): the same sums as over the segments within parts only
    length = np.bincount(vidx[1:], np.where(same, seg[:-1], 0.0), minlength=len(part_row))
    del same
    ok = (counts >= 2) & (length > MIN_PART_LENGTH_M)
    for i in np.flatnonzero(~ok):
        skipped.append({"src_fid": int(src_fid[part_row[i]]),
                        "reason": "fewer than two vertices with finite coordinates (NaN, "
                        "infinite or beyond the working CRS)" if n_finite[i] < 2 else
                        "fewer than two distinct vertices (zero length)" if counts[i] < 2
                        else f"shorter than {MIN_PART_LENGTH_M * 1000:g} mm"})
    if ok.all():
        return ((xy, vidx), part_row, skipped) + (((seg, length),) if lengths else ())
    keep_v = ok[vidx]
    new_id = np.cumsum(ok) - 1
    out = (_rows(xy, keep_v), new_id[vidx[keep_v]]), part_row[ok], skipped
    return out + (((seg[keep_v], length[ok]),) if lengths else ())


def _repeats(xy: np.ndarray, vidx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Whether vertex ``i + 1`` repeats vertex ``i`` of the same part (both coordinates
    within 1e-6), and the absolute differences ``|xy[i + 1] - xy[i]|`` (``(n - 1, 2)``)."""
    step = np.diff(xy, axis=0)
    np.abs(step, out=step)
    near = step < 1e-6
    both = near[:, 0] & near[:, 1]
    both &= vidx[1:] == vidx[:-1]
    return both, step


def _single_parts(geoms: np.ndarray, gtype: np.ndarray,
                  keep: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Parts of the geometries ``geoms[keep]`` in row order, and the row of each part.

    Single lines are used as they are; only multi-part geometries are exploded (exploding
    copies every geometry), collections within collections down to their single parts.
    """
    single = np.isin(gtype[keep], (1, 2))
    if single.all():
        return geoms[keep], keep
    multi = keep[~single]
    mparts, midx = shapely.get_parts(geoms[multi], return_index=True)
    midx = multi[midx]
    nested = np.isin(shapely.get_type_id(mparts), (4, 5, 6, 7))
    while nested.any():  # a GeometryCollection holding multi-lines or collections
        inner, iidx = shapely.get_parts(mparts[nested], return_index=True)
        order = np.argsort(np.r_[np.flatnonzero(~nested), np.flatnonzero(nested)[iidx]],
                           kind="stable")
        mparts = np.concatenate([mparts[~nested], inner])[order]
        midx = np.concatenate([midx[~nested], midx[nested][iidx]])[order]
        nested = np.isin(shapely.get_type_id(mparts), (4, 5, 6, 7))
    rows = np.concatenate([keep[single], midx])
    parts = np.concatenate([geoms[keep[single]], mparts])
    order = np.argsort(rows, kind="stable")  # parts of one row keep their order
    return parts[order], rows[order]


def _remove_spikes(xy: np.ndarray, vidx: np.ndarray, limit_rad: float, passes: int = 3):
    """Remove interior vertices where the line turns back by more than ``limit_rad``.

    ``limit_rad`` is at least 90 degrees, so only vertices whose two segments point in
    opposite half-planes (dot product not positive) can be spikes; the exact turn is
    computed for those only.
    """
    for _ in range(passes):
        if len(xy) < 3:
            break
        if limit_rad <= np.pi / 2 + 1e-9:
            cand = np.arange(len(xy) - 2)
        elif kn.compiled():
            cand = kn.spike_candidate_kernel(xy)
        else:
            dx = np.diff(xy[:, 0])
            dy = np.diff(xy[:, 1])
            dot = dx[1:] * dx[:-1]
            dot += dy[1:] * dy[:-1]
            cand = np.flatnonzero(dot <= 0.0)
            del dot, dx, dy
        x0, x1, x2 = xy[cand, 0], xy[cand + 1, 0], xy[cand + 2, 0]
        y0, y1, y2 = xy[cand, 1], xy[cand + 1, 1], xy[cand + 2, 1]
        a = np.arctan2(y1 - y0, x1 - x0)  # the segment before vertex cand + 1
        b = np.arctan2(y2 - y1, x2 - x1)  # the segment after it
        turn = np.abs((b - a + np.pi) % (2 * np.pi) - np.pi)
        v = cand + 1
        interior = (vidx[v] == vidx[v - 1]) & (vidx[v] == vidx[v + 1])
        hit = v[interior & (turn > limit_rad)]
        if not hit.size:
            break
        spike = np.zeros(len(xy), dtype=bool)
        spike[hit] = True
        # never remove two neighbours in one pass
        spike[1:] &= ~spike[:-1]
        keep = ~spike
        xy, vidx = _rows(xy, keep), vidx[keep]
    return xy, vidx


def part_ends(parts: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """First and last vertex index of each cleaned part, and its ends as ``(2n, 4)``.

    Row ``2 p`` of the end array is the start of part ``p``, row ``2 p + 1`` its end; the
    columns are the end's x and y and the unit direction from the end into the part.
    """
    xy, pid = parts
    n = int(pid[-1]) + 1 if len(pid) else 0
    starts = np.searchsorted(pid, np.arange(n))
    ends = np.append(starts[1:], len(pid)) - 1
    end_xy = np.empty((2 * n, 4))
    end_xy[0::2, :2] = xy[starts]
    end_xy[1::2, :2] = xy[ends]
    inward = np.empty((2 * n, 2))
    inward[0::2] = xy[np.minimum(starts + 1, ends)] - xy[starts]
    inward[1::2] = xy[np.maximum(ends - 1, starts)] - xy[ends]
    norm = np.hypot(inward[:, 0], inward[:, 1])
    end_xy[:, 2:] = inward / np.where(norm > 0, norm, 1.0)[:, None]
    return starts, ends, end_xy


def part_shapes(parts: tuple[np.ndarray, np.ndarray], max_length: float = np.inf,
                length: np.ndarray | None = None) -> np.ndarray:
    """Per cleaned part: length (m), shoelace sum and heading change within it, ``(n, 3)``.

    The shoelace sum ``sum(x_i y_(i+1) - x_(i+1) y_i)``, with coordinates taken about the
    part's first vertex, is twice the signed area the part sweeps about that vertex
    (:func:`ring_parts` moves it to a common point to add up a loop's area). The heading
    change (radians, left positive) is the turn between the part's successive segments.
    Only parts no longer than ``max_length`` get the last two (the others 0). ``length``,
    when given, is the parts' lengths computed already (by :func:`_clean_parts`).
    """
    xy, pid = parts
    n = int(pid[-1]) + 1 if len(pid) else 0
    out = np.zeros((n, 3))
    if n == 0:
        return out
    if length is not None:
        out[:, 0] = length
    else:
        same = pid[1:] == pid[:-1]
        d = np.diff(xy, axis=0)
        out[:, 0] = np.bincount(pid[1:][same], np.hypot(d[:, 0], d[:, 1])[same], minlength=n)
    short = out[:, 0] <= max_length
    if not short.any():
        return out
    keep = short[pid]
    xy, pid = _rows(xy, keep), pid[keep]
    first = np.r_[0, np.flatnonzero(pid[1:] != pid[:-1]) + 1]
    xy = xy - np.repeat(xy[first], np.diff(np.r_[first, len(pid)]), axis=0)
    same = pid[1:] == pid[:-1]
    d = np.diff(xy, axis=0)
    cross = xy[:-1, 0] * xy[1:, 1] - xy[1:, 0] * xy[:-1, 1]
    out[:, 1] = np.bincount(pid[1:][same], cross[same], minlength=n)
    both = same[1:] & same[:-1]
    a, b = d[:-1][both], d[1:][both]
    turn = np.arctan2(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0], np.einsum("ij,ij->i", a, b))
    out[:, 2] = np.bincount(pid[2:][both], turn, minlength=n)
    return out


def part_identity(parts: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """Per cleaned part: vertex count and mean vertex ``(x, y)``, ``(n, 3)``; with its ends
    and length (:func:`part_ends`, :func:`part_shapes`) what :func:`duplicate_parts`
    compares."""
    xy, pid = parts
    n = int(pid[-1]) + 1 if len(pid) else 0
    count = np.bincount(pid, minlength=n).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.c_[count, np.bincount(pid, xy[:, 0], minlength=n) / count,
                     np.bincount(pid, xy[:, 1], minlength=n) / count]


#: Coordinates and lengths (m) are compared rounded to this when finding duplicates.
DUPLICATE_ROUNDING_M = 1e-3


def duplicate_parts(end_xy: np.ndarray, length: np.ndarray,
                    identity: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Which parts repeat an earlier part, and the earlier part each repeats (-1: none).

    Two parts are the same line when their two ends (in either order), their lengths,
    vertex counts and mean vertices agree to :data:`DUPLICATE_ROUNDING_M`: the same
    vertices, digitised either way. Two different lines between the same ends (the two
    sides of an island) differ in their mean vertex.
    """
    n = len(length)
    if n == 0:
        return np.zeros(0, dtype=bool), np.zeros(0, dtype=np.int64)
    q = DUPLICATE_ROUNDING_M
    a = np.round(end_xy[0::2, :2] / q)
    b = np.round(end_xy[1::2, :2] / q)
    swap = (b[:, 0] < a[:, 0]) | ((b[:, 0] == a[:, 0]) & (b[:, 1] < a[:, 1]))
    lo, hi = np.where(swap[:, None], b, a), np.where(swap[:, None], a, b)
    keys = pd.DataFrame({"ax": lo[:, 0], "ay": lo[:, 1], "bx": hi[:, 0], "by": hi[:, 1],
                         "len": np.round(length / q), "n": identity[:, 0],
                         "mx": np.round(identity[:, 1] / q), "my": np.round(identity[:, 2] / q)})
    group = keys.groupby(list(keys.columns), sort=False, dropna=False).ngroup().to_numpy()
    first = np.full(group.max() + 1, n, dtype=np.int64)
    np.minimum.at(first, group, np.arange(n))
    of = first[group]
    dup = of != np.arange(n)
    return dup, np.where(dup, of, -1)


#: A loop of parts is a ring when its area is at least this share of a circle's of the
#: same perimeter (4 pi A / P^2: 1 for a circle, 0.785 for a square).
RING_ROUNDNESS = 0.85
#: Largest turn (degrees) from one part into the next around a ring, either way.
RING_NODE_TURN_DEG = 60.0
#: Most parts walked around one ring.
RING_MAX_PARTS = 16


def ring_parts(end_xy: np.ndarray, shapes: np.ndarray, tolerance: float,
               max_diameter_m: float) -> np.ndarray:
    """Which parts lie on a small round loop of parts (an untagged roundabout).

    From every part, in both directions, walk on through its end node into the part that
    turns most to the left (at most :data:`RING_NODE_TURN_DEG` either way, parts no longer
    than the loop may be), for up to :data:`RING_MAX_PARTS` parts. A walk that comes back
    to the part it started from has gone round a loop counter-clockwise (approaches and
    exits leave a ring to the right, so a walk keeping left stays on it). The loop is a
    ring when its perimeter is at most ``pi * max_diameter_m``, its area (from the parts'
    shoelace sums, :func:`part_shapes`) is positive and at least :data:`RING_ROUNDNESS` of
    a circle's of that perimeter, and its turns (within the parts and at the nodes) add
    up to one full turn. A city block is not round enough; a single closed feature is a
    ring already (a closed chain) and is left to that.
    """
    n = len(shapes)
    ring = np.zeros(n, dtype=bool)
    if n == 0 or max_diameter_m <= 0 or end_xy.shape[1] < 4:
        return ring
    perimeter_max = np.pi * max_diameter_m
    short = np.flatnonzero(shapes[:, 0] <= perimeter_max)
    if len(short) < 2:
        return ring
    node = np.full(2 * n, -1, dtype=np.int64)
    short_ends = np.sort(np.r_[2 * short, 2 * short + 1])
    node[short_ends] = _cluster(end_xy[short_ends, :2], tolerance)
    cand = (shapes[:, 0] <= perimeter_max) & (node[0::2] != node[1::2])
    ends = np.flatnonzero(np.repeat(cand, 2))
    if len(ends) < 4:
        return ring
    # traversal x runs through part x >> 1 entering by end x, leaving by end x ^ 1; at the
    # node of end x ^ 1 it may go on into any other candidate part entering by end y
    order = ends[np.argsort(node[ends], kind="stable")]
    first = np.r_[True, node[order][1:] != node[order][:-1]]
    start = np.flatnonzero(first)
    count = np.diff(np.r_[start, len(order)])
    keep = count <= JUNCTION_MAX_ENDS
    pa, pb = [], []
    for k in np.unique(count[keep & (count >= 2)]):
        i, j = np.where(~np.eye(int(k), dtype=bool))
        base = start[keep & (count == k)][:, None]
        pa.append((base + i).ravel())
        pb.append((base + j).ravel())
    if not pa:
        return ring
    leave, enter = order[np.concatenate(pa)], order[np.concatenate(pb)]
    ok = (leave >> 1) != (enter >> 1)
    leave, enter = leave[ok], enter[ok]
    out_dir = -end_xy[leave, 2:]          # travelling out of the part at its end
    in_dir = end_xy[enter, 2:]            # travelling into the next part
    turn = np.arctan2(out_dir[:, 0] * in_dir[:, 1] - out_dir[:, 1] * in_dir[:, 0],
                      np.einsum("ij,ij->i", out_dir, in_dir))
    ok = np.abs(turn) <= np.radians(RING_NODE_TURN_DEG)
    leave, enter, turn = leave[ok], enter[ok], turn[ok]
    if not len(leave):
        return ring
    # per leaving end, the most-left continuation
    pick = np.lexsort((-turn, leave))
    leave, enter, turn = leave[pick], enter[pick], turn[pick]
    best = np.r_[True, leave[1:] != leave[:-1]]
    succ = np.full(2 * n, -1, dtype=np.int64)   # traversal -> next traversal
    node_turn = np.zeros(2 * n)
    x = leave[best] ^ 1                         # the traversal that leaves by this end
    succ[x] = enter[best]
    node_turn[x] = turn[best]
    # traversal sums: forward (x even) as digitised, reversed with the signs flipped
    trav = np.arange(2 * n)
    sign = np.where(trav & 1, -1.0, 1.0)
    length = shapes[trav >> 1, 0]
    inner = sign * shapes[trav >> 1, 2]
    x0 = np.flatnonzero((succ >= 0) & np.repeat(cand, 2))
    origin = end_xy[x0, :2]  # each walk adds up its loop's area about its first point

    def area2(x, at):
        """Twice the area traversal ``x`` sweeps about ``at``, and the gap from the end
        it enters by (the parts' ends may lie up to the tolerance apart)."""
        p = x >> 1
        v0, vn = end_xy[2 * p, :2] - at, end_xy[2 * p + 1, :2] - at
        swept = shapes[p, 1] + v0[:, 0] * (vn[:, 1] - v0[:, 1]) - v0[:, 1] * (vn[:, 0] - v0[:, 0])
        return sign[x] * swept

    def gap2(a, b, at):
        pa, pb = end_xy[a, :2] - at, end_xy[b, :2] - at
        return pa[:, 0] * pb[:, 1] - pa[:, 1] * pb[:, 0]

    cur = x0.copy()
    tot_len, tot_area2, tot_turn = length[x0].copy(), area2(x0, origin), inner[x0].copy()
    closed = np.zeros(len(x0), dtype=bool)
    alive = np.ones(len(x0), dtype=bool)
    for _ in range(RING_MAX_PARTS):
        nxt = succ[cur]
        step = alive & (nxt >= 0)
        tot_turn[step] += node_turn[cur[step]]
        s = np.flatnonzero(step)
        tot_area2[s] += gap2(cur[s] ^ 1, nxt[s], origin[s])
        home = step & (nxt == x0)
        closed |= home
        go = step & ~home
        alive = go & (tot_len <= perimeter_max)
        cur = np.where(go, nxt, cur)
        g = np.flatnonzero(go)
        tot_len[g] += length[cur[g]]
        tot_area2[g] += area2(cur[g], origin[g])
        tot_turn[g] += inner[cur[g]]
        if not alive.any():
            break
    area = 0.5 * tot_area2
    round_enough = 4.0 * np.pi * area >= RING_ROUNDNESS * tot_len ** 2
    full_turn = np.abs(tot_turn - 2.0 * np.pi) <= np.radians(RING_NODE_TURN_DEG)
    is_ring = closed & (tot_len <= perimeter_max) & (area > 0) & round_enough & full_turn
    ring[x0[is_ring] >> 1] = True
    return ring


@dataclass
class PartSummary:
    """What the client of a partitioned scan needs of a partition's parts to screen them
    (:func:`screen_summaries`): per part its ends (:func:`part_ends`), shape
    (:func:`part_shapes`), identity (:func:`part_identity`, only with ``drop_duplicates``)
    and row's ``src_fid``."""

    end_xy: np.ndarray
    shapes: np.ndarray
    identity: np.ndarray | None
    fid: np.ndarray

    @classmethod
    def of(cls, parts: tuple[np.ndarray, np.ndarray], fid: np.ndarray,
           config: Any, length: np.ndarray | None = None) -> PartSummary:
        """Summarise cleaned ``parts`` (``fid``: the src_fid of each part's row;
        ``length``: their lengths when known, see :func:`part_shapes`)."""
        if not len(parts[1]):
            return cls.empty()
        return cls(part_ends(parts)[2],
                   part_shapes(parts, np.pi * config.ring_max_diameter_m, length),
                   part_identity(parts) if config.drop_duplicates else None, fid)

    @classmethod
    def empty(cls) -> PartSummary:
        """The summary of no parts."""
        return cls(np.zeros((0, 4)), np.zeros((0, 3)), np.zeros((0, 3)), np.zeros(0, np.int64))


@dataclass
class Screened:
    """Result of :func:`screen_summaries`, per part in the order given."""

    dropped: np.ndarray          # (n,) bool: a duplicate, skipped
    skipped: list                # skipped-list entries for the duplicates
    group: np.ndarray | None     # (kept,) join groups of the kept parts, rings made roundabouts
    ring: np.ndarray             # (kept,) bool: a kept part recognised as a roundabout by shape
    end_xy: np.ndarray           # (2 kept, 4) ends of the kept parts


def screen_parts(parts: tuple[np.ndarray, np.ndarray], fid: np.ndarray,
                 group: np.ndarray | None, config: Any,
                 length: np.ndarray | None = None) -> Screened:
    """Screen cleaned parts before joining (see :func:`screen_summaries`; ``length``: the
    parts' lengths when known)."""
    return screen_summaries(PartSummary.of(parts, fid, config, length), group, config)


def screen_summaries(summary: PartSummary, group: np.ndarray | None,
                     config: Any) -> Screened:
    """Duplicates out (:func:`duplicate_parts`, with ``drop_duplicates``), then untagged
    roundabouts found among the parts kept (:func:`with_rings`). The same step in one
    process (:func:`prepare`) and over all partitions on the client, so both drop the same
    copies and find the same rings."""
    n = len(summary.shapes)
    end_xy, shapes = summary.end_xy, summary.shapes
    dropped = np.zeros(n, dtype=bool)
    skipped: list[dict] = []
    if config.drop_duplicates and n:
        dropped, of = duplicate_parts(end_xy, shapes[:, 0], summary.identity)
        skipped = duplicate_skips(summary.fid, dropped, of)
        if dropped.any():
            end_xy = end_xy[np.repeat(~dropped, 2)]
            shapes = shapes[~dropped]
            group = None if group is None else group[~dropped]
    group, ring = with_rings(group, end_xy, shapes, config)
    return Screened(dropped, skipped, group, ring, end_xy)


def with_rings(group: np.ndarray | None, end_xy: np.ndarray, shapes: np.ndarray,
               config: Any) -> tuple[np.ndarray | None, np.ndarray]:
    """The join groups (:func:`join_groups`) with the parts of untagged rings
    (:func:`ring_parts`) made roundabouts; and which parts those are (not those marked as
    roundabouts already)."""
    ring = ring_parts(end_xy, shapes, config.join_tolerance_m, config.ring_max_diameter_m)
    if group is not None:
        ring &= ~np.asarray(group == "roundabout", dtype=bool)
    if not ring.any():
        return group, ring
    if group is None:
        group = np.full(len(ring), "road", dtype=object)
    group = np.where(ring, "roundabout", group)
    return group, ring


def _join(parts: tuple[np.ndarray, np.ndarray], part_row: np.ndarray,
          group: np.ndarray | None, tolerance: float, through_deg: float = 0.0,
          seg: np.ndarray | None = None) -> Chains:
    """Join parts that continue each other into chains (see :func:`chain_order`)."""
    starts, ends, end_xy = part_ends(parts)
    part, reverse, chain_of = chain_order(end_xy, group, tolerance, through_deg)
    return assemble(parts[0], starts, ends, part_row, part, reverse, chain_of, tolerance,
                    seg=seg)


def _same_group(group: np.ndarray | None, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Whether the parts of ends ``a`` and ``b`` may join: no ``group``, or equal non-missing
    group values."""
    if group is None:
        return np.ones(len(a), dtype=bool)
    ga, gb = group[a >> 1], group[b >> 1]
    return np.asarray(pd.notna(ga) & (ga == gb), dtype=bool)


def chain_order(end_xy: np.ndarray, group: np.ndarray | None,
                tolerance: float, through_deg: float = 0.0,
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Which parts form which chain, in which order and direction, from the part ends alone.

    Parameters
    ----------
    end_xy : ndarray (2 n, 4) or (2 n, 2)
        Start and end of every part, with the direction into the part (see
        :func:`part_ends`). With directions, two parts that leave a node in nearly the same
        direction are not joined: that is a road doubling back on itself (a duplicated
        feature), not a continuation.
    group : ndarray (n,) or None
        Parts join only where their group values are equal.
    tolerance : float
        Distance within which ends meet (m).
    through_deg : float
        At nodes where three or more ends meet (junctions), pair the ends that continue
        each other most straightly, turning at most this angle, straightest pair first
        (needs the directions); 0 joins at two-end nodes only.

    Returns
    -------
    part, reverse, chain_of : ndarray
        One entry per part in chain order: the part, whether it runs backwards, its chain.
    """
    n = len(end_xy) // 2
    node = _cluster(end_xy[:, :2], tolerance)
    degree = np.bincount(node, minlength=node.max() + 1)
    mate = np.full(2 * n, -1, dtype=np.int64)
    deg2 = degree[node] == 2
    cand = np.flatnonzero(deg2)
    order = cand[np.argsort(node[cand], kind="stable")]
    a, b = order[0::2], order[1::2]
    ok = (a >> 1) != (b >> 1)  # a part never joins itself (closed ring)
    if end_xy.shape[1] >= 4:
        same_way = np.einsum("ij,ij->i", end_xy[a, 2:], end_xy[b, 2:])
        ok &= same_way < np.cos(np.radians(UTURN_DEG))
    ok &= _same_group(group, a, b)
    mate[a[ok]], mate[b[ok]] = b[ok], a[ok]
    if through_deg > 0 and end_xy.shape[1] >= 4:
        a, b = _through_pairs(end_xy, node, degree, group, through_deg)
        mate[a], mate[b] = b, a
    # oriented traversal: entering part p by end x, one leaves by x ^ 1
    succ = mate[np.arange(2 * n) ^ 1]
    head, pos = _rank(succ)
    # each chain appears twice (both orientations): keep the orientation that runs most
    # parts forward (entered by their start, an even end), then the lower first part id
    forward = (np.arange(2 * n) & 1) == 0
    uniq, inv = np.unique(head, return_inverse=True)
    fwd_count = np.bincount(inv, weights=forward)
    size = np.bincount(inv)
    first_part = uniq >> 1
    # pair each orientation with its reverse: its tail's partner end
    tail_of = np.full(len(uniq), -1)
    last = np.zeros(len(uniq), dtype=np.int64)
    np.maximum.at(last, inv, pos)
    is_tail = pos == last[inv]
    tail_of[inv[is_tail]] = np.flatnonzero(is_tail)
    partner_head = head[tail_of ^ 1]
    partner = np.searchsorted(uniq, partner_head)
    score = np.stack([fwd_count * 2 - size, -first_part], axis=1)
    better = (score[:, 0] > score[partner, 0]) | (
        (score[:, 0] == score[partner, 0]) & (score[:, 1] > score[partner, 1]))
    self_pair = partner == np.arange(len(uniq))
    keep_orient = better | self_pair
    keep_node = keep_orient[inv]
    nodes = np.flatnonzero(keep_node)
    chain_of = np.searchsorted(np.flatnonzero(keep_orient), inv[nodes])
    order = np.lexsort((pos[nodes], chain_of))
    nodes, chain_of = nodes[order], chain_of[order]
    return nodes >> 1, (nodes & 1) == 1, chain_of


#: Junctions with more ends than this are left unjoined (a cluster of ends, not a junction).
JUNCTION_MAX_ENDS = 8


def _through_pairs(end_xy: np.ndarray, node: np.ndarray, degree: np.ndarray,
                   group: np.ndarray | None, through_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Pairs of ends ``(a, b)`` that continue each other through junctions.

    Every pair of ends at a node of 3 to :data:`JUNCTION_MAX_ENDS` ends is a candidate when
    the road turns at most ``through_deg`` from one into the other (the inward directions
    point nearly opposite ways), the two ends belong to different parts and, with a
    ``group``, to the same group. Per node the straightest candidate is taken first, then
    the straightest among the ends still free, and so on.
    """
    ends = np.flatnonzero((degree[node] >= 3) & (degree[node] <= JUNCTION_MAX_ENDS))
    ends = ends[np.argsort(node[ends], kind="stable")]
    if len(ends) == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    first = np.r_[True, node[ends][1:] != node[ends][:-1]]
    start = np.flatnonzero(first)
    count = np.diff(np.r_[start, len(ends)])
    pa, pb = [], []
    for k in np.unique(count):
        i, j = np.triu_indices(int(k), 1)
        base = start[count == k][:, None]
        pa.append((base + i).ravel())
        pb.append((base + j).ravel())
    a, b = ends[np.concatenate(pa)], ends[np.concatenate(pb)]
    straight = -np.einsum("ij,ij->i", end_xy[a, 2:], end_xy[b, 2:])
    ok = ((a >> 1) != (b >> 1)) & (straight >= np.cos(np.radians(through_deg)))
    ok &= _same_group(group, a, b)
    a, b, straight = a[ok], b[ok], straight[ok]
    order = np.lexsort((-straight, node[a]))
    a, b = a[order], b[order]
    used = np.zeros(len(end_xy), dtype=bool)
    take_a, take_b = [], []
    while len(a):
        best = np.r_[True, node[a][1:] != node[a][:-1]]  # straightest left at each node
        take_a.append(a[best])
        take_b.append(b[best])
        used[a[best]] = used[b[best]] = True
        free = ~used[a] & ~used[b]
        a, b = a[free], b[free]
    if not take_a:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(take_a), np.concatenate(take_b)


def assemble(xy: np.ndarray, starts: np.ndarray, ends: np.ndarray, part_row: np.ndarray,
             part: np.ndarray, reverse: np.ndarray, chain_of: np.ndarray,
             tolerance: float, seg: np.ndarray | None = None) -> Chains:
    """Build :class:`Chains` from cleaned parts and a chain order (see :func:`chain_order`).

    ``chain_of`` must be sorted and number the chains ``0 .. k-1``. ``seg``, when given,
    is the length of the segment from each vertex of ``xy`` to the next within its part
    (from :func:`_clean_parts`): reused for the chains' measures (the same values, since
    ``hypot`` ignores the signs a reversed part gives its differences) instead of
    computed again; only segments across a joint between parts are computed.
    """
    # vertex index sequences: part p contributes take[p] vertices from base[p] onwards,
    # forwards or backwards (later parts of a chain drop their shared joint vertex)
    first_in_chain = np.ones(len(part), dtype=bool)
    first_in_chain[1:] = chain_of[1:] != chain_of[:-1]
    later = (~first_in_chain).astype(np.int64)
    take = ends[part] - starts[part] + 1 - later
    base = np.where(reverse, ends[part] - later, starts[part] + later)
    out_first = np.cumsum(take) - take
    # output vertex k of part p is vertex base + (k - out_first) of xy, forwards, or
    # base - (k - out_first) backwards: k plus or minus k, plus a per-part shift
    backwards = np.repeat(reverse, take)
    vidx = np.arange(int(take.sum()), dtype=np.int64)
    np.negative(vidx, out=vidx, where=backwards)
    vidx += np.repeat(np.where(reverse, base + out_first, base - out_first), take)
    coords = _rows(xy, vidx)
    n_chains = int(chain_of.max()) + 1
    offsets = np.zeros(n_chains + 1, dtype=np.int64)
    offsets[1:] = np.cumsum(np.bincount(chain_of, weights=take, minlength=n_chains)
                            ).astype(np.int64)
    if seg is None:
        del vidx
        seg = np.hypot(np.diff(coords[:, 0]), np.diff(coords[:, 1]))
    else:
        # within a part, the segment between vertices v and v + 1 of xy (either way)
        seg = seg[np.minimum(vidx[:-1], vidx[1:])]
        del vidx
        joint = out_first[1:] - 1  # from a part's last vertex to the next part's first
        seg[joint] = np.hypot(coords[joint + 1, 0] - coords[joint, 0],
                              coords[joint + 1, 1] - coords[joint, 1])
    seg[offsets[1:-1] - 1] = 0.0  # no length from one chain's last vertex to the next
    measure = np.empty(len(coords))
    measure[0] = 0.0
    np.cumsum(seg, out=measure[1:])
    del seg
    measure -= np.repeat(measure[offsets[:-1]], np.diff(offsets))
    rows = RaggedRows(part_row[part], np.append(np.flatnonzero(first_in_chain), len(part)))
    firsts = coords[offsets[:-1]]
    lasts = coords[offsets[1:] - 1]
    closed = np.hypot(*(firsts - lasts).T) <= max(tolerance, 1e-9)
    return Chains(coords=coords, offsets=offsets, vertex_row=np.repeat(part_row[part], take),
                  measure=measure, crs=None, rows=rows, closed=closed,
                  vertex_reversed=backwards)


class RaggedRows:
    """The input rows of each chain, in chain order, as one flat array and offsets.

    ``rows[i]`` is the array of chain ``i``'s rows; ``rows[a:b]`` is a ``RaggedRows`` of
    chains ``a`` to ``b - 1``. Held flat: one Python object per chain would cost a second
    per hundred thousand chains.
    """

    def __init__(self, values: np.ndarray, offsets: np.ndarray) -> None:
        self.values = values
        self.offsets = offsets

    def __len__(self) -> int:
        return len(self.offsets) - 1

    def __getitem__(self, key: Any) -> Any:
        if isinstance(key, slice):
            start, stop, step = key.indices(len(self))
            if step != 1:
                raise IndexError("RaggedRows slices need a step of 1")
            stop = max(stop, start)
            return RaggedRows(self.values, self.offsets[start:stop + 1])
        i = range(len(self))[key]
        return self.values[self.offsets[i]:self.offsets[i + 1]]

    def __iter__(self) -> Any:
        return (self[i] for i in range(len(self)))


def _cluster(points: np.ndarray, tolerance: float) -> np.ndarray:
    """Label points so that points within ``tolerance`` (transitively) share a label."""
    n = len(points)
    if tolerance <= 0:
        _, label = np.unique(points, axis=0, return_inverse=True)
        return label.ravel()
    pairs = cKDTree(points).query_pairs(tolerance, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    return label


def _rank(succ: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """List ranking: for each node of a set of paths, its path head and position.

    ``succ[x]`` is the next node or -1. Nodes are oriented part ends, so every path has a
    mirror path (``x ^ 1`` order reversed); a cycle is cut at its smallest node, and its
    mirror cycle at the mirror edge, so that both orientations stay mirrors.
    """
    n = len(succ)
    succ = succ.copy()
    ident = np.arange(n)
    steps = int(np.ceil(np.log2(max(n, 2)))) + 2
    while True:
        pred = np.full(n, -1, dtype=np.int64)
        has = succ >= 0
        pred[succ[has]] = ident[has]
        anc = np.where(pred >= 0, pred, ident)
        dist = (pred >= 0).astype(np.int64)
        for _ in range(steps):
            nxt = anc[anc]
            if np.array_equal(nxt, anc):
                break
            dist = dist + dist[anc]
            anc = nxt
        unresolved = pred[anc] >= 0
        if not unresolved.any():
            return anc, dist
        nodes = np.flatnonzero(unresolved)
        graph = coo_matrix((np.ones(len(nodes)), (nodes, succ[nodes])), shape=(n, n))
        _, comp = connected_components(graph, directed=False)
        smallest = np.full(comp.max() + 1, n)
        np.minimum.at(smallest, comp[nodes], nodes)
        cut = set()
        for h in np.unique(smallest[comp[nodes]]):
            mirror = smallest[comp[h ^ 1]]
            if mirror in cut:
                continue
            cut.add(int(h))
            p = pred[h]
            succ[p] = -1  # edge p -> h
            succ[h ^ 1] = -1  # mirror edge h^1 -> p^1
