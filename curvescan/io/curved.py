"""Curved geometries (ISO WKB CircularString, CompoundCurve, MultiCurve and the curved
surfaces) turned into lines.

GeoPackage and GDAL carry exact circular arcs, as road centrelines drawn in design or
survey software often are; shapely (GEOS) reads only linear geometries. Each arc is
stroked into vertices on its circle, at most :data:`ARC_STEP_DEG` degrees apart, with its
ends exact, so a circle fitted to them gives the arc's radius. Z and M are dropped (the
scan is 2D). Linear geometries are passed to :func:`shapely.from_wkb` unchanged.
"""

from __future__ import annotations

import struct

import numpy as np
import shapely

__all__ = ["from_wkb", "is_curved", "ARC_STEP_DEG", "CURVED_TYPES"]

#: Largest angle (degrees) an arc turns between two of its stroked vertices.
ARC_STEP_DEG = 1.0
#: ISO base type codes of the curved geometries.
CURVED_TYPES = frozenset({8, 9, 10, 11, 12})
_NAMES = {8: "CircularString", 9: "CompoundCurve", 10: "CurvePolygon", 11: "MultiCurve",
          12: "MultiSurface"}


def _header(buf: bytes, pos: int) -> tuple[str, int, int, int]:
    """Byte order, base type, coordinates per point and the position after the header."""
    order = "<" if buf[pos] == 1 else ">"
    (code,) = struct.unpack_from(order + "I", buf, pos + 1)
    pos += 5
    has_z = bool(code & 0x80000000)  # extended (PostGIS) flags
    has_m = bool(code & 0x40000000)
    if code & 0x20000000:
        pos += 4  # an SRID
    code &= 0x0FFFFFFF
    dims, base = divmod(code, 1000)  # ISO: 1000 Z, 2000 M, 3000 ZM
    has_z |= dims in (1, 3)
    has_m |= dims in (2, 3)
    return order, base, 2 + has_z + has_m, pos


def _base_type(buf: bytes) -> int:
    if buf is None or len(buf) < 5:
        return 0
    return _header(buf, 0)[1]


def is_curved(values) -> np.ndarray:
    """Whether each WKB blob holds a curved geometry (at its top level)."""
    return np.fromiter((_base_type(v) in CURVED_TYPES for v in values), dtype=bool,
                       count=len(values))


def _points(buf: bytes, pos: int, order: str, dim: int) -> tuple[np.ndarray, int]:
    (n,) = struct.unpack_from(order + "I", buf, pos)
    pos += 4
    xy = np.frombuffer(buf, dtype=np.dtype(order + "f8"), count=n * dim, offset=pos)
    return xy.reshape(n, dim)[:, :2].astype(float), pos + 8 * n * dim


def stroke(points: np.ndarray, step_deg: float = ARC_STEP_DEG) -> np.ndarray:
    """Vertices along a circular string (arcs through point triples sharing their ends)."""
    out = [points[:1]]
    for i in range(0, len(points) - 2, 2):
        p0, p1, p2 = points[i], points[i + 1], points[i + 2]
        out.append(_arc(p0, p1, p2, step_deg)[1:])
    return np.concatenate(out) if len(out) > 1 else points.copy()


def _arc(p0: np.ndarray, p1: np.ndarray, p2: np.ndarray, step_deg: float) -> np.ndarray:
    if np.allclose(p0, p2):  # a full circle: p1 lies opposite p0
        centre = 0.5 * (p0 + p1)
        radius = float(np.hypot(*(p0 - centre)))
        if radius == 0:
            return np.array([p0, p2])
        a0 = np.arctan2(p0[1] - centre[1], p0[0] - centre[0])
        sweep = 2 * np.pi  # counter-clockwise, as GDAL strokes it
    else:
        ax, ay = p1 - p0
        bx, by = p2 - p0
        d = 2.0 * (ax * by - ay * bx)
        scale = max(float(np.hypot(ax, ay)), float(np.hypot(bx, by)), 1e-300)
        if abs(d) <= 1e-12 * scale * scale:  # collinear: a straight piece
            return np.array([p0, p1, p2]) if np.dot(p1 - p0, p2 - p1) < 0 else np.array(
                [p0, p2])
        ux = (by * (ax * ax + ay * ay) - ay * (bx * bx + by * by)) / d
        uy = (ax * (bx * bx + by * by) - bx * (ax * ax + ay * ay)) / d
        centre = p0 + np.array([ux, uy])
        radius = float(np.hypot(ux, uy))
        a0 = np.arctan2(p0[1] - centre[1], p0[0] - centre[0])
        a1 = np.arctan2(p1[1] - centre[1], p1[0] - centre[0])
        a2 = np.arctan2(p2[1] - centre[1], p2[0] - centre[0])
        ccw = d > 0  # p0 -> p1 -> p2 turns left
        if ccw:
            sweep = (a2 - a0) % (2 * np.pi)
        else:
            sweep = -((a0 - a2) % (2 * np.pi))
        del a1
    n = max(int(np.ceil(abs(np.degrees(sweep)) / step_deg)), 1)
    t = a0 + sweep * np.arange(n + 1) / n
    xy = centre + radius * np.column_stack([np.cos(t), np.sin(t)])
    xy[0], xy[-1] = p0, p2  # exact ends
    return xy


