"""Synthetic roads and DEMs with known superelevation and grade, for tests and benchmarks.

A road here is tangent - clothoid spiral - circular arc - spiral - tangent. Its surface has
a normal crown on the tangents, full superelevation on the circular part and a linear
runoff along each spiral (the outer lane turns from ``-crown`` to ``+e``, the inner lane
stays at ``+crown`` until the outer lane reaches it), a constant grade, shoulders falling
away at 4 % and natural terrain beyond them. A DEM cell holds the mean of the surface over
the cell (as a ground-return average would) plus Gaussian noise.

Nothing here is a check value of the outside world; it checks the method against itself.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .geometry.stations import Stations

__all__ = ["Road", "make_road", "terrain", "surface", "render", "stations_and_curves"]

_SHOULDER_M = 1.5
_SHOULDER_SLOPE = 0.04
_BLEND_M = 6.0


@dataclass
class Road:
    """One synthetic road (a chain with one curve), densely sampled along ``s``."""

    s: np.ndarray
    x: np.ndarray
    y: np.ndarray
    heading: np.ndarray
    curvature: np.ndarray
    ts: float  # tangent to spiral
    sc: float  # spiral to circular part
    cs: float  # circular part to spiral
    st: float  # spiral to tangent
    toward: int  # +1 left, -1 right
    radius_m: float
    e: float  # superelevation of the circular part (fraction); crowned roads use crown
    crowned: bool  # circular part keeps the normal crown
    grade: float
    z0: float
    width_m: float = 7.0


def make_road(
    radius_m: float, spiral_m: float, arc_m: float, tangent_m: float, toward: int,
    x0: float, y0: float, heading0: float, *, e: float, grade: float, z0: float,
    crowned: bool = False, width_m: float = 7.0, ds: float = 0.25,
) -> Road:
    """Build a road by integrating its curvature profile at step ``ds`` (m)."""
    ts, sc = tangent_m, tangent_m + spiral_m
    cs, st = sc + arc_m, sc + arc_m + spiral_m
    total = st + tangent_m
    s = np.arange(0.0, total + ds / 2, ds)
    k = np.interp(s, [0, ts, sc, cs, st, total], [0, 0, 1, 1, 0, 0]) * toward / radius_m
    mid_k = 0.5 * (k[1:] + k[:-1])
    h = heading0 + np.concatenate(([0.0], np.cumsum(mid_k * ds)))
    mid_h = 0.5 * (h[1:] + h[:-1])
    x = x0 + np.concatenate(([0.0], np.cumsum(np.cos(mid_h) * ds)))
    y = y0 + np.concatenate(([0.0], np.cumsum(np.sin(mid_h) * ds)))
    return Road(s, x, y, h, k, ts, sc, cs, st, int(toward), radius_m, e, crowned, grade, z0,
                width_m)


def terrain(x: np.ndarray, y: np.ndarray, seed: int = 0) -> np.ndarray:
    """Smooth natural terrain (m): a tilt plus a few long waves, 5-15 m relief."""
    rng = np.random.default_rng(seed)
    z = 100.0 + 0.01 * x - 0.005 * y
    for _ in range(4):
        wl = rng.uniform(150, 900)
        ang = rng.uniform(0, np.pi)
        amp = rng.uniform(1.0, 4.0)
        ph = rng.uniform(0, 2 * np.pi)
        z = z + amp * np.sin((x * np.cos(ang) + y * np.sin(ang)) * 2 * np.pi / wl + ph)
    return z


def lane_slopes(road: Road, s: np.ndarray, crown: float = 0.02) -> tuple[np.ndarray, ...]:
    """Return the true inner and outer lane slopes (toward the centre) at ``s``."""
    e = crown if road.crowned else road.e
    mid = 0.5 * (road.sc + road.cs)
    t = np.where(s < mid, (s - road.ts) / max(road.sc - road.ts, 1e-9),
                 (road.st - s) / max(road.st - road.cs, 1e-9))
    t = np.clip(t, 0.0, 1.0)
    if road.crowned:
        return np.full(s.shape, crown), np.full(s.shape, -crown)
    outer = -crown + (e + crown) * t
    return np.maximum(crown, outer), outer


def surface(road: Road, s: np.ndarray, u: np.ndarray, seed: int, crown: float = 0.02):
    """Surface elevation at chain position ``s`` and offset ``u`` toward the centre."""
    inner, outer = lane_slopes(road, s, crown)
    zc = road.z0 + road.grade * s
    half = road.width_m / 2
    lane_e = np.where(u >= 0, inner, outer)
    up = np.clip(u, -half, half)
    z = zc - lane_e * up
    beyond = np.abs(u) - half
    z = z - _SHOULDER_SLOPE * np.clip(beyond, 0, _SHOULDER_M)
    px, py, _ = _offset_xy(road, s, u)
    ramp = np.clip((beyond - _SHOULDER_M) / _BLEND_M, 0, 1)
    ramp = 0.5 - 0.5 * np.cos(np.pi * ramp)
    return z + ramp * (terrain(px, py, seed) - z)


def _offset_xy(road: Road, s: np.ndarray, u: np.ndarray):
    x = np.interp(s, road.s, road.x)
    y = np.interp(s, road.s, road.y)
    h = np.interp(s, road.s, road.heading)
    nx, ny = -np.sin(h) * road.toward, np.cos(h) * road.toward
    return x + u * nx, y + u * ny, h


def render(
    roads: list[Road], x_left: float, y_top: float, cell_m: float, shape: tuple[int, int],
    *, seed: int = 0, noise_m: float = 0.03, step_m: float = 0.25, rng=None,
) -> np.ndarray:
    """Rasterise roads over natural terrain: cell value = mean surface in the cell + noise."""
    rows, cols = shape
    total = np.zeros(rows * cols)
    count = np.zeros(rows * cols)
    for road in roads:  # generator only; not a scan path
        reach = road.width_m / 2 + _SHOULDER_M + _BLEND_M
        s = np.arange(0.0, road.s[-1], step_m)
        u = np.arange(-reach, reach + step_m / 2, step_m)
        ss, uu = (a.ravel() for a in np.meshgrid(s, u, indexing="ij"))
        px, py, _ = _offset_xy(road, ss, uu)
        c = np.floor((px - x_left) / cell_m).astype(np.int64)
        r = np.floor((y_top - py) / cell_m).astype(np.int64)
        ok = (c >= 0) & (c < cols) & (r >= 0) & (r < rows)
        flat = r[ok] * cols + c[ok]
        total += np.bincount(flat, weights=surface(road, ss[ok], uu[ok], seed),
                             minlength=rows * cols)
        count += np.bincount(flat, minlength=rows * cols)
    yy, xx = np.mgrid[0:rows, 0:cols]
    gx = x_left + (xx + 0.5) * cell_m
    gy = y_top - (yy + 0.5) * cell_m
    base = terrain(gx, gy, seed).ravel()
    z = np.where(count > 0, total / np.maximum(count, 1), base).reshape(rows, cols)
    rng = rng or np.random.default_rng(seed + 1)
    return z + rng.normal(0.0, noise_m, z.shape) if noise_m else z


def stations_and_curves(
    roads: list[Road], spacing_m: float = 5.0, crs: str = "EPSG:32633"
) -> tuple[Stations, pd.DataFrame]:
    """Stations every ``spacing_m`` along each road and the matching curve table."""
    xs, ys, ss, hs, ks, ch, offs = [], [], [], [], [], [], [0]
    for i, road in enumerate(roads):  # generator only
        s = np.arange(0.0, road.s[-1] + 1e-9, spacing_m)
        xs.append(np.interp(s, road.s, road.x))
        ys.append(np.interp(s, road.s, road.y))
        hs.append(np.interp(s, road.s, road.heading))
        ks.append(np.interp(s, road.s, road.curvature))
        ss.append(s)
        ch.append(np.full(s.size, i))
        offs.append(offs[-1] + s.size)
    st = Stations(np.concatenate(xs), np.concatenate(ys), np.concatenate(ss),
                  np.concatenate(hs), np.concatenate(ks), np.concatenate(ch),
                  np.asarray(offs, dtype=np.int64))
    curves = pd.DataFrame({
        "chain_id": np.arange(len(roads)),
        "s_start_m": [r.ts for r in roads],
        "s_end_m": [r.st for r in roads],
        "circ_start_m": [r.sc for r in roads],
        "circ_end_m": [r.cs for r in roads],
        "direction": ["left" if r.toward > 0 else "right" for r in roads],
        "radius_m": [r.radius_m for r in roads],
        "attr_width_m": [r.width_m for r in roads],
        "posted_kmh": np.nan,
    })
    curves.attrs["crs"] = crs
    return st, curves


def plane_arcs(
    radius_m: float = 2000.0, half_angle: float = 0.06, spacing_m: float = 5.0,
    x_shift_m: float = 1000.0, crs: str = "EPSG:32633",
) -> tuple[Stations, pd.DataFrame]:
    """Two circular chains (a left and a right curve) for tilted-plane checks.

    Chain 0 turns left with centre ``(0, R)``, chain 1 turns right with centre
    ``(x_shift, -R)``; both run through heading ``-half_angle .. +half_angle`` (left) or the
    mirror (right), so at the middle they head along +x. Each curve is the chain less 40 m
    at either end, all circular.
    """
    length = 2 * radius_m * half_angle
    s = np.arange(0.0, length + 1e-9, spacing_m)
    h = -half_angle + s / radius_m
    x0, y0 = radius_m * np.sin(h), radius_m * (1 - np.cos(h))
    st = Stations(
        x=np.concatenate((x0, x0 + x_shift_m)),
        y=np.concatenate((y0, -y0)),
        s=np.concatenate((s, s)),
        heading=np.concatenate((h, -h)),
        curvature=np.concatenate((np.full(s.size, 1 / radius_m), np.full(s.size, -1 / radius_m))),
        chain=np.repeat([0, 1], s.size),
        offsets=np.array([0, s.size, 2 * s.size]),
    )
    curves = pd.DataFrame({
        "chain_id": [0, 1], "s_start_m": [40.0, 40.0], "s_end_m": [length - 40] * 2,
        "circ_start_m": [40.0, 40.0], "circ_end_m": [length - 40] * 2,
        "direction": ["left", "right"], "radius_m": [radius_m] * 2, "posted_kmh": np.nan,
    })
    curves.attrs["crs"] = crs
    return st, curves


def plane_grid(
    gx: float, gy: float, x_left: float, y_top: float, cell_m: float, shape: tuple[int, int],
    z0: float = 100.0,
) -> np.ndarray:
    """Elevations ``z0 + gx x + gy y`` at cell centres of a north-up grid."""
    rows, cols = shape
    x = x_left + (np.arange(cols) + 0.5) * cell_m
    y = y_top - (np.arange(rows) + 0.5) * cell_m
    return z0 + gx * x[None, :] + gy * y[:, None]
