"""Pieces of chains: tangent, transition and circular parts, and their line geometry."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import shapely

from . import _kernels as kn
from ._ragged import find
from .resample import global_measure, interpolate

__all__ = ["resolve_overlaps", "piece_table", "substrings", "linestring_wkb"]


def resolve_overlaps(curves: pd.DataFrame) -> pd.DataFrame:
    """Order curves along chains and make neighbouring curves meet, never overlap.

    Where the transition out of one curve runs into the transition into the next, both
    are cut at the middle of the gap between their circular parts.
    """
    curves = curves.sort_values(["chain_id", "circ_start_m"]).reset_index(drop=True)
    if len(curves) < 2:
        return curves
    same = curves["chain_id"].to_numpy()[1:] == curves["chain_id"].to_numpy()[:-1]
    end_prev = curves["s_end_m"].to_numpy()[:-1]
    start_next = curves["s_start_m"].to_numpy()[1:]
    clash = same & (end_prev > start_next)
    mid = 0.5 * (curves["circ_end_m"].to_numpy()[:-1] + curves["circ_start_m"].to_numpy()[1:])
    if clash.any():
        ends = curves["s_end_m"].to_numpy().copy()
        starts = curves["s_start_m"].to_numpy().copy()
        circ_end = curves["circ_end_m"].to_numpy().copy()
        circ_start = curves["circ_start_m"].to_numpy().copy()
        i = np.flatnonzero(clash)
        ends[i] = np.maximum(mid[i], circ_end[i])
        starts[i + 1] = np.minimum(np.maximum(mid[i], ends[i]), np.maximum(circ_start[i + 1], ends[i]))
        circ_start[i + 1] = np.maximum(circ_start[i + 1], starts[i + 1])
        curves["s_end_m"], curves["s_start_m"] = ends, starts
        curves["circ_start_m"] = circ_start
        curves["length_m"] = curves["s_end_m"] - curves["s_start_m"]
        curves["circular_length_m"] = curves["circ_end_m"] - curves["circ_start_m"]
        curves["transition_in_m"] = curves["circ_start_m"] - curves["s_start_m"]
        curves["transition_out_m"] = curves["s_end_m"] - curves["circ_end_m"]
    return curves


#: Pieces no longer than this (m) are left out of the piece table.
MIN_PIECE_M = 1e-3


def piece_table(chains: Any, curves: pd.DataFrame) -> pd.DataFrame:
    """Every chain cut into ``tangent``, ``transition`` and ``curve`` pieces.

    Returns a frame with ``chain_id``, ``kind``, ``s_start_m``, ``s_end_m``, ``curve_id``
    (0 for tangents) and ``radius_m`` (NaN for tangents and transitions), ordered along
    each chain. Pieces shorter than 1 mm are left out.
    """
    n_chains = chains.n_chains
    lengths = chains.lengths
    c = curves
    parts = [
        pd.DataFrame({"chain_id": c["chain_id"], "kind": "transition",
                      "s_start_m": c["s_start_m"], "s_end_m": c["circ_start_m"],
                      "curve_id": c["curve_id"], "radius_m": np.nan}),
        pd.DataFrame({"chain_id": c["chain_id"], "kind": "curve",
                      "s_start_m": c["circ_start_m"], "s_end_m": c["circ_end_m"],
                      "curve_id": c["curve_id"], "radius_m": c["radius_m"]}),
        pd.DataFrame({"chain_id": c["chain_id"], "kind": "transition",
                      "s_start_m": c["circ_end_m"], "s_end_m": c["s_end_m"],
                      "curve_id": c["curve_id"], "radius_m": np.nan}),
    ]
    # tangents: the gaps between consecutive curves of a chain
    cs = c.sort_values(["chain_id", "s_start_m"])
    chain_ids = cs["chain_id"].to_numpy()
    gap_chain = np.concatenate([np.arange(n_chains), chain_ids])
    gap_start = np.concatenate([np.zeros(n_chains), cs["s_end_m"].to_numpy()])
    order = np.lexsort((gap_start, gap_chain))
    gap_chain, gap_start = gap_chain[order], gap_start[order]
    nxt_same = np.r_[gap_chain[1:] == gap_chain[:-1], False]
    gap_end = np.where(nxt_same, np.nan, lengths[gap_chain])
    k = np.flatnonzero(nxt_same)
    # a gap that another gap follows on its chain ends where the next curve begins
    gap_end[k] = _curve_starts_after(cs, gap_chain[k], gap_start[k], lengths)
    parts.append(pd.DataFrame({"chain_id": gap_chain, "kind": "tangent", "s_start_m": gap_start,
                               "s_end_m": gap_end, "curve_id": 0, "radius_m": np.nan}))
    table = pd.concat(parts, ignore_index=True)
    table = table[(table["s_end_m"] - table["s_start_m"]) > MIN_PIECE_M]
    table = table.sort_values(["chain_id", "s_start_m"], kind="stable").reset_index(drop=True)
    table["length_m"] = table["s_end_m"] - table["s_start_m"]
    return table


def _curve_starts_after(cs: pd.DataFrame, chain: np.ndarray, s: np.ndarray,
                        lengths: np.ndarray) -> np.ndarray:
    """Start of the first curve on ``chain`` starting at or after ``s`` (``cs`` sorted by
    chain and start)."""
    base = np.concatenate([[0.0], np.cumsum(lengths + 1.0)[:-1]])  # chains 1 m apart
    keys = cs["s_start_m"].to_numpy() + base[cs["chain_id"].to_numpy()]
    j = find(keys, s + base[chain], side="left")
    return cs["s_start_m"].to_numpy()[np.minimum(j, len(keys) - 1)]


#: Points built at once by :func:`substrings` (bounds its temporary arrays).
SUBSTRING_BATCH_POINTS = 1 << 20


def substrings(chains: Any, chain: np.ndarray, s0: np.ndarray, s1: np.ndarray,
               measure: tuple[np.ndarray, np.ndarray] | None = None, *,
               project: Any = None, wkb: bool = False) -> Any:
    """LineStrings along ``chain`` from measure ``s0`` to ``s1`` (vectorised).

    ``measure`` is ``global_measure(chains.measure, chains.offsets)`` when the caller has
    it already; ``project(x, y) -> (x, y)``, when given, transforms the points (to an
    output CRS) before the lines are built. Lines are built in batches of about
    :data:`SUBSTRING_BATCH_POINTS` points.

    Returns an object array of shapely LineStrings, or with ``wkb`` their WKB (ISO,
    little-endian, 2D; the bytes ``shapely.to_wkb`` gives) as an Arrow binary array,
    made without GEOS.
    """
    if len(chain) == 0:
        return pa.chunked_array([], type=pa.binary()) if wkb else np.array([], dtype=object)
    gm, base = measure or global_measure(chains.measure, chains.offsets)
    g0 = s0 + base[chain]
    g1 = np.maximum(s1, s0) + base[chain]
    # interior vertices strictly inside (near-equal ones are the interpolated ends)
    i0 = find(gm, g0, side="right")
    inner = np.maximum(find(gm, g1, side="left") - i0, 0)
    ends = np.cumsum(inner + 2)
    cuts = np.searchsorted(ends, np.arange(SUBSTRING_BATCH_POINTS, ends[-1],
                                           SUBSTRING_BATCH_POINTS), side="right")
    out = [] if wkb else np.empty(len(chain), dtype=object)
    for a, b in zip(np.r_[0, cuts], np.r_[cuts, len(chain)]):
        if b > a:
            lines = _lines(chains, gm, chain[a:b], g0[a:b], g1[a:b], i0[a:b], inner[a:b],
                           project, wkb)
            if wkb:
                out.append(lines)
            else:
                out[a:b] = lines
    return pa.chunked_array(out, type=pa.binary()) if wkb else out


def _lines(chains: Any, gm: np.ndarray, chain: np.ndarray, g0: np.ndarray, g1: np.ndarray,
           i0: np.ndarray, inner: np.ndarray, project: Any, wkb: bool) -> Any:
    """LineStrings of interpolated ends ``g0``, ``g1`` and ``inner`` vertices from ``i0``."""
    count = inner + 2
    offsets = np.zeros(len(chain) + 1, dtype=np.int64)
    np.cumsum(count, out=offsets[1:])
    if kn.compiled():  # the same points in one pass, without the index temporaries
        xy = kn.substring_points_kernel(
            np.ascontiguousarray(chains.coords, dtype=float), gm,
            np.asarray(chains.offsets, dtype=np.int64), np.asarray(chain, dtype=np.int64),
            np.asarray(g0, dtype=float), np.asarray(g1, dtype=float),
            np.asarray(i0, dtype=np.int64), np.asarray(inner, dtype=np.int64), offsets)
        return _finish_lines(xy, offsets, project, wkb)
    first = offsets[:-1]  # output row of each piece's first point
    xy = np.empty((int(offsets[-1]), 2))
    xy[first] = interpolate(chains.coords, gm, chains.offsets, chain, g0)
    xy[offsets[1:] - 1] = interpolate(chains.coords, gm, chains.offsets, chain, g1)
    # interior vertex k of piece p: coords[i0[p] + k] -> row first[p] + 1 + k
    shift = np.repeat(first + 1 - i0, inner)
    src = np.arange(len(shift), dtype=np.int64)
    src -= np.repeat(np.cumsum(inner) - inner - i0, inner)
    xy[src + shift] = chains.coords[src]
    del shift, src
    return _finish_lines(xy, offsets, project, wkb)


def _finish_lines(xy: np.ndarray, offsets: np.ndarray, project: Any, wkb: bool) -> Any:
    """The lines of points ``xy`` cut at ``offsets``, projected first when asked."""
    if project is not None:
        x, y = project(xy[:, 0], xy[:, 1])
        xy = np.column_stack([x, y])
    if wkb:
        return linestring_wkb(xy, offsets)
    return shapely.from_ragged_array(shapely.GeometryType.LINESTRING, xy, (offsets,))


def linestring_wkb(xy: np.ndarray, offsets: np.ndarray) -> pa.Array:
    """WKB of the LineStrings ``xy[offsets[i]:offsets[i + 1]]`` as an Arrow binary array.

    Each is the 9-byte header (little-endian byte order mark, type 2, point count) and the
    points as little-endian doubles: a compiled pass writes them into one Arrow buffer, or
    (without numba) Arrow joins a header array and a point array, both views of numpy
    buffers, element by element. Under 2 GB (else large_binary).
    """
    offsets = np.asarray(offsets, dtype=np.int64)
    count = np.diff(offsets)
    points = np.ascontiguousarray(xy, dtype="<f8")
    small = 16 * int(offsets[-1]) + 9 * len(count) < 2**31 - 1
    kind, width = (pa.binary(), np.int32) if small else (pa.large_binary(), np.int64)
    if kn.compiled():  # the same bytes, written in one pass into an Arrow buffer
        out = pa.allocate_buffer(9 * len(count) + 16 * int(offsets[-1]))
        kn.linestring_wkb_kernel(points.reshape(-1).view(np.uint8), offsets,
                                 np.frombuffer(out, dtype=np.uint8))
        starts = 9 * np.arange(len(offsets), dtype=np.int64) + 16 * offsets
        return pa.Array.from_buffers(kind, len(count), [
            None, pa.py_buffer(starts.astype(width)), out])
    header = np.empty((len(count), 9), dtype=np.uint8)
    header[:, :5] = (1, 2, 0, 0, 0)
    header[:, 5:] = count.astype("<u4").view(np.uint8).reshape(-1, 4)
    heads = pa.Array.from_buffers(kind, len(count), [
        None, pa.py_buffer((9 * np.arange(len(offsets))).astype(width)), pa.py_buffer(header)])
    body = pa.Array.from_buffers(kind, len(count), [
        None, pa.py_buffer((16 * offsets).astype(width)), pa.py_buffer(points)])
    return pc.binary_join_element_wise(heads, body, b"")