def _children(buf: bytes, pos: int, order: str, step_deg: float) -> tuple[list, int]:
    """The member geometries of a collection (or compound) at ``pos``."""
    (n,) = struct.unpack_from(order + "I", buf, pos)
    pos += 4
    parts = []
    for _ in range(n):
        g, pos = _parse(buf, pos, step_deg)
        parts.append(g)
    return parts, pos


def _parse(buf: bytes, pos: int, step_deg: float):
    """``(shapely geometry, next position)`` of the geometry at ``pos``."""
    order, base, dim, pos = _header(buf, pos)
    if base == 1:
        xy = np.frombuffer(buf, dtype=np.dtype(order + "f8"), count=dim, offset=pos)
        return shapely.Point(xy[:2]), pos + 8 * dim
    if base in (2, 8):
        xy, pos = _points(buf, pos, order, dim)
        if base == 8:
            xy = stroke(xy, step_deg)
        return shapely.LineString(xy) if len(xy) else shapely.LineString(), pos
    if base == 3:
        (n,) = struct.unpack_from(order + "I", buf, pos)
        pos += 4
        rings = []
        for _ in range(n):
            xy, pos = _points(buf, pos, order, dim)
            rings.append(xy)
        return (shapely.Polygon(rings[0], rings[1:]) if rings else shapely.Polygon()), pos
    if base not in (4, 5, 6, 7, 9, 10, 11, 12):
        raise ValueError(f"WKB geometry type {base} is not read")
    parts, pos = _children(buf, pos, order, step_deg)
    if base == 9:  # pieces of one line, each starting where the last ended
        xy = [shapely.get_coordinates(g) for g in parts]
        xy = np.concatenate([xy[0]] + [p[1:] for p in xy[1:]]) if xy else np.zeros((0, 2))
        return shapely.LineString(xy) if len(xy) else shapely.LineString(), pos
    if base == 10:
        rings = [shapely.get_coordinates(g) for g in parts]
        return (shapely.Polygon(rings[0], rings[1:]) if rings else shapely.Polygon()), pos
    if base in (5, 11):
        return shapely.MultiLineString(parts), pos
    if base in (6, 12):
        return shapely.MultiPolygon(parts), pos
    if base == 4:
        return shapely.MultiPoint(parts), pos
    return shapely.GeometryCollection(parts), pos


def from_wkb(values, step_deg: float = ARC_STEP_DEG) -> tuple[np.ndarray, dict[str, int]]:
    """Shapely geometries of the WKB ``values``, curved ones stroked into lines.

    Returns the geometries and the count of curved geometries by type name. A blob that
    cannot be read becomes a missing geometry (the scan then skips and lists its row).
    """
    values = np.asarray(values, dtype=object)
    curved = is_curved(values)
    out = np.empty(len(values), dtype=object)
    if (~curved).any():
        out[~curved] = shapely.from_wkb(values[~curved], on_invalid="ignore")
    counts: dict[str, int] = {}
    for i in np.flatnonzero(curved):
        buf = bytes(values[i])
        name = _NAMES[_base_type(buf)]
        counts[name] = counts.get(name, 0) + 1
        try:
            out[i] = _parse(buf, 0, step_deg)[0]
        except (ValueError, struct.error, shapely.errors.GEOSException):
            out[i] = None
    return out, counts
