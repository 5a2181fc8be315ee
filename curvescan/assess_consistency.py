"""Speed consistency along each chain, classified with Lamm's design-consistency criterion.

For every curve and each direction of travel, the **approach speed** is the posted speed;
where the tangent from the previous curve on the same chain is shorter than
``consistency_tangent_m``, drivers leave that curve at about its comfort speed and cannot
regain speed, so the approach is the lower of the two (the previous curve's comfort speed
alone when no posted speed is known). The **speed drop** is the approach speed minus this
curve's comfort speed; the larger of the two directions governs.

The drop is classified with Lamm's Criterion II for successive design elements (Lamm,
Psarianos and Mailaender 1999, *Highway Design and Traffic Safety Engineering Handbook*;
Lamm et al. 1988, TRR 1195) -- thresholds **from memory** (REFERENCES.md section 6, row M):

======== ===================
good     drop <= 10 km/h
fair     10 < drop <= 20 km/h
poor     drop > 20 km/h
======== ===================

Lamm states the criterion on 85th-percentile operating speeds; curvescan uses the posted
speed on the approach and the comfort speed on the curve as stand-ins (no speed data).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

__all__ = ["consistency", "LAMM_GOOD_KMH", "LAMM_FAIR_KMH", "CRITERION"]

#: Lamm Criterion II upper bound of "good" (km/h), from memory (REFERENCES.md 6, M).
LAMM_GOOD_KMH = 10.0
#: Lamm Criterion II upper bound of "fair" (km/h), from memory (REFERENCES.md 6, M).
LAMM_FAIR_KMH = 20.0
CRITERION = ("Lamm Criterion II (successive elements), Lamm, Psarianos & Mailaender 1999, "
             "Highway Design and Traffic Safety Engineering Handbook; thresholds 10/20 km/h "
             "from memory; posted speed and comfort speed stand in for V85")


def classify_drop(drop_kmh: np.ndarray) -> np.ndarray:
    """Lamm Criterion II class of a speed drop (km/h): good, fair, poor or None (NaN)."""
    drop = np.asarray(drop_kmh, dtype=float)
    out = np.where(drop <= LAMM_GOOD_KMH, "good",
                   np.where(drop <= LAMM_FAIR_KMH, "fair", "poor")).astype(object)
    out[np.isnan(drop)] = None
    return out


def _approach(posted: np.ndarray, neighbour_comfort: np.ndarray, tangent_m: np.ndarray,
              has_neighbour: np.ndarray, short_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Approach speed (km/h) and its source for one direction of travel."""
    capped = has_neighbour & (tangent_m < short_m) & np.isfinite(neighbour_comfort)
    speed = np.where(capped, np.fmin(posted, neighbour_comfort), posted)
    source = np.where(capped & ~(posted <= neighbour_comfort), "previous_curve",
                      np.where(np.isfinite(posted), "posted", None)).astype(object)
    source[np.isnan(speed)] = None
    return speed, source


def consistency(curves: pd.DataFrame, chain_length_m: np.ndarray, config: Any) -> pd.DataFrame:
    """Approach speed, speed drop and Lamm class per curve, both directions of travel.

    Parameters
    ----------
    curves : DataFrame
        ``chain_id``, ``s_start_m``, ``s_end_m``, ``posted_kmh``, ``v_comfort_kmh``.
    chain_length_m : ndarray
        Length of each chain (m), indexed by ``chain_id``.
    config : ScanConfig
        Uses ``consistency_tangent_m``.

    Returns
    -------
    DataFrame
        Same index: ``approach_kmh``, ``approach_source`` (``posted`` or
        ``previous_curve``), ``approach_direction`` (``digitised`` or ``reverse``),
        ``approach_tangent_m`` (tangent length before the curve in that direction),
        ``speed_drop_kmh`` and ``consistency`` (good / fair / poor).
    """
    n = len(curves)
    chain = curves["chain_id"].to_numpy(dtype=np.int64)
    s0 = curves["s_start_m"].to_numpy(dtype=float)
    s1 = curves["s_end_m"].to_numpy(dtype=float)
    posted = curves["posted_kmh"].to_numpy(dtype=float)
    comfort = curves["v_comfort_kmh"].to_numpy(dtype=float)
    order = np.lexsort((s0, chain))
    c, a, b = chain[order], s0[order], s1[order]
    same_prev = np.r_[False, c[1:] == c[:-1]] if n else np.zeros(0, bool)
    same_next = np.r_[c[:-1] == c[1:], False] if n else np.zeros(0, bool)
    prev_end = np.r_[0.0, b[:-1]] if n else np.zeros(0)
    next_start = np.r_[a[1:], 0.0] if n else np.zeros(0)
    length = np.asarray(chain_length_m, dtype=float)[c] if n else np.zeros(0)
    tan_before = np.where(same_prev, a - prev_end, a)
    tan_after = np.where(same_next, next_start - b, length - b)
    comf = comfort[order]
    prev_comf = np.r_[np.nan, comf[:-1]] if n else np.zeros(0)
    next_comf = np.r_[comf[1:], np.nan] if n else np.zeros(0)
    short = float(config.consistency_tangent_m)
    p = posted[order]
    fwd, fwd_src = _approach(p, prev_comf, tan_before, same_prev, short)
    bwd, bwd_src = _approach(p, next_comf, tan_after, same_next, short)
    drop_f, drop_b = fwd - comf, bwd - comf
    use_b = np.nan_to_num(drop_b, nan=-np.inf) > np.nan_to_num(drop_f, nan=-np.inf)
    drop = np.where(use_b, drop_b, drop_f)
    out = pd.DataFrame(index=curves.index)
    inv = np.empty(n, dtype=np.int64)
    inv[order] = np.arange(n)
    out["approach_kmh"] = np.where(use_b, bwd, fwd)[inv]
    src = np.where(use_b, bwd_src, fwd_src)
    out["approach_source"] = src[inv]
    direction = np.where(use_b, "reverse", "digitised").astype(object)
    direction[np.isnan(drop)] = None
    out["approach_direction"] = direction[inv]
    out["approach_tangent_m"] = np.where(use_b, tan_after, tan_before)[inv]
    out["speed_drop_kmh"] = drop[inv]
    out["consistency"] = classify_drop(drop)[inv]
    return out
