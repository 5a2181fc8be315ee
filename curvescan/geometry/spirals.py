"""Transition lengths from the tangents and the circle they join.

A clothoid transition of length ``L`` between a tangent and a circle of radius ``R`` moves
the circle off the tangent by the *shift* ``p`` (the circle's distance from the tangent
line minus ``R``; about ``L^2 / (24 R)``) and starts ``k`` (about ``L / 2``) before the
foot of the circle's centre on the tangent line. These are the standard spiral-curve
relations of route surveying (common practice; exact here through the Fresnel
integrals). On noisy vertices the first half of a transition lies within the noise of the
tangent and its last part within that of the circle, so the curvature profile finds only a
few metres of it; the tangent, fitted to all its vertices, and the circle, fitted to all
of its own, fix the shift far better than any one vertex does.

For each end of each curve with a tangent on that side (enough vertices between it and the
neighbouring curve, lying on a line), the tangent is fitted by total least squares, the
shift is measured and, where it is significant (:data:`SHIFT_Z` standard errors above
zero), turned into the transition's length and its start; where the circle touches the
tangent within the noise, the curve starts at the touching point with no transition. The
tangent window is then narrowed to end before the new start and the fit repeated
(:data:`ROUNDS` times), so vertices of the transition do not pull on the tangent.
"""

from __future__ import annotations

import numpy as np
from scipy.special import fresnel

from ._ragged import expand, find

__all__ = ["shift_of", "length_for_shift", "tangent_ends", "vertex_window"]

#: Fewest vertices on a tangent before it is used.
MIN_TANGENT_VERTICES = 3
#: Fewest vertices on the circle before its ends are placed from the tangents.
MIN_CIRCLE_VERTICES = 3
#: A transition is placed only from a circle whose radius standard error is at most this
#: share of the radius.
MAX_REL_SE = 0.05
#: Longest stretch of tangent (m) next to a curve that is fitted.
MAX_TANGENT_M = 300.0
#: Shortest tangent (m) used.
MIN_TANGENT_M = 15.0
#: A shift this many standard errors above zero is a transition.
SHIFT_Z = 1.5
#: Newton steps on the exact shift (from the series' start they converge in two or three).
NEWTON_STEPS = 4
#: Fits of each tangent, each on a window ending before the last found transition start.
ROUNDS = 3
#: The tangent window stops this share of the transition's length before its start.
MARGIN = 0.1
#: A tangent whose vertices scatter more than this many times the noise is not straight.
MAX_SCATTER = 2.0
#: Standard deviations of the residual variance's chi-square spread a straight may show.
SCATTER_Z = 3.0


