"""Per-chain estimate of the vertex noise (digitising error) of a road line.

Each interior vertex is compared with the chord through its two neighbours. On a smooth
road the offset from that chord is the sagitta of the local curvature,
``kappa * h1 * h2 / 2``; what remains after removing it is noise. Its robust spread (the
median absolute value, scaled to a standard deviation) is the chain's noise estimate. The
estimate sets how far curvature must be smoothed to see curves through the noise, how far a
vertex may lie from a fitted circle and still belong to it, and the prior of the radius
standard error.
"""

from __future__ import annotations

import numpy as np

from . import _kernels as kn

__all__ = ["vertex_noise", "local_vertex_noise", "NOISE_FLOOR_M"]

#: Smallest noise assumed (m): coordinates are rarely better than this.
NOISE_FLOOR_M = 0.002

# median |N(0,1)| = 0.6745; a vertex offset from the chord of two equally spaced noisy
# neighbours has variance 1.5 sigma^2
_SCALE = 1.0 / (0.6745 * np.sqrt(1.5))


def vertex_noise(coords: np.ndarray, offsets: np.ndarray, measure: np.ndarray,
                 curvature_at_vertex: np.ndarray | None = None,
                 use_compiled: bool = True) -> np.ndarray:
    """Noise standard deviation (m) of each chain's vertices.

    Parameters
    ----------
    coords : ndarray (n, 2)
        Vertex coordinates (m), chain after chain.
    offsets : ndarray (n_chains + 1,)
        Chain boundaries in ``coords``.
    measure : ndarray (n,)
        Distance of each vertex along its chain (m).
    curvature_at_vertex : ndarray (n,), optional
        Smoothed curvature at each vertex (1/m), to remove the sagitta of real curves.

    use_compiled : bool
        Use the compiled kernel where numba is installed (same values).

    Returns
    -------
    ndarray (n_chains,)
        At least :data:`NOISE_FLOOR_M`; chains with fewer than 3 vertices get the floor.
    """
    n_chains = len(offsets) - 1
    n = len(coords)
    if n < 3:
        return np.full(n_chains, NOISE_FLOOR_M)
    if use_compiled and kn.compiled():
        kappa = curvature_at_vertex
        med = kn.noise_kernel(
            np.ascontiguousarray(coords[:, 0]), np.ascontiguousarray(coords[:, 1]),
            np.asarray(measure, dtype=float), np.asarray(offsets, dtype=np.int64),
            np.zeros(1) if kappa is None else np.asarray(kappa, dtype=float),
            kappa is not None)
        return np.maximum(med * _SCALE, NOISE_FLOOR_M)
    chain = np.repeat(np.arange(n_chains), np.diff(offsets))
    interior = np.zeros(n, dtype=bool)
    interior[1:-1] = (chain[1:-1] == chain[:-2]) & (chain[1:-1] == chain[2:])
    i = np.flatnonzero(interior)
    a, b, c = coords[i - 1], coords[i], coords[i + 1]
    chord = c - a
    length = np.hypot(chord[:, 0], chord[:, 1])
    ok = length > 1e-9
    i, a, b, chord, length = i[ok], a[ok], b[ok], chord[ok], length[ok]
    # signed offset, positive to the left of the chord
    off = (chord[:, 0] * (b[:, 1] - a[:, 1]) - chord[:, 1] * (b[:, 0] - a[:, 0])) / length
    if curvature_at_vertex is not None:
        h1 = measure[i] - measure[i - 1]
        h2 = measure[i + 1] - measure[i]
        off = off + curvature_at_vertex[i] * h1 * h2 / 2.0  # b lies outside the chord
    g = chain[i]
    order = np.lexsort((np.abs(off), g))
    counts = np.bincount(g, minlength=n_chains)
    first = np.cumsum(counts) - counts
    med = np.zeros(n_chains)
    has = counts > 0
    srt = np.abs(off)[order]
    med[has] = srt[first[has] + counts[has] // 2]
    return np.maximum(med * _SCALE, NOISE_FLOOR_M)


# the residual of a vertex's chord curvature from the line through its neighbours' is a
# fourth difference of the offsets, (1, -4, 6, -4, 1) / 4 on equal spacing: variance
# 70/16 sigma^2
_LOCAL_SCALE = 1.0 / (0.6745 * np.sqrt(70.0 / 16.0))


def local_vertex_noise(coords: np.ndarray, offsets: np.ndarray,
                       measure: np.ndarray) -> np.ndarray:
    """Noise standard deviation (m) of each chain's vertices, from the vertices alone.

    Each interior vertex's offset from its neighbours' chord gives a chord curvature
    ``2 * offset / (h1 * h2)``; the curvature the two neighbouring vertices give,
    interpolated to the vertex, is taken as the road's, and the rest, times
    ``h1 * h2 / 2``, as noise (a fourth difference: exact on arcs and on transitions,
    whose curvature changes linearly). Its upper median per chain, scaled to a standard
    deviation. Unlike :func:`vertex_noise` it needs no curvature at the vertices, so it
    does not mistake a short sharp arc between sparse vertices for noise; it needs
    five vertices in a row and is noisier. Chains without such get infinity.
    """
    n_chains = len(offsets) - 1
    n = len(coords)
    out = np.full(n_chains, np.inf)
    if n < 5:
        return out
    chain = np.repeat(np.arange(n_chains), np.diff(offsets))
    x, y = coords[:, 0], coords[:, 1]
    m = np.asarray(measure, dtype=float)
    interior = np.zeros(n, dtype=bool)
    interior[1:-1] = (chain[1:-1] == chain[:-2]) & (chain[1:-1] == chain[2:])
    ux, uy = x[2:] - x[:-2], y[2:] - y[:-2]
    length = np.hypot(ux, uy)
    h1 = np.diff(m)[:-1]
    h2 = np.diff(m)[1:]
    curv = np.full(n, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        off = (ux * (y[1:-1] - y[:-2]) - uy * (x[1:-1] - x[:-2])) / length
        c = 2.0 * off / (h1 * h2)
    curv[1:-1] = np.where(interior[1:-1] & (length > 1e-9) & (h1 > 0) & (h2 > 0), c, np.nan)
    i = np.flatnonzero(np.isfinite(curv[1:-1]) & np.isfinite(curv[:-2]) & np.isfinite(curv[2:])
                       ) + 1
    i = i[(chain[i - 1] == chain[i]) & (chain[i + 1] == chain[i])]
    if len(i) == 0:
        return out
    t = (m[i] - m[i - 1]) / (m[i + 1] - m[i - 1])
    pred = curv[i - 1] + t * (curv[i + 1] - curv[i - 1])
    res = np.abs(curv[i] - pred) * (m[i] - m[i - 1]) * (m[i + 1] - m[i]) / 2.0
    g = chain[i]
    order = np.lexsort((res, g))
    counts = np.bincount(g, minlength=n_chains)
    first = np.cumsum(counts) - counts
    has = counts > 0
    out[has] = res[order][first[has] + counts[has] // 2] * _LOCAL_SCALE
    return np.maximum(out, NOISE_FLOOR_M)
