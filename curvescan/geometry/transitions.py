"""Transition vertices taken off the ends of circular parts.

Near the end of its arc a spiral transition leaves the circle very slowly: a clothoid of
length ``L`` departing from a circle of radius ``R`` lies ``d^3 / (6 R L)`` outside it at a
distance ``d`` past the arc's end (first-order expansion of the clothoid, common practice
in alignment design). With vertex noise of a few decimetres the consensus of
:mod:`curvescan.geometry.circular` therefore admits up to two dozen metres of each
transition, and where the arc is short against its transitions the part comes out about
twice its true length, with a radius between the arc's and the transitions' (the circle
averages them).

Here each circular part with enough vertices is tested against the model *arc plus
clothoid ends*: the inner vertices on a circle, the vertices trimmed off each end outside
it by ``c d^3`` (one ``c >= 0`` per end, fitted by least squares). All trims of up to
:data:`MAX_TRIM` vertices per end are scored at once (group-wise hyper fits); the trim with
the lowest residual sum wins when it lowers the sum by more than :data:`TRIM_GAIN` noise
variances per trimmed end (two parameters each: where the arc ends and how fast the
transition leaves it). The winning part is refitted with the geometric refinement.
"""

from __future__ import annotations

import numpy as np

from ._ragged import expand
from .circlefit import fit_circles, hyper_fit

__all__ = ["trim_transitions"]

#: Most vertices tested as transition at each end of a circular part.
MAX_TRIM = 10
#: Fewest vertices left on the arc after trimming.
MIN_INNER = 4
#: Fewest vertices a part needs before it is tested at all.
MIN_VERTICES = 7
#: Drop in the residual sum, in noise variances per trimmed end, a trim must bring.
TRIM_GAIN = 9.0
#: Alternations of circle fit and end trims.
ROUNDS = 3
#: Only parts whose middle half bends more sharply than the whole (its radius below this
#: share of the part's) are tested: elsewhere there is no arc inside transitions to find.
GATE = 0.97


def _circles(coords, lo, hi):
    idx, grp = expand(lo, hi - lo)
    return hyper_fit(coords[idx, 0], coords[idx, 1], grp, len(lo))


def _gaps(coords, lo, hi, cx, cy, r):
    """Signed distance (outward +) of the vertices ``[lo, hi)`` from their part's circle."""
    idx, grp = expand(lo, hi - lo)
    return np.hypot(coords[idx, 0] - cx[grp], coords[idx, 1] - cy[grp]) - r[grp], idx, grp


def _end_trim(coords, ref, step, room, cx, cy, r, sig2):
    """Best number of vertices (``0..room``) to take off one end of each part.

    ``ref`` is the part's end vertex and ``step`` +1 (start, going in) or -1 (end). For each
    candidate ``t`` the ``t`` outer vertices are fitted as ``c d^3`` beyond vertex ``t`` and
    the rest of the end window counts as on the circle; a trim costs ``TRIM_GAIN`` noise
    variances.
    """
    n = len(ref)
    t, part = expand(np.zeros(n, dtype=np.int64), room + 1)
    j, cand = expand(np.zeros(len(t), dtype=np.int64), np.full(len(t), MAX_TRIM))
    pc = part[cand]
    inside = j < np.maximum(room[pc], 0) + 0  # window vertices that exist
    jj = np.where(inside, j, 0)
    v = ref[pc] + step * jj
    b = ref[pc] + step * t[cand]  # first vertex left on the arc
    x, y = coords[v, 0] - cx[pc], coords[v, 1] - cy[pc]
    e = np.hypot(x, y) - r[pc]
    ang = np.arctan2(y, x)
    ang_b = np.arctan2(coords[b, 1] - cy[pc], coords[b, 0] - cx[pc])
    d3 = (r[pc] * np.abs(np.angle(np.exp(1j * (ang - ang_b))))) ** 3
    outer = inside & (jj < t[cand])
    w = outer.astype(float)
    nc = len(t)
    sed = np.bincount(cand, w * e * d3, minlength=nc)
    sdd = np.bincount(cand, w * d3 * d3, minlength=nc)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.where(sdd > 0, np.maximum(sed / sdd, 0.0), 0.0)
    res = np.where(outer, e - c[cand] * d3, np.where(inside, e, 0.0))
    cost = np.bincount(cand, res * res, minlength=nc) + TRIM_GAIN * sig2[part] * (t > 0)
    cost = np.where(np.isfinite(cost), cost, np.inf)
    order = np.lexsort((cost, part))
    best = order[np.r_[True, part[order][1:] != part[order][:-1]]]
    out = np.zeros(n, dtype=np.int64)
    out[part[best]] = t[best]
    return out


