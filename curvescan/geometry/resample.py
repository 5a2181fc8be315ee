"""Uniform resampling of chains and a chord-based curvature estimate.

All functions work on the flat arrays of :class:`curvescan.prepare.Chains` and never loop
over chains in Python.
"""

from __future__ import annotations

import numpy as np

from ._kernels import HAVE_NUMBA, chord_kappa
from .stations import Stations

__all__ = ["global_measure", "interpolate", "resample", "chord_curvature", "station_heading"]


def global_measure(measure: np.ndarray, offsets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Make vertex measures increase across chains: ``measure + base[chain]``.

    Returns the global measure of each vertex and each chain's base. Chains are separated
    by a gap of 1 m so that a measure belongs to exactly one chain.
    """
    lengths = measure[offsets[1:] - 1]
    base = np.concatenate([[0.0], np.cumsum(lengths + 1.0)[:-1]])
    counts = np.diff(offsets)
    return measure + np.repeat(base, counts), base


def interpolate(coords: np.ndarray, gmeasure: np.ndarray, offsets: np.ndarray,
                chain: np.ndarray, gs: np.ndarray) -> np.ndarray:
    """Points at global measures ``gs`` on their chains (linear along segments)."""
    j = np.searchsorted(gmeasure, gs, side="right") - 1
    j = np.clip(j, offsets[chain], offsets[chain + 1] - 2)
    span = gmeasure[j + 1] - gmeasure[j]
    t = np.where(span > 0, (gs - gmeasure[j]) / np.where(span > 0, span, 1.0), 0.0)
    t = np.clip(t, 0.0, 1.0)[:, None]
    return coords[j] * (1.0 - t) + coords[j + 1] * t


def resample(coords: np.ndarray, measure: np.ndarray, offsets: np.ndarray,
             spacing_m: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Stations at (nearly) ``spacing_m`` along every chain, both ends included.

    Returns ``(xy, s, chain, station_offsets)``.
    """
    gm, base = global_measure(measure, offsets)
    lengths = measure[offsets[1:] - 1]
    count = np.maximum(np.ceil(lengths / spacing_m).astype(np.int64) + 1, 2)
    step = lengths / (count - 1)
    chain = np.repeat(np.arange(len(lengths)), count)
    st_off = np.concatenate([[0], np.cumsum(count)])
    k = np.arange(st_off[-1]) - st_off[chain]
    s = k * step[chain]
    xy = interpolate(coords, gm, offsets, chain, s + base[chain])
    return xy, s, chain, st_off


def chord_curvature(xy: np.ndarray, s: np.ndarray, chain: np.ndarray, st_off: np.ndarray,
                    half_window: np.ndarray, at: np.ndarray | None = None,
                    use_compiled: bool = True) -> np.ndarray:
    """Curvature from the heading change between two chords of ``half_window`` stations.

    At station ``j`` the chords are ``j-k -> j`` and ``j -> j+k``; curvature is the angle
    between them divided by the distance between their midpoints. Chords measure heading
    over a long base, so vertex noise affects the estimate far less than
    segment-by-segment headings do. Near chain ends the window is shifted inward, never
    across the end.

    Parameters
    ----------
    half_window : ndarray of int
        Half window in stations, per chain.
    at : ndarray of int, optional
        Compute only at these station indices (default: all).
    use_compiled : bool
        Use the compiled kernel where numba is installed (the numpy form gives the same
        values).

    Returns
    -------
    ndarray
        Signed curvature (1/m, + left) at ``at`` (or at every station).
    """
    idx = np.arange(len(s)) if at is None else np.asarray(at, dtype=np.int64)
    if use_compiled and HAVE_NUMBA:
        return chord_kappa(xy, s, chain, st_off, half_window, idx)
    ch = chain[idx]
    start = st_off[ch]
    last = st_off[ch + 1] - 1
    k = np.minimum(half_window[ch], (last - start) // 2)
    c = np.clip(idx, start + k, last - k)
    a, b = c - k, c + k
    d1 = xy[c] - xy[a]
    d2 = xy[b] - xy[c]
    # signed angle between the chords: one atan2 of cross and dot
    cross = d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]
    dot = d1[:, 0] * d2[:, 0] + d1[:, 1] * d2[:, 1]
    turn = np.arctan2(cross, dot)
    span = 0.5 * (s[b] - s[a])
    return np.where((k > 0) & (span > 0), turn / np.where(span > 0, span, 1.0), 0.0)


def station_heading(xy: np.ndarray, chain: np.ndarray, st_off: np.ndarray) -> np.ndarray:
    """Direction of travel at each station (radians, ``atan2``), from its neighbours."""
    idx = np.arange(len(xy))
    lo = np.maximum(idx - 1, st_off[chain])
    hi = np.minimum(idx + 1, st_off[chain + 1] - 1)
    dh = xy[hi] - xy[lo]
    return np.arctan2(dh[:, 1], dh[:, 0])


def make_stations(xy, s, chain, st_off, kappa, heading) -> Stations:
    """Bundle station arrays."""
    return Stations(x=xy[:, 0].copy(), y=xy[:, 1].copy(), s=s, heading=heading,
                    curvature=kappa, chain=chain, offsets=st_off)
