"""Compiled inner loops (numba) for the station passes, with numpy fallbacks.

The chord curvature is computed tens of millions of times on a region; numba runs it in
one pass without temporaries and on all cores (about ten times faster than the numpy
form). Kernels are cached on disk after the first call. Where numba is not installed the
numpy implementation in :mod:`curvescan.geometry.resample` is used; results are equal.
"""

from __future__ import annotations

import numpy as np

try:  # pragma: no cover - exercised through both branches in tests
    from numba import njit, prange

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover
    HAVE_NUMBA = False

__all__ = ["HAVE_NUMBA", "chord_kappa"]

if HAVE_NUMBA:

    @njit(parallel=True, cache=True)
    def _chord_kappa(x, y, s, chain, st_off, half, at):  # pragma: no cover - compiled
        n = at.shape[0]
        out = np.empty(n)
        for t in prange(n):
            i = at[t]
            ch = chain[i]
            start = st_off[ch]
            last = st_off[ch + 1] - 1
            k = min(half[ch], (last - start) // 2)
            if k <= 0:
                out[t] = 0.0
                continue
            c = min(max(i, start + k), last - k)
            a = c - k
            b = c + k
            d1x = x[c] - x[a]
            d1y = y[c] - y[a]
            d2x = x[b] - x[c]
            d2y = y[b] - y[c]
            turn = np.arctan2(d1x * d2y - d1y * d2x, d1x * d2x + d1y * d2y)
            span = 0.5 * (s[b] - s[a])
            out[t] = turn / span if span > 0 else 0.0
        return out


def chord_kappa(xy, s, chain, st_off, half, at):
    """Compiled chord curvature at stations ``at`` (see ``resample.chord_curvature``)."""
    return _chord_kappa(np.ascontiguousarray(xy[:, 0]), np.ascontiguousarray(xy[:, 1]),
                        s, chain.astype(np.int64), st_off.astype(np.int64),
                        np.asarray(half, dtype=np.int64), np.asarray(at, dtype=np.int64))