def trim_transitions(coords: np.ndarray, parts: dict[str, np.ndarray], sigma: np.ndarray,
                     fields: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Parts with their transition vertices trimmed off (see the module docstring).

    ``sigma`` is the vertex noise (m) per part (floored by the caller). Returns a new dict;
    ``i0``/``i1``, the fit ``fields`` and ``trim_in``/``trim_out`` (vertices trimmed) are
    updated.
    """
    out = {k: np.array(v, copy=True) for k, v in parts.items()}
    i0 = out["i0"].astype(np.int64)
    i1 = out["i1"].astype(np.int64)
    n = i1 - i0
    out["trim_in"] = np.zeros(len(i0), dtype=np.int64)
    out["trim_out"] = np.zeros(len(i0), dtype=np.int64)
    test = np.flatnonzero((n >= MIN_VERTICES) & np.isfinite(out["radius"]))
    if len(test) == 0:
        return out
    p0, p1, m = i0[test], i1[test], n[test]
    sig2 = sigma[test] ** 2
    # start from the circle of the middle half: on a transition-dominated curve it is the
    # arc's, where the whole part's circle averages arc and transitions
    a = np.minimum(MAX_TRIM, m // 4)
    b = a.copy()
    live = np.ones(len(test), dtype=bool)
    r_all = out["radius"][test]
    cx, cy, r = _circles(coords, p0 + a, p1 - b)
    live = np.isfinite(r) & (r < GATE * r_all)
    for _ in range(ROUNDS):
        k = np.flatnonzero(live)
        if len(k) == 0:
            break
        if _ > 0:
            cx[k], cy[k], r[k] = _circles(coords, p0[k] + a[k], p1[k] - b[k])
        ok = np.isfinite(r[k])
        live[k[~ok]] = False
        k = k[ok]
        room_a = np.minimum(MAX_TRIM, m[k] - MIN_INNER - b[k])
        na = _end_trim(coords, p0[k], 1, room_a, cx[k], cy[k], r[k], sig2[k])
        room_b = np.minimum(MAX_TRIM, m[k] - MIN_INNER - na)
        nb = _end_trim(coords, p1[k] - 1, -1, room_b, cx[k], cy[k], r[k], sig2[k])
        moved = (na != a[k]) | (nb != b[k])
        a[k], b[k] = na, nb
        live[k[~moved]] = False
    # keep a trim only where arc plus transitions beat the one circle over all vertices
    cand = np.flatnonzero(((a > 0) | (b > 0)) & np.isfinite(r))
    if len(cand) == 0:
        return out
    q0, q1, ta, tb = p0[cand], p1[cand], a[cand], b[cand]
    cx, cy, r = _circles(coords, q0 + ta, q1 - tb)
    e, idx, grp = _gaps(coords, q0 + ta, q1 - tb, cx, cy, r)
    rss = np.bincount(grp, e * e, minlength=len(cand))
    rss += _side_rss(coords, q0, ta, 1, cx, cy, r)
    rss += _side_rss(coords, q1 - 1, tb, -1, cx, cy, r)
    whole = out["rmse"][test[cand]] ** 2 * m[cand]
    gain = whole - rss
    keep = gain > TRIM_GAIN * sig2[cand] * ((ta > 0).astype(float) + (tb > 0))
    which, ta, tb = test[cand[keep]], ta[keep], tb[keep]
    if len(which) == 0:
        return out
    n0, n1 = i0[which] + ta, i1[which] - tb
    idx, grp = expand(n0, n1 - n0)
    fit = fit_circles(coords[idx, 0], coords[idx, 1], grp, len(which))
    ok = np.isfinite(fit.radius)
    which, ta, tb, n0, n1 = which[ok], ta[ok], tb[ok], n0[ok], n1[ok]
    out["i0"][which], out["i1"][which] = n0, n1
    out["trim_in"][which], out["trim_out"][which] = ta, tb
    for name in fields:
        out[name][which] = getattr(fit, name)[ok]
    return out


def _side_rss(coords, end, count, step, cx, cy, r):
    """Residual sum of the ``count`` vertices from ``end`` (going ``step``) as ``c d^3``
    outside the circle, ``d`` the arc length from the first vertex left on it."""
    idx, grp = expand(np.zeros(len(end), dtype=np.int64), count)
    v = end[grp] + step * idx
    bnd = end + step * count
    x, y = coords[v, 0] - cx[grp], coords[v, 1] - cy[grp]
    e = np.hypot(x, y) - r[grp]
    ang_b = np.arctan2(coords[bnd, 1] - cy, coords[bnd, 0] - cx)
    d3 = (r[grp] * np.abs(np.angle(np.exp(1j * (np.arctan2(y, x) - ang_b[grp]))))) ** 3
    n = len(end)
    sed = np.bincount(grp, e * d3, minlength=n)
    sdd = np.bincount(grp, d3 * d3, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.where(sdd > 0, np.maximum(sed / sdd, 0.0), 0.0)
    res = e - c[grp] * d3
    return np.bincount(grp, res * res, minlength=n)
