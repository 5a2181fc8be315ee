"""Segmentation of the curvature profile into curve runs.

A curve run is a stretch of stations whose curvature (read at the noise-robust detection
scale) keeps one sign and exceeds a small threshold, long and turning enough to matter.
The circular parts inside each run are found by :mod:`curvescan.geometry.circular`.
"""

from __future__ import annotations

import numpy as np

from . import _kernels as kn
from ._ragged import expand

__all__ = ["find_runs"]


def _runs(label: np.ndarray, chain: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (inclusive) station index of maximal runs of equal label in a chain."""
    n = len(label)
    brk = np.ones(n, dtype=bool)
    brk[1:] = (label[1:] != label[:-1]) | (chain[1:] != chain[:-1])
    starts = np.flatnonzero(brk)
    ends = np.append(starts[1:], n) - 1
    return starts, ends


def find_runs(kappa: np.ndarray, s: np.ndarray, chain: np.ndarray, *, kappa_on: float,
              kappa_off: float, min_deflection_rad: float, min_length_m: float,
              merge_gap_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Curve runs as ``(first, last)`` station indices (inclusive).

    Stations are labelled by the sign of curvature where ``|kappa| >= kappa_off``. Runs of
    one sign separated by a gap shorter than ``merge_gap_m`` in which the curvature keeps
    (or loses only to noise) the same sign are merged. A run is kept when its peak
    ``|kappa|`` reaches ``kappa_on``, its deflection ``min_deflection_rad`` and its length
    ``min_length_m``.
    """
    if len(kappa) == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty
    if kn.compiled():
        starts, ends, lab = kn.label_runs_kernel(kappa, chain, kappa_off)
    else:
        label = np.where(np.abs(kappa) >= kappa_off, np.sign(kappa), 0).astype(np.int8)
        starts, ends = _runs(label, chain)
        lab = label[starts]
    # merge: a short zero run between two runs of the same sign on the same chain
    gap_len = s[ends] - s[starts]
    inner = np.zeros(len(starts), dtype=bool)
    if len(starts) >= 3:
        inner[1:-1] = (
            (lab[1:-1] == 0)
            & (lab[:-2] == lab[2:])
            & (lab[:-2] != 0)
            & (chain[starts[:-2]] == chain[ends[2:]])
            & (gap_len[1:-1] <= merge_gap_m)
        )
    lab = lab.copy()
    lab[inner] = lab[np.flatnonzero(inner) - 1]
    # runs of equal label on one chain join
    brk = np.ones(len(starts), dtype=bool)
    brk[1:] = (lab[1:] != lab[:-1]) | (chain[starts[1:]] != chain[ends[:-1]])
    head = np.flatnonzero(brk)
    starts, ends, lab = starts[head], ends[np.r_[head[1:], len(brk)] - 1], lab[head]
    keep = lab != 0
    starts, ends = starts[keep], ends[keep]
    if len(starts) == 0:
        return starts, ends
    if kn.compiled():
        csum = kn.running_turn_kernel(kappa, s, chain)  # [0, cumsum(kappa * step)]
        defl = np.abs(csum[ends + 1] - csum[starts])
        peak = kn.range_max_abs_kernel(kappa, starts, ends)
    else:
        step = np.zeros(len(s))
        step[1:] = np.diff(s)
        step[np.r_[True, chain[1:] != chain[:-1]]] = 0.0
        csum = np.cumsum(kappa * np.r_[step[1:], 0.0])
        defl = np.abs(csum[ends] - np.where(starts > 0, csum[starts - 1], 0.0))
        peak = _group_max(np.abs(kappa), starts, ends)
    length = s[ends] - s[starts]
    ok = (peak >= kappa_on) & (defl >= min_deflection_rad) & (length >= min_length_m)
    return starts[ok], ends[ok]


def _group_max(values: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """Maximum of ``values[starts[i]:ends[i] + 1]`` for each run."""
    idx, grp = expand(starts, ends - starts + 1)
    out = np.full(len(starts), -np.inf)
    np.maximum.at(out, grp, values[idx])
    return out
