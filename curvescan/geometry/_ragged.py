"""Small helpers for ragged (grouped) index ranges, used across the geometry stage."""

from __future__ import annotations

import numpy as np

from . import _kernels as kn

__all__ = ["expand", "group_quantile", "range_quantile", "group_argmax", "find", "stops_around",
           "scatter_min", "scatter_max", "TIE_M"]

#: Measures closer than this (m) count as equal: positions recomputed from different
#: global offsets (another chain order, another partition) differ in the last bits.
TIE_M = 1e-6


def expand(starts: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices ``starts[g] + 0 .. counts[g]-1`` for every group, and the group of each."""
    counts = np.maximum(np.asarray(counts, dtype=np.int64), 0)
    if kn.compiled():
        return kn.expand_kernel(np.asarray(starts, dtype=np.int64), counts)
    grp = np.repeat(np.arange(len(counts)), counts)
    first = np.cumsum(counts) - counts
    idx = np.asarray(starts, dtype=np.int64)[grp] + (np.arange(counts.sum()) - first[grp])
    return idx, grp


def group_quantile(values: np.ndarray, grp: np.ndarray, n: int, q: float) -> np.ndarray:
    """The ``q`` quantile (lower value) of ``values`` within each group (NaN if empty).

    One float sort of ``group + scaled value`` instead of a two-key lexsort.
    """
    values = np.asarray(values, dtype=float)
    out = np.full(n, np.nan)
    if values.size == 0:
        return out
    lo, hi = np.nanmin(values), np.nanmax(values)
    span = hi - lo if hi > lo else 1.0
    key = grp + 0.999 * (np.nan_to_num(values, nan=hi) - lo) / span
    if kn.compiled():
        return kn.group_quantile_kernel(values, key, np.asarray(grp, dtype=np.int64), n, q)
    order = np.argsort(key, kind="stable")
    counts = np.bincount(grp, minlength=n)
    first = np.cumsum(counts) - counts
    has = counts > 0
    pick = first[has] + np.floor(q * (counts[has] - 1)).astype(np.int64)
    out[has] = values[order][pick]
    return out


def range_quantile(rows: np.ndarray, row: np.ndarray, first: np.ndarray, last: np.ndarray,
                   q: float) -> np.ndarray:
    """:func:`group_quantile` of ``|rows[row[g]]|`` over the index range ``first[g] ..
    last[g]`` (inclusive) of each group ``g``."""
    if kn.compiled():
        return kn.range_quantile_kernel(rows, np.asarray(row, dtype=np.int64),
                                        np.asarray(first, dtype=np.int64),
                                        np.asarray(last, dtype=np.int64), q)
    idx, grp = expand(first, np.asarray(last) - first + 1)
    return group_quantile(np.abs(rows[np.asarray(row)[grp], idx]), grp, len(first), q)


def group_argmax(values: np.ndarray, grp: np.ndarray, n: int) -> np.ndarray:
    """Position (into ``values``) of the largest value of each group (-1 if empty)."""
    if kn.compiled():
        return kn.group_argmax_kernel(np.asarray(values, dtype=float),
                                      np.asarray(grp, dtype=np.int64), n)
    order = np.lexsort((values, grp))
    counts = np.bincount(grp, minlength=n)
    last = np.cumsum(counts) - 1
    out = np.full(n, -1, dtype=np.int64)
    has = counts > 0
    out[has] = order[last[has]]
    return out


def find(sorted_values: np.ndarray, value, side: str = "left") -> np.ndarray:
    """``np.searchsorted`` treating values within :data:`TIE_M` as equal.

    ``side="left"`` counts a near-equal element as at or after ``value`` (inclusive lower
    bound); ``side="right"`` counts it as at or before (inclusive upper bound).
    """
    shift = -TIE_M if side == "left" else TIE_M
    return np.searchsorted(sorted_values, np.asarray(value) + shift, side=side)


def stops_around(idx: np.ndarray, grp: np.ndarray, centre: np.ndarray, stop: np.ndarray,
                 n: int) -> tuple[np.ndarray, np.ndarray]:
    """Nearest flagged index on each side of each group's ``centre``.

    Returns ``(left, right)``: the largest ``idx`` below the centre where ``stop`` holds
    (-1 if none) and the smallest above it (``int64`` max if none).
    """
    if kn.compiled() and np.issubdtype(np.asarray(centre).dtype, np.integer):
        return kn.stops_around_kernel(np.asarray(idx, dtype=np.int64),
                                      np.asarray(grp, dtype=np.int64),
                                      np.asarray(centre, dtype=np.int64), stop, n)
    big = np.iinfo(np.int64).max
    right = np.full(n, big)
    sel = stop & (idx > centre[grp])
    scatter_min(right, grp[sel], idx[sel])
    left = np.full(n, -1)
    sel = stop & (idx < centre[grp])
    scatter_max(left, grp[sel], idx[sel])
    return left, right


def scatter_min(out: np.ndarray, grp: np.ndarray, values: np.ndarray) -> None:
    """``np.minimum.at(out, grp, values)`` (in place)."""
    if kn.compiled() and len(grp):
        kn.scatter_min_kernel(out, np.asarray(grp, dtype=np.int64), values.astype(out.dtype))
    else:
        np.minimum.at(out, grp, values)


def scatter_max(out: np.ndarray, grp: np.ndarray, values: np.ndarray) -> None:
    """``np.maximum.at(out, grp, values)`` (in place)."""
    if kn.compiled() and len(grp):
        kn.scatter_max_kernel(out, np.asarray(grp, dtype=np.int64), values.astype(out.dtype))
    else:
        np.maximum.at(out, grp, values)
