"""Carry input attributes onto curves and pieces: source ids and per-row values.

A curve or piece covers a stretch ``[s_start_m, s_end_m]`` of a chain; the input rows it
lies on are the rows of the chain's vertices in that stretch plus the row of the segment
at its middle (a short curve may lie between two vertices).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .geometry._ragged import expand
from .geometry.resample import global_measure

#: pandas' default text dtype (Arrow-backed, NaN for missing): what a column of Python
#: strings is stored as.
_STR = pd.StringDtype("pyarrow", na_value=np.nan)

__all__ = ["rows_on", "src_fid_text", "reduce_rows", "reversed_at", "orient_to_features",
           "sorted_unique"]


def rows_on(chains: Any, chain: np.ndarray, s0: np.ndarray, s1: np.ndarray,
            measure: tuple[np.ndarray, np.ndarray] | None = None):
    """Input rows each stretch lies on, as flat ``(group, row)`` pairs (unique, sorted).

    ``measure`` is ``global_measure(chains.measure, chains.offsets)`` when the caller has
    it already.
    """
    gm, base = measure or global_measure(chains.measure, chains.offsets)
    g0 = s0 + base[chain]
    g1 = s1 + base[chain]
    i0 = np.searchsorted(gm, g0, side="left")
    i1 = np.searchsorted(gm, g1, side="right")
    # the segment containing the middle of the stretch
    gmid = 0.5 * (g0 + g1)
    j = np.searchsorted(gm, gmid, side="right") - 1
    j = np.clip(j, chains.offsets[chain], chains.offsets[chain + 1] - 2)
    # a segment's row is the row of its second vertex (its first may be a joint)
    mid_row = chains.vertex_row[j + 1]
    # the rows of the vertices i0 .. i1-1: the row of i0 and of every vertex inside the
    # range where the row changes (runs of one row are long: no vertex-wise expansion)
    vrow = chains.vertex_row
    change = np.flatnonzero(vrow[1:] != vrow[:-1]) + 1
    c0 = np.searchsorted(change, i0, side="right")
    n_in = np.maximum(np.searchsorted(change, i1, side="left") - c0, 0)
    has = i1 > i0
    idx, grp = expand(c0, np.where(has, n_in, 0))
    # a vertex shared by two parts is stored once, with the row of the earlier part;
    # the row after it starts at the next vertex, which the range also covers
    groups = np.concatenate([grp, np.flatnonzero(has), np.arange(len(chain))]).astype(np.int64)
    rows = np.concatenate([vrow[change[idx]], vrow[i0[has]], mid_row]).astype(np.int64)
    # unique (group, row) pairs through one int64 key
    width = np.int64(rows.max() + 1) if rows.size else np.int64(1)
    key = sorted_unique(groups * width + rows)
    return key // width, key % width


def sorted_unique(values: np.ndarray) -> np.ndarray:
    """``np.unique`` of a 1-D array by a sort and a comparison.

    numpy's unique hashes integer arrays first, many times slower than a sort on the
    nearly ordered keys of this module.
    """
    values = np.sort(np.asarray(values))
    return values[np.r_[True, values[1:] != values[:-1]]] if values.size else values


def _lex_order(minor: np.ndarray, major: np.ndarray) -> np.ndarray | None:
    """``np.lexsort((minor, major))``, or None where that is the identity (the pairs are in
    order already, as :func:`rows_on` gives them): a linear check instead of a sort."""
    minor, major = np.asarray(minor), np.asarray(major)
    if len(major) < 2:
        return None
    step = major[1:] != major[:-1]
    if np.all(major[1:] >= major[:-1]) and np.all(step | (minor[1:] >= minor[:-1])):
        return None  # lexsort is stable: sorted pairs keep their order
    return np.lexsort((minor, major))


def src_fid_text(groups: np.ndarray, rows: np.ndarray, src_fid: np.ndarray, n: int) -> Any:
    """Comma-separated source ids per group, in ascending order.

    Returned as pandas' Arrow-backed ``str`` array (what a column of these texts becomes
    in a DataFrame), made from the Arrow texts without Python strings in between.
    """
    fids = np.asarray(src_fid)[rows]
    g = np.asarray(groups)
    order = _lex_order(fids, g)
    if order is not None:
        g, fids = g[order], fids[order]
    counts = np.bincount(g, minlength=n)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
    # one vectorised join per group in Arrow (no Python per group)
    text = pc.cast(pa.array(fids), pa.string())
    joined = pc.binary_join(pa.ListArray.from_arrays(pa.array(offsets), text), ",")
    return pd.array(joined, dtype=_STR)


def reduce_rows(groups: np.ndarray, rows: np.ndarray, values: np.ndarray, n: int,
                how: str = "max") -> np.ndarray:
    """Reduce a numeric per-row value over each group's rows (NaN ignored)."""
    v = values[rows].astype(float)
    fill = -np.inf if how == "max" else np.inf
    out = np.full(n, fill)
    ufunc = np.maximum if how == "max" else np.minimum
    ufunc.at(out, groups, np.where(np.isnan(v), fill, v))
    out[~np.isfinite(out)] = np.nan
    return out


