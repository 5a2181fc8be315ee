"""Uniform resampling of chains and a chord-based curvature estimate.

All functions work on the flat arrays of :class:`curvescan.prepare.Chains` and never loop
over chains in Python.
"""

from __future__ import annotations

import numpy as np

from .stations import Stations

__all__ = ["global_measure", "interpolate", "resample", "chord_curvature"]


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


def chord_curvature(xy: np.ndarray, s: np.ndarray, chain: np.ndarray,
                    st_off: np.ndarray, half_window: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Curvature from the heading change between two chords of ``half_window`` stations.

    At station ``j`` the chords are ``j-k -> j`` and ``j -> j+k``; curvature is their
    heading difference divided by the distance between their midpoints. Chords measure
    heading over a long base, so vertex noise affects the estimate far less than
    segment-by-segment headings do. Near chain ends the window is shifted inward, never
    across the end.

    Returns ``(curvature, heading)``, heading in radians (``atan2``) of the local chord.
    """
    n = len(s)
    start = st_off[chain]
    last = st_off[chain + 1] - 1
    size = last - start
    k = np.minimum(half_window[chain], size // 2)
    idx = np.arange(n)
    c = np.clip(idx, start + k, last - k)
    a, b = c - k, c + k
    d1 = xy[c] - xy[a]
    d2 = xy[b] - xy[c]
    h1 = np.arctan2(d1[:, 1], d1[:, 0])
    h2 = np.arctan2(d2[:, 1], d2[:, 0])
    turn = (h2 - h1 + np.pi) % (2 * np.pi) - np.pi
    span = 0.5 * (s[b] - s[a])
    kappa = np.where((k > 0) & (span > 0), turn / np.where(span > 0, span, 1.0), 0.0)
    lo = np.maximum(idx - 1, start)
    hi = np.minimum(idx + 1, last)
    dh = xy[hi] - xy[lo]
    heading = np.arctan2(dh[:, 1], dh[:, 0])
    return kappa, heading


def make_stations(xy, s, chain, st_off, kappa, heading) -> Stations:
    """Bundle station arrays."""
    return Stations(x=xy[:, 0].copy(), y=xy[:, 1].copy(), s=s, heading=heading,
                    curvature=kappa, chain=chain, offsets=st_off)
