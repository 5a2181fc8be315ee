"""Uniform resampling of chains and a chord-based curvature estimate.

All functions work on the flat arrays of :class:`curvescan.prepare.Chains` and never loop
over chains in Python.
"""

from __future__ import annotations

import numpy as np

from . import _kernels as kn
from ._ragged import expand
from .stations import Stations

__all__ = ["global_measure", "interpolate", "resample", "resample_stations", "chord_curvature",
           "station_heading", "shape_vertices",
           "shape_vertex_classes"]

#: A chain is *densified* when at least this share of the segments between its shape
#: vertices span two or more collinear vertices that were left out (see
#: :func:`shape_vertex_classes`).
DENSIFIED_SHARE = 0.5

#: The sequential collinear rule checks a run of left-out vertices against its chord vertex
#: by vertex; past this many the next vertex is kept (bounds the work on long runs).
MAX_COLLINEAR_RUN = 256


def shape_vertices(coords: np.ndarray, offsets: np.ndarray, tol: float,
                   use_compiled: bool = True) -> np.ndarray:
    """Which vertices carry shape (see :func:`shape_vertex_classes`)."""
    return shape_vertex_classes(coords, offsets, tol, use_compiled)[0]


def shape_vertex_classes(coords: np.ndarray, offsets: np.ndarray, tol: float,
                         use_compiled: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Which vertices carry shape, and which chains are densified.

    A vertex within ``tol`` of the segment between its two neighbours (between its ends;
    a vertex that doubles back is kept; chain ends are kept) may carry no shape:

    - On most chains only such a vertex *alone* (neither neighbour lies so on its own) is
      left out. That is what a split or a side road joining leaves on a digitised line: a
      point on the chord between two shape vertices, off a curve by that chord's sagitta
      (metres on sparse vertices). Left in, it pulls circle fits toward the chord and,
      offset zero from its neighbours' chord, lowers the noise estimate. Runs of collinear
      vertices (a tangent digitised point by point) are kept: their zero offsets are true.
    - A chain cut into short pieces along its own segments (a densifying step) has such a
      run on nearly every segment; its zero offsets are no evidence of exactness. The
      sequential rule finds them: walking the chain, a vertex goes when it and every vertex
      left out since the last kept one lie within ``tol`` of the segment from that kept
      vertex to the next vertex, between its ends. Where at least
      :data:`DENSIFIED_SHARE` of the segments between the vertices it keeps span two or
      more vertices it left out, the chain is *densified* and every vertex the sequential
      rule leaves out goes. On a line digitised with exact tangents only the tangents
      span such runs, the arcs' vertices do not; a junction node or a split leaves a
      single point, which the rule above takes out anyway (so does cutting segments in
      two: their points are single too).

    The line moves by at most ``tol``.

    Returns
    -------
    keep : ndarray (n,) of bool
    densified : ndarray (n_chains,) of bool
    """
    coords = np.asarray(coords, dtype=float)
    offsets = np.asarray(offsets, dtype=np.int64)
    n = len(coords)
    n_chains = len(offsets) - 1
    keep = np.ones(n, dtype=bool)
    densified = np.zeros(n_chains, dtype=bool)
    if n < 3:
        return keep, densified
    x, y = np.ascontiguousarray(coords[:, 0]), np.ascontiguousarray(coords[:, 1])
    on_chord = np.zeros(n, dtype=bool)
    if use_compiled and kn.compiled():
        kn.on_chord_kernel(x, y, float(tol), on_chord)
    else:
        on_chord[1:-1] = _on_segment(x[1:-1] - x[:-2], y[1:-1] - y[:-2], x[2:] - x[:-2],
                                     y[2:] - y[:-2], tol)
    counts = np.diff(offsets)
    on_chord[offsets[:-1][counts > 0]] = False
    on_chord[offsets[1:][counts > 0] - 1] = False
    if not on_chord.any():
        return keep, densified
    alone = on_chord & ~np.r_[False, on_chord[:-1]] & ~np.r_[on_chord[1:], False]
    keep[alone] = False
    seq = _sequential_keep(x, y, offsets, on_chord, float(tol), use_compiled)
    # per chain: segments between the vertices the sequential rule keeps, and how many of
    # them span vertices it left out
    chain_of = np.repeat(np.arange(n_chains), counts)
    kept = np.flatnonzero(seq)
    same = chain_of[kept[1:]] == chain_of[kept[:-1]]
    spans = same & (np.diff(kept) > 2)
    segs = np.bincount(chain_of[kept[1:]][same], minlength=n_chains)
    gaps = np.bincount(chain_of[kept[1:]][spans], minlength=n_chains)
    densified = (gaps > 0) & (gaps >= DENSIFIED_SHARE * segs)
    dense_v = densified[chain_of]
    keep[dense_v] = seq[dense_v]
    return keep, densified


def _on_segment(px: np.ndarray, py: np.ndarray, ux: np.ndarray, uy: np.ndarray,
                tol: float) -> np.ndarray:
    """Whether points ``p`` (relative to a segment's start) lie within ``tol`` of the
    segment ``u`` and between its ends (the operations of the compiled kernels)."""
    length = np.hypot(ux, uy)
    with np.errstate(invalid="ignore", divide="ignore"):
        along = (px * ux + py * uy) / length
        off = np.abs(px * uy - py * ux) / length
    return (length > 0.0) & (off <= tol) & (along >= 0.0) & (along <= length)


def _sequential_keep(x: np.ndarray, y: np.ndarray, offsets: np.ndarray, cand: np.ndarray,
                     tol: float, use_compiled: bool = True) -> np.ndarray:
    """The sequential collinear rule of :func:`shape_vertex_classes` over the candidates
    ``cand`` (vertices on the segment between their neighbours, never chain ends).

    The numpy form walks all runs of candidates at once, one vertex per run and step.
    """
    if use_compiled and kn.compiled():
        return kn.collinear_kernel(np.ascontiguousarray(x), np.ascontiguousarray(y),
                                   offsets, cand, tol, MAX_COLLINEAR_RUN)
    n = len(x)
    keep = np.ones(n, dtype=bool)
    # runs of candidates; chain ends are no candidates, so a run stays in its chain
    edge = np.diff(np.r_[0, cand.astype(np.int8), 0])
    start = np.flatnonzero(edge == 1)
    run_len = np.flatnonzero(edge == -1) - start
    k = start - 1  # the last kept vertex of each run
    for t in range(int(run_len.max(initial=0))):
        act = np.flatnonzero(run_len > t)
        i = start[act] + t
        far = i - k[act] > MAX_COLLINEAR_RUN
        ka = k[act]
        ax, ay = x[ka], y[ka]
        ux, uy = x[i + 1] - ax, y[i + 1] - ay
        # every vertex since the last kept one, this one included
        idx, grp = expand(ka + 1, np.where(far, 0, i - ka))
        bad = ~_on_segment(x[idx] - ax[grp], y[idx] - ay[grp], ux[grp], uy[grp], tol)
        fails = np.bincount(grp[bad], minlength=len(act))
        ok = ~far & (fails == 0)  # a zero-length segment fails every point
        keep[i[ok]] = False
        k[act] = np.where(ok, ka, i)
    return keep


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
    st = resample_stations(coords, measure, offsets, spacing_m)
    return np.column_stack([st["x"], st["y"]]), st["s"], st["chain"], st["st_off"]


def resample_stations(coords: np.ndarray, measure: np.ndarray, offsets: np.ndarray,
                      spacing_m: float, use_compiled: bool = True) -> dict[str, np.ndarray]:
    """:func:`resample` as flat arrays, with what the geometry stage reads next.

    Returns a dict: ``x``, ``y`` (station coordinates), ``s`` (measure along the chain),
    ``gs`` (global measure, ``s + base[chain]``), ``chain``, ``st_off`` (station offsets),
    ``heading`` (see :func:`station_heading`), ``gm`` and ``base`` (see
    :func:`global_measure`).
    """
    gm, base = global_measure(measure, offsets)
    lengths = measure[offsets[1:] - 1]
    count = np.maximum(np.ceil(lengths / spacing_m).astype(np.int64) + 1, 2)
    step = lengths / (count - 1)
    chain = np.repeat(np.arange(len(lengths)), count)
    st_off = np.concatenate([[0], np.cumsum(count)])
    if use_compiled and kn.compiled():
        x, y, s, gs, dx, dy = kn.resample_kernel(
            np.ascontiguousarray(coords[:, 0]), np.ascontiguousarray(coords[:, 1]), gm,
            offsets.astype(np.int64, copy=False), base, st_off, step)
        heading = np.arctan2(dy, dx)
    else:
        k = np.arange(st_off[-1]) - st_off[chain]
        s = k * step[chain]
        gs = s + base[chain]
        xy = interpolate(coords, gm, offsets, chain, gs)
        x, y = xy[:, 0].copy(), xy[:, 1].copy()
        heading = station_heading(xy, chain, st_off)
    return {"x": x, "y": y, "s": s, "gs": gs, "chain": chain, "st_off": st_off,
            "heading": heading, "gm": gm, "base": base}


def chord_curvature(xy: np.ndarray, s: np.ndarray, chain: np.ndarray, st_off: np.ndarray,
                    half_window: np.ndarray, at: np.ndarray | None = None,
                    use_compiled: bool = True, out: np.ndarray | None = None) -> np.ndarray:
    """Curvature from the heading change between two chords of ``half_window`` stations.

    At station ``j`` the chords are ``j-k -> j`` and ``j -> j+k``; curvature is the angle
    between them divided by the distance between their midpoints. Chords measure heading
    over a long base, so vertex noise affects the estimate far less than
    segment-by-segment headings do. Near chain ends the window is shifted inward, never
    across the end.

    Parameters
    ----------
    xy : ndarray (n, 2) or tuple of two ndarrays
        Station coordinates (or ``(x, y)``).
    half_window : ndarray of int
        Half window in stations, per chain.
    at : ndarray of int, optional
        Compute only at these station indices (default: all).
    use_compiled : bool
        Use the compiled kernel where numba is installed (the numpy form gives the same
        values).
    out : ndarray, optional
        One value per station: the curvature is written to ``out[at]`` and ``out`` returned.

    Returns
    -------
    ndarray
        Signed curvature (1/m, + left) at ``at`` (or at every station).
    """
    x, y = (xy[:, 0], xy[:, 1]) if isinstance(xy, np.ndarray) else xy
    if use_compiled and kn.compiled():
        return kn.chord_kappa(x, y, s, chain, st_off, half_window, at, out)
    idx = np.arange(len(s)) if at is None else np.asarray(at, dtype=np.int64)
    if out is not None:
        out[idx] = chord_curvature(xy, s, chain, st_off, half_window, idx, use_compiled=False)
        return out
    ch = chain[idx]
    start = st_off[ch]
    last = st_off[ch + 1] - 1
    k = np.minimum(half_window[ch], (last - start) // 2)
    c = np.clip(idx, start + k, last - k)
    a, b = c - k, c + k
    d1x, d1y = x[c] - x[a], y[c] - y[a]
    d2x, d2y = x[b] - x[c], y[b] - y[c]
    # signed angle between the chords: one atan2 of cross and dot
    cross = d1x * d2y - d1y * d2x
    dot = d1x * d2x + d1y * d2y
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
    """Bundle station arrays (``xy`` an (n, 2) array or a tuple ``(x, y)`` kept as is)."""
    x, y = (xy[:, 0].copy(), xy[:, 1].copy()) if isinstance(xy, np.ndarray) else xy
    return Stations(x=x, y=y, s=s, heading=heading, curvature=kappa, chain=chain,
                    offsets=st_off)