def shift_of(length: np.ndarray, radius: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shift ``p`` of the circle and distance ``k`` from the transition's start to the foot
    of the circle's centre on the tangent, for clothoids of ``length`` on circles of
    ``radius`` (exact, via :func:`scipy.special.fresnel`)."""
    length = np.asarray(length, dtype=float)
    radius = np.asarray(radius, dtype=float)
    a = np.sqrt(np.pi * radius * np.maximum(length, 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        s, c = fresnel(np.where(a > 0, length / np.where(a > 0, a, 1.0), 0.0))
    x, y = a * c, a * s
    tau = length / (2.0 * radius)
    return y - radius * (1.0 - np.cos(tau)), x - radius * np.sin(tau)


def length_for_shift(shift: np.ndarray, radius: np.ndarray) -> np.ndarray:
    """Clothoid length whose shift is ``shift`` on a circle of ``radius`` (0 for a shift of
    zero or less; transitions are capped at turning one radian).

    Starts from the two-term series ``p = L^2/(24 R) - L^4/(2688 R^3)`` (common practice)
    and takes Newton steps on the exact shift."""
    shift = np.asarray(shift, dtype=float)
    radius = np.broadcast_to(np.asarray(radius, dtype=float), shift.shape)
    out = np.zeros(shift.shape)
    m = shift > 0
    if not m.any():
        return out
    p, r = shift[m], radius[m]
    a, b = 1.0 / (24.0 * r), 1.0 / (2688.0 * r ** 3)
    disc = a * a - 4.0 * b * p
    with np.errstate(invalid="ignore"):
        l2 = np.where(disc > 0, (a - np.sqrt(np.maximum(disc, 0.0))) / (2.0 * b), 24.0 * r * p)
    cap = 2.0 * r
    length = np.minimum(np.sqrt(l2), cap)
    for _ in range(NEWTON_STEPS):
        h = 1e-6 * np.maximum(length, 1e-3)
        p0, _k = shift_of(length, r)
        p1, _k = shift_of(length + h, r)
        slope = (p1 - p0) / h
        step = np.where(slope > 0, (p - p0) / np.where(slope > 0, slope, 1.0), 0.0)
        length = np.clip(length + step, 0.0, cap)
    out[m] = length
    return out


def _line_fits(coords, m, v0, v1):
    """Total least-squares line of the vertices ``v0[g] .. v1[g]-1`` of each group: centroid,
    unit direction (along increasing measure), RMS distance, the along-line spread, the
    vertices' mean measure and the measure gained per metre along the line."""
    n = len(v0)
    idx, grp = expand(v0, v1 - v0)
    cnt = np.bincount(grp, minlength=n).astype(float)
    safe = np.maximum(cnt, 1.0)
    x, y, mm = coords[idx, 0], coords[idx, 1], m[idx]
    mx = np.bincount(grp, x, minlength=n) / safe
    my = np.bincount(grp, y, minlength=n) / safe
    mmean = np.bincount(grp, mm, minlength=n) / safe
    dx, dy = x - mx[grp], y - my[grp]
    sxx = np.bincount(grp, dx * dx, minlength=n)
    syy = np.bincount(grp, dy * dy, minlength=n)
    sxy = np.bincount(grp, dx * dy, minlength=n)
    theta = 0.5 * np.arctan2(2.0 * sxy, sxx - syy)
    ux, uy = np.cos(theta), np.sin(theta)
    t = dx * ux[grp] + dy * uy[grp]
    dm = mm - mmean[grp]
    stt = np.bincount(grp, t * t, minlength=n)
    stm = np.bincount(grp, t * dm, minlength=n)
    # orient the direction along increasing measure
    flip = stm < 0
    ux, uy, stm = np.where(flip, -ux, ux), np.where(flip, -uy, uy), np.abs(stm)
    off = -dx * uy[grp] + dy * ux[grp]
    rss = np.bincount(grp, off * off, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(stt > 0, stm / stt, 1.0)
        rms = np.sqrt(rss / np.maximum(cnt - 2.0, 1.0))
    return mx, my, ux, uy, rms, stt, mmean, np.clip(slope, 1.0, 1.2), cnt


def tangent_ends(coords, gm, v_lo, v_hi, cx, cy, radius, sign, sigma, circle_cov, side):
    """Transition length and curve/arc end measures for one side of each curve.

    ``v_lo``/``v_hi`` bound the tangent window's vertices (global vertex indices, ``v_hi``
    exclusive), ``gm`` the vertices' measures; ``side`` is -1 for the side before the
    curve (in) and +1 for the side after (out). Returns ``(usable, length, outer, inner,
    shift, shift_se)``: where ``usable``, ``outer`` is the measure of the curve's end on
    that side (tangent to transition), ``inner`` that of the circular part's end
    (transition to circle), ``length`` the transition's length (0 where the shift is not
    significant).
    """
    n = len(v_lo)
    out_len = np.zeros(n)
    outer = np.full(n, np.nan)
    inner = np.full(n, np.nan)
    shift = np.full(n, np.nan)
    shift_se = np.full(n, np.nan)
    usable = np.zeros(n, dtype=bool)
    k = np.flatnonzero(v_hi - v_lo >= MIN_TANGENT_VERTICES)
    if len(k) == 0:
        return usable, out_len, outer, inner, shift, shift_se
    mx, my, ux, uy, rms, stt, mmean, slope, cnt = _line_fits(coords, gm, v_lo[k], v_hi[k])
    span = gm[v_hi[k] - 1] - gm[v_lo[k]]
    # straight: the residual variance no more than its chi-square spread allows above the
    # noise (SCATTER_Z standard deviations of s^2 / sigma^2 with n - 2 degrees of freedom),
    # and never above MAX_SCATTER times the noise
    dof = np.maximum(cnt - 2.0, 1.0)
    limit = np.minimum(np.sqrt(1.0 + SCATTER_Z * np.sqrt(2.0 / dof)), MAX_SCATTER)
    ok = (span >= MIN_TANGENT_M) & (rms <= limit * np.maximum(sigma[k], 1e-3) + 1e-3)
    # the centre's distance from the line, on the side the curve turns to
    rel_x, rel_y = cx[k] - mx, cy[k] - my
    nx, ny = -uy, ux
    dist = sign[k] * (rel_x * nx + rel_y * ny)
    t_foot = rel_x * ux + rel_y * uy
    p = dist - radius[k]
    with np.errstate(invalid="ignore", divide="ignore"):
        var_line = sigma[k] ** 2 * (1.0 / cnt + t_foot ** 2 / np.where(stt > 0, stt, np.inf))
    # the circle's own share: its centre and radius covariance along (n, -1)
    g = np.stack([sign[k] * nx, sign[k] * ny, -np.ones(len(k))], axis=1)
    var_circle = np.einsum("ni,nij,nj->n", g, circle_cov[k], g)
    se = np.sqrt(var_line + var_circle)
    length = length_for_shift(np.where(p > SHIFT_Z * se, p, 0.0), radius[k])
    _p, back = shift_of(length, radius[k])
    # the foot of the centre on the line, then ``back`` out of the curve
    m_foot = mmean + slope * t_foot
    m_outer = m_foot + side * slope * back
    m_inner = m_outer - side * slope * length
    # a circle that cuts the tangent by more than the noise allows does not belong to it
    # (a poor fit on few vertices, or the wrong tangent)
    ok &= np.isfinite(m_outer) & np.isfinite(m_inner) & (dist > 0) & (p >= -SHIFT_Z * se)
    kk = k[ok]
    usable[kk] = True
    out_len[kk] = slope[ok] * length[ok]
    outer[kk], inner[kk] = m_outer[ok], m_inner[ok]
    shift[kk], shift_se[kk] = p[ok], se[ok]
    return usable, out_len, outer, inner, shift, shift_se


def vertex_window(gm, lo_m, hi_m, first_v, last_v):
    """Vertex index range ``[v_lo, v_hi)`` with global measures within ``[lo_m, hi_m]``,
    kept to each chain's vertices."""
    v_lo = np.maximum(find(gm, lo_m, side="left"), first_v)
    v_hi = np.minimum(find(gm, hi_m, side="right"), last_v + 1)
    return v_lo, np.maximum(v_hi, v_lo)