def first_value(groups: np.ndarray, rows: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """The value of the lowest input row of each group (object array, None when absent)."""
    out = np.full(n, None, dtype=object)
    order = _lex_order(rows, groups)
    g, r = (groups, rows) if order is None else (groups[order], rows[order])
    first = np.r_[True, g[1:] != g[:-1]] if g.size else np.zeros(0, dtype=bool)
    out[g[first]] = values[r[first]]
    return out


def reversed_at(chains: Any, chain: np.ndarray, s: np.ndarray,
                measure: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Whether the input feature under measure ``s`` of ``chain`` runs against the chain.

    A segment belongs to the part of its second vertex (its first may be a joint).
    ``measure`` is ``global_measure(chains.measure, chains.offsets)`` when the caller has
    it already.
    """
    if chains.vertex_reversed is None or len(chain) == 0:
        return np.zeros(len(chain), dtype=bool)
    gm, base = measure or global_measure(chains.measure, chains.offsets)
    j = np.searchsorted(gm, s + base[chain], side="right") - 1
    j = np.clip(j, chains.offsets[chain], chains.offsets[chain + 1] - 2)
    return chains.vertex_reversed[j + 1].astype(bool)


#: Text columns naming a direction of travel relative to the digitised direction.
_DIRECTION_WORDS = {"left": "right", "right": "left", "digitised": "reverse",
                    "reverse": "digitised"}


def orient_to_features(layer: Any, against: np.ndarray) -> Any:
    """Express directions in each curve's own feature's digitised direction.

    The stages work in the chain's direction; where the feature a curve lies on was
    digitised the other way (``against``), ``direction`` swaps left and right, ``grade``
    changes sign and fields naming a travel direction swap ``digitised`` and ``reverse``.
    """
    if not len(layer) or not np.any(against):
        return layer
    layer = layer.copy(deep=False)  # copy-on-write: changed columns stay here
    flip = np.asarray(against, dtype=bool)
    for col in ("direction", "grade_max_down_direction", "approach_direction"):
        if col in layer.columns and layer[col].dtype == _STR and layer[col].notna().any():
            # in Arrow: the words swapped where flipped (nulls stay null), no Python strings
            text = pa.chunked_array(pa.array(layer[col].array))
            mask = pa.array(flip)
            out = text
            for word, other in _DIRECTION_WORDS.items():
                out = pc.if_else(pc.and_(mask, pc.equal(text, word)), other, out)
            layer[col] = pd.Series(pd.array(out.cast(text.type), dtype=_STR),
                                   index=layer.index)
        elif col in layer.columns:
            values = layer[col].to_numpy(dtype=object)
            out = values.copy()
            for word, other in _DIRECTION_WORDS.items():
                out[flip & (values == word)] = other
            layer[col] = out
    if "grade" in layer.columns:
        layer["grade"] = np.where(flip, -layer["grade"].to_numpy(dtype=float),
                                  layer["grade"].to_numpy(dtype=float))
    return layer
