"""Segmentation of the curvature profile into curves, and the circular part of each.

A curve is a run of stations whose smoothed curvature keeps one sign and exceeds a small
threshold, long and turning enough to matter. Within a curve, the circular part starts as
the stations near the curvature plateau and is then grown over the original vertices that
lie on the fitted circle; what lies between the curve's ends and its circular part are the
transitions. All steps are vectorised over runs with group-wise reductions.
"""

from __future__ import annotations

import numpy as np

__all__ = ["find_runs", "run_boundaries"]


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
    merged = np.repeat(lab, ends - starts + 1)
    starts, ends = _runs(merged, chain)
    lab = merged[starts]
    keep = lab != 0
    starts, ends = starts[keep], ends[keep]
    if len(starts) == 0:
        return starts, ends
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
    counts = ends - starts + 1
    idx = np.repeat(starts, counts) + (np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts))
    grp = np.repeat(np.arange(len(starts)), counts)
    out = np.full(len(starts), -np.inf)
    np.maximum.at(out, grp, values[idx])
    return out


def run_members(starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flat station indices of all runs and the run id of each."""
    counts = ends - starts + 1
    grp = np.repeat(np.arange(len(starts)), counts)
    idx = starts[grp] + (np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts))
    return idx, grp


def run_boundaries(kappa: np.ndarray, s: np.ndarray, starts: np.ndarray, ends: np.ndarray,
                   core_fraction: float) -> dict[str, np.ndarray]:
    """Plateau level and first/last station of the core and of the ramps of each run.

    The plateau is the 75th percentile of ``|kappa|`` in the run; the core is where
    ``|kappa| >= core_fraction * plateau``; ``q25``/``q75`` mark where the profile first
    (last) crosses a quarter and three quarters of the plateau, for the ramp estimate.
    """
    idx, grp = run_members(starts, ends)
    ak = np.abs(kappa[idx])
    order = np.lexsort((ak, grp))
    counts = ends - starts + 1
    first = np.cumsum(counts) - counts
    q = first + np.floor(0.75 * (counts - 1)).astype(np.int64)
    plateau = ak[order][q]
    lvl = plateau[grp]
    out = {"plateau": plateau}
    for name, frac in (("core", core_fraction), ("q25", 0.25), ("q75", 0.75)):
        hit = ak >= frac * lvl
        pos = np.where(hit, idx, np.iinfo(np.int64).max)
        lo = np.full(len(starts), np.iinfo(np.int64).max)
        np.minimum.at(lo, grp, pos)
        pos = np.where(hit, idx, -1)
        hi = np.full(len(starts), -1)
        np.maximum.at(hi, grp, pos)
        out[name + "_first"] = np.minimum(lo, ends)
        out[name + "_last"] = np.maximum(hi, starts)
    return out
