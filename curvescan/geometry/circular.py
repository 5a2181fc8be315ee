"""Circular parts of curve runs: find the plateau, fit a circle, grow it over the vertices.

Works on "pieces" (station ranges of one sign of curvature), all at once:

1. **Core**: the contiguous stretch around the curvature peak where ``|kappa|`` stays
   above 80 % of the piece's 90th percentile.
2. **Fit**: hyper fit plus geometric refinement of the original vertices of the core
   (widened to at least three vertices).
3. **Grow**: the circular part spreads outward over vertices that lie within a tolerance
   of the circle (2.5 times the larger of the chain's vertex noise and the fit's RMSE, at
   least ``circle_tolerance_m``); one stray vertex does not stop it, two in a row do. The
   circle is refitted on what it grew over. Tangent vertices the tolerance let in at
   either end (they flatten the circle) are shed where a tangent line explains them better.
4. **Peel**: what is left of the piece on either side of the circular part (beyond the
   curvature window, which blurs the join, at most :data:`PEEL_MAX_SCALE`'s) becomes a
   new piece. In later rounds a piece
   becomes a circular part only when its curvature is a plateau, not a ramp: this finds
   the second arc of a compound curve but not a transition. Where a later piece's grown
   circle fails that test, the longest run of 8 down to 4 vertices right next to the part
   it was peeled from is tried instead (a short second arc holds fewer vertices than a seed).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import _kernels as kn
from ._ragged import (expand, find, group_argmax, group_quantile, range_quantile, scatter_max,
                      scatter_min, stops_around)
from .circlefit import CircleFit, circle_gaps, fit_circles
from .compound import MIN_RADIUS_RATIO, split_compound
from .transitions import trim_transitions

#: Take transition vertices off the ends of circular parts (:mod:`.transitions`).
TRIM_TRANSITIONS = True

__all__ = ["Profile", "circular_parts"]

#: A piece found after the first round must be this flat: relative change of curvature
#: across it (slope times length over mean) below this value.
PLATEAU_CHANGE = 0.6
#: ... and a smaller relative change above this one counts as a ramp where it is more than
#: RAMP_SIGMAS standard errors of the curvature slope (clean data tells a transition from
#: an arc much more finely than noisy data).
PLATEAU_MIN_CHANGE = 0.15
RAMP_SIGMAS = 3.0
ROUNDS = 5
#: A vertex belongs to a circle within this many noise standard deviations.
CONSENSUS_SIGMAS = 2.5
#: Share of the curvature half window skipped beyond a circular part before peeling: the
#: window blurs the join with whatever follows.
PEEL_GAP = 1.0
#: ... at most at this scale (index into the scales): a flat arc is read with a wide window,
#: but a sharp arc next to it is read with a narrow one, and a gap of the flat arc's wide
#: window could swallow all of it (a 121 m arc of 147 m radius between arcs of 1263 and
#: 357 m was lost in the gaps of both).
PEEL_MAX_SCALE = 1
#: Share of the half-curvature stretch that a later-round circular part must cover.
PIECE_COVER = 0.5
#: Vertices a seed fit takes at least (where the piece has them).
SEED_VERTICES = 5
#: The consensus never shrinks a circular part below this many vertices (three always
#: lie on a circle).
CONSENSUS_MIN_VERTICES = 5
#: Neighbouring parts of one run whose radii differ by less than FRAGMENT_SIGMAS standard
#: errors merge where their joint circle misses the vertices by at most MERGE_RMSE_SHARE
#: times the noise (or the parts' own RMSE, if larger).
FRAGMENT_SIGMAS = 3.0
MERGE_RMSE_SHARE = 3.0
#: Of two merges that share a part, the one with the better joint fit is made first.
BEST_FIT_MERGE = True
#: Neighbouring parts of nearly equal radius merge only where their joint circle misses
#: the vertices by at most this many times the noise (a wandering arc, not two arcs).
ALIKE_RMSE_SHARE = 4.0
#: A part stuck at its seed is retried with a wider tolerance when its radius times the
#: piece's mean curvature exceeds this (its circle is far flatter than the piece bends).
STUCK_FLATNESS = 2.0
#: The core of a piece is where its curvature is at least CORE_SHARE of its CORE_QUANTILE.
CORE_QUANTILE = 0.9
CORE_SHARE = 0.8


def consensus_tolerance(sigma: np.ndarray, floor_m: float) -> np.ndarray:
    """Distance from a circle within which a vertex belongs to it: :data:`CONSENSUS_SIGMAS`
    times the chain's vertex noise, at least ``floor_m``."""
    return np.maximum(CONSENSUS_SIGMAS * sigma, floor_m)


@dataclass
class Profile:
    """Station and vertex arrays the circular-part search reads."""

    s: np.ndarray  # station measure along its chain (m)
    gs: np.ndarray  # station global measure (m)
    K: np.ndarray  # curvature (1/m) at each scale: shape (n_scales, n_stations)
    chain: np.ndarray  # station chain
    gm: np.ndarray  # vertex global measure (m)
    coords: np.ndarray  # vertex coordinates (m)
    v_off: np.ndarray  # chain vertex offsets
    sigma: np.ndarray  # per-chain vertex noise (m)
    half_m: np.ndarray  # curvature half window (m) per scale and chain: (n_scales, n_chains)
    turn_cache: dict = field(default_factory=dict)  # running heading change per scale

    def k(self, scale: np.ndarray, idx: np.ndarray) -> np.ndarray:
        """Curvature at stations ``idx``, each at its own scale index."""
        return self.K[scale, idx]

    def choose_scale(self, level: np.ndarray, chain: np.ndarray) -> np.ndarray:
        """Smallest scale whose curvature noise stays under a tenth of ``level``.

        Chord curvature from stations ``B`` apart carries noise of about
        ``sqrt(6) sigma / B^2``; asking for ten times less than the curvature level gives
        ``B >= sqrt(10 sqrt(6) sigma / level)``.
        """
        need = np.sqrt(24.5 * self.sigma[chain] / np.maximum(np.abs(level), 1e-9))
        ok = self.half_m[:, chain] >= need[None, :]
        first_ok = np.where(ok.any(axis=0), ok.argmax(axis=0), self.K.shape[0] - 1)
        return first_ok.astype(np.int64)


def _core(prof: Profile, pf: np.ndarray, pl: np.ndarray, scale: np.ndarray):
    """First and last station of the plateau core of each piece.

    Read at the next smoother scale, the core is the stretch above 80 % of the piece's
    90th-percentile curvature that turns the most (largest sum of curvature), so a noise
    spike cannot seed the fit.
    """
    n = len(pf)
    smooth = np.minimum(scale + 1, prof.K.shape[0] - 1)
    if kn.compiled():
        return kn.core_kernel(prof.K, smooth.astype(np.int64), pf.astype(np.int64),
                              pl.astype(np.int64), CORE_QUANTILE, CORE_SHARE)
    idx, grp = expand(pf, pl - pf + 1)
    ak = np.abs(prof.k(smooth[grp], idx))
    level = group_quantile(ak, grp, n, CORE_QUANTILE)
    hit = ak >= CORE_SHARE * level[grp]
    brk = np.ones(len(idx), dtype=bool)
    brk[1:] = (hit[1:] != hit[:-1]) | (grp[1:] != grp[:-1])
    lab = np.cumsum(brk) - 1
    weight = np.bincount(lab, np.where(hit, ak, 0.0))
    best = group_argmax(weight[lab], grp, n)
    target = lab[best]
    inside = lab == target[grp]
    first = np.full(n, np.iinfo(np.int64).max)
    last = np.full(n, -1)
    scatter_min(first, grp[inside], idx[inside])
    scatter_max(last, grp[inside], idx[inside])
    return first, last


def _vertex_range(prof: Profile, lo: np.ndarray, hi: np.ndarray, vlo: np.ndarray,
                  vhi: np.ndarray, minimum: int = 3):
    """Vertex index range [i0, i1) with measures in [lo, hi], widened to ``minimum``
    vertices within [vlo, vhi).

    Each widening step takes the neighbouring vertex nearer to the middle of [lo, hi], so
    the choice does not depend on the direction the line was digitised in.
    """
    i0 = find(prof.gm, lo, side="left")
    i1 = find(prof.gm, hi, side="right")
    i0, i1 = np.maximum(i0, vlo), np.minimum(i1, vhi)
    i1 = np.maximum(i1, i0)
    mid = 0.5 * (lo + hi)
    last = len(prof.gm) - 1
    for _ in range(minimum):
        short = (i1 - i0) < minimum
        can_left = short & (i0 > vlo)
        can_right = short & (i1 < vhi)
        d_left = np.where(can_left, mid - prof.gm[np.clip(i0 - 1, 0, last)], np.inf)
        d_right = np.where(can_right, prof.gm[np.clip(i1, 0, last)] - mid, np.inf)
        go_left = can_left & (d_left <= d_right)
        go_right = can_right & ~go_left
        i0 = np.where(go_left, i0 - 1, i0)
        i1 = np.where(go_right, i1 + 1, i1)
    return i0, i1


def half_level_span(prof: Profile, a: np.ndarray, b: np.ndarray, centre_m: np.ndarray,
                    radius: np.ndarray, sign: np.ndarray, scale: np.ndarray):
    """Global measures of the stretch within stations ``a..b`` around ``centre_m`` where the
    curvature (times ``sign``) stays at or above half of ``1/radius``."""
    n = len(a)
    centre = np.clip(find(prof.gs, centre_m, side="left"), a, b)
    if kn.compiled():
        left, right = kn.below_half_stops_kernel(
            prof.K, np.asarray(scale, dtype=np.int64), np.asarray(sign, dtype=float),
            np.asarray(radius, dtype=float), a.astype(np.int64), b.astype(np.int64),
            centre.astype(np.int64))
    else:
        idx, grp = expand(a, b - a + 1)
        low = prof.k(scale[grp], idx) * sign[grp] < 0.5 / radius[grp]
        left, right = stops_around(idx, grp, centre, low, n)
    big = np.iinfo(np.int64).max
    last = len(prof.gs) - 1
    hi = np.where(right == big, prof.gs[b], prof.gs[np.minimum(right, last)])
    lo = np.where(left < 0, prof.gs[a], prof.gs[np.maximum(left, 0)])
    return lo, hi


def _nearest_vertex(prof: Profile, m: np.ndarray) -> np.ndarray:
    """Index of the vertex whose global measure is nearest to ``m``."""
    j = np.clip(np.searchsorted(prof.gm, m), 1, len(prof.gm) - 1)
    return np.where(m - prof.gm[j - 1] <= prof.gm[j] - m, j - 1, j)


def _fit(prof: Profile, i0: np.ndarray, i1: np.ndarray, refine: bool = True) -> CircleFit:
    idx, grp = expand(i0, i1 - i0)
    return fit_circles(prof.coords[idx, 0], prof.coords[idx, 1], grp, len(i0), refine=refine)


def _consensus(prof: Profile, fit: CircleFit, centre: np.ndarray, vlo, vhi, tol):
    """The run of vertices within ``tol`` of the circle around the ``centre`` vertex.

    The run may pass over one stray vertex but stops at two bad ones in a row, so the
    circular part both grows over good vertices and sheds bad ones at its ends.
    """
    n = len(centre)
    idx, grp = expand(vlo, vhi - vlo)
    d = circle_gaps(prof.coords, idx, grp, fit)
    bad = ~(d <= tol[grp])
    same_next = np.r_[grp[1:] == grp[:-1], False]
    same_prev = np.r_[False, grp[1:] == grp[:-1]]
    nxt_bad = np.r_[bad[1:], True] | ~same_next
    prv_bad = np.r_[True, bad[:-1]] | ~same_prev
    left, _ = stops_around(idx, grp, centre, bad & prv_bad, n)
    _, right = stops_around(idx, grp, centre, bad & nxt_bad, n)
    i1 = np.where(right == np.iinfo(np.int64).max, vhi, right)
    i0 = np.where(left < 0, vlo, left + 1)
    # a single bad vertex at either end of the run is not part of it
    pos_last = np.clip(i1 - 1 - vlo, 0, None)
    pos_first = np.clip(i0 - vlo, 0, None)
    starts = np.cumsum(vhi - vlo) - (vhi - vlo)
    valid = vhi > vlo
    last_bad = np.zeros(n, dtype=bool)
    first_bad = np.zeros(n, dtype=bool)
    last_bad[valid] = bad[(starts + pos_last)[valid]]
    first_bad[valid] = bad[(starts + pos_first)[valid]]
    i1 = np.where(last_bad & (i1 - 1 > centre), i1 - 1, i1)
    i0 = np.where(first_bad & (i0 < centre), i0 + 1, i0)
    return i0, i1


def _middle_three(fit: CircleFit, tol: np.ndarray, centre: np.ndarray, i0: np.ndarray,
                  i1: np.ndarray, vlo: np.ndarray, vhi: np.ndarray):
    """The vertex range, cut to the three vertices around ``centre`` where the fit's RMSE
    is beyond ``tol`` (its vertices are not on one circle)."""
    spread = (fit.rmse > tol) & (i1 - i0 > 3) & (vhi - vlo >= 3)
    c0 = np.clip(centre - 1, vlo, np.maximum(vhi - 3, vlo))
    return np.where(spread, c0, i0), np.where(spread, c0 + 3, i1)


def _station_at(prof: Profile, g: np.ndarray, side: str) -> np.ndarray:
    return find(prof.gs, g, side=side)


def _settle(prof: Profile, i0: np.ndarray, i1: np.ndarray, centre: np.ndarray,
            vlo: np.ndarray, vhi: np.ndarray, tol: np.ndarray, least: np.ndarray,
            fields: tuple):
    """Fit the seed ``[i0, i1)`` and let fit and consensus alternate until the vertex set
    settles (hyper fits). Returns the vertex range and its fit."""
    fit = _fit(prof, i0, i1, refine=False)
    # a seed whose vertices do not lie on one circle (RMSE beyond the tolerance) spans
    # more than the arc, as on sparse vertices: start from the three around its middle
    i0, i1 = _middle_three(fit, tol, centre, i0, i1, vlo, vhi)
    fit = _fit(prof, i0, i1, refine=False)
    for _ in range(4):
        g0, g1 = _consensus(prof, fit, centre, vlo, vhi, tol)
        # three vertices always lie on a circle: the consensus never shrinks below
        # the seed (or the piece's vertices where it has fewer)
        usable = (g1 - g0 >= least) & np.isfinite(fit.radius)
        g0, g1 = np.where(usable, g0, i0), np.where(usable, g1, i1)
        changed = (g0 != i0) | (g1 != i1)
        i0, i1 = g0, g1
        new = _fit(prof, i0, i1, refine=False)
        ok = np.isfinite(new.radius)
        for name in fields:
            getattr(fit, name)[ok] = getattr(new, name)[ok]
        if not changed.any():
            break
    return i0, i1, fit


#: Retry a part too weak to keep from the whole piece (:func:`_retry_weak`).
WEAK_RETRY = True
#: A part whose curvature is fewer standard deviations from zero than this is retried.
WEAK_SIGNIFICANCE = 5.0


def _significance(prof: Profile, fit: CircleFit, chain: np.ndarray) -> np.ndarray:
    """Curvature over its statistical standard deviation (residual or chain noise)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = fit.radius_sd_unit * np.maximum(fit.rmse, prof.sigma[chain])
        return np.where(np.isfinite(fit.radius) & (sd > 0), fit.radius / sd, 0.0)


def _retry_weak(prof: Profile, fit: CircleFit, i0: np.ndarray, i1: np.ndarray,
                vlo: np.ndarray, vhi: np.ndarray, tol: np.ndarray, least: np.ndarray,
                chain: np.ndarray, fields: tuple) -> None:
    """Settle parts too weak to keep again, from all the piece's vertices (in place).

    A seed whose few vertices happen to lie on a flat circle can keep the consensus on it:
    the arc's other vertices lie off that circle by more than the tolerance, and the part
    is then too uncertain to keep (on 0.5 m noise, 9 vertices of a 165 m arc of R 623 m
    gave R 977 m +- 390 m). Started from every vertex of the piece instead, the circle is
    the arc's (tangent vertices are shed afterwards). The new part replaces the old one
    where it is more significant.
    """
    weak = np.flatnonzero((_significance(prof, fit, chain) < WEAK_SIGNIFICANCE)
                          & (vhi - vlo > i1 - i0) & (vhi - vlo >= 4))
    if len(weak) == 0:
        return
    centre = (vlo[weak] + vhi[weak]) // 2
    a0, a1, afit = _settle(prof, vlo[weak], vhi[weak], centre, vlo[weak], vhi[weak],
                           tol[weak], least[weak], fields)
    a0, a1, afit = _tangent_ends(prof, afit, a0, a1, least[weak], prof.sigma[chain[weak]],
                                 fields)
    again = _fit(prof, a0, a1)
    # only a part that grew around the weak one: elsewhere in the piece a circle from all
    # its vertices is as often a transition's or a flat blend of two arcs
    better = (np.isfinite(again.radius) & (a0 <= i0[weak]) & (a1 >= i1[weak])
              & (_significance(prof, again, chain[weak])
                 > _significance(prof, fit, chain)[weak]))
    j = weak[better]
    i0[j], i1[j] = a0[better], a1[better]
    for name in fields:
        getattr(fit, name)[j] = getattr(again, name)[better]


def circular_parts(prof: Profile, pf: np.ndarray, pl: np.ndarray, level: np.ndarray, *,
                   tolerance_floor_m: float, min_length_m: float,
                   min_deflection_rad: float) -> dict[str, np.ndarray]:
    """Circular parts of the pieces ``[pf, pl]`` (station indices), found in rounds.

    ``level`` is a first estimate of each piece's curvature (1/m), used to choose the
    scale at which the piece's curvature is read (see :meth:`Profile.choose_scale`).

    Returns a dict of arrays, one entry per circular part: ``piece`` (index of the
    original piece), ``chain``, ``scale``, ``sign`` (+1 left, -1 right), ``lo``/``hi``
    (global measure of the first/last vertex of the part), ``i0``/``i1`` (vertex range),
    ``round`` and the fit (``cx``, ``cy``, ``radius``, ``radius_se``, ``radius_sd_unit``,
    ``rmse``, ``n``).
    """
    out: list[dict[str, np.ndarray]] = []
    origin = np.arange(len(pf))
    # vertex range a later-round piece's circle may grow over: back across the peel gap
    # to the circular part it was peeled from (never into it); -1 = the piece's own range
    reach_lo = np.full(len(pf), -1, dtype=np.int64)
    reach_hi = np.full(len(pf), -1, dtype=np.int64)
    # side of the circular part a piece was peeled from: +1 it lies before the piece,
    # -1 after it, 0 none (first round)
    side = np.zeros(len(pf), dtype=np.int64)
    chain = prof.chain[pf] if len(pf) else np.zeros(0, dtype=np.int64)
    scale = prof.choose_scale(level, chain)
    sign = np.sign(_piece_integral(prof, pf, pl, scale))
    fields = ("cx", "cy", "radius", "radius_se", "radius_sd_unit", "rmse", "n")
    for rnd in range(ROUNDS):
        keep = pl - pf >= 2
        pf, pl, origin, sign, scale = pf[keep], pl[keep], origin[keep], sign[keep], scale[keep]
        reach_lo, reach_hi, side = reach_lo[keep], reach_hi[keep], side[keep]
        if len(pf) == 0:
            break
        chain = prof.chain[pf]
        vlo = np.maximum(find(prof.gm, prof.gs[pf], side="left"),
                         prof.v_off[chain])
        vhi = np.minimum(find(prof.gm, prof.gs[pl], side="right"),
                         prof.v_off[chain + 1])
        # a piece may fall between two vertices: reach out to the chain's vertices
        short = vhi - vlo < 3
        vlo = np.where(short, np.maximum(vlo - 2, prof.v_off[chain]), vlo)
        vhi = np.where(short, np.minimum(vhi + 2, prof.v_off[chain + 1]), vhi)
        vlo = np.where(reach_lo >= 0, np.minimum(vlo, reach_lo), vlo)
        vhi = np.where(reach_hi >= 0, np.maximum(vhi, reach_hi), vhi)
        cf, cl = _core(prof, pf, pl, scale)
        i0, i1 = _vertex_range(prof, prof.gs[cf], prof.gs[cl], vlo, vhi, minimum=SEED_VERTICES)
        centre_m = 0.5 * (prof.gs[cf] + prof.gs[cl])
        centre = np.clip(_nearest_vertex(prof, centre_m), i0, np.maximum(i1 - 1, i0))
        tol = consensus_tolerance(prof.sigma[chain], tolerance_floor_m)
        least = np.maximum(np.minimum(CONSENSUS_MIN_VERTICES, vhi - vlo), 3)
        seed0, seed1 = i0, i1
        i0, i1, fit = _settle(prof, i0, i1, centre, vlo, vhi, tol, least, fields)
        # a hand-drawn arc wanders further from its circle than its vertex noise: where the
        # consensus could not grow beyond the few vertices it started from although the
        # piece has more, and its circle is far flatter than the piece bends on average,
        # try once more from the seed with twice the tolerance
        stuck = np.flatnonzero((i1 - i0 < least) & (vhi - vlo > least))
        mean_k = np.abs(_piece_integral(prof, pf[stuck], pl[stuck], scale[stuck])) / np.maximum(
            prof.s[pl[stuck]] - prof.s[pf[stuck]], 1e-9)
        stuck = stuck[~(fit.radius[stuck] * mean_k <= STUCK_FLATNESS)]
        if len(stuck):
            wide = 2.0 * tol[stuck]
            a0, a1, afit = _settle(prof, seed0[stuck], seed1[stuck], centre[stuck],
                                   vlo[stuck], vhi[stuck], wide, least[stuck], fields)
            grew = (a1 - a0 >= least[stuck]) & np.isfinite(afit.radius)
            j = stuck[grew]
            i0[j], i1[j], tol[j] = a0[grew], a1[grew], wide[grew]
            for name in fields:
                getattr(fit, name)[j] = getattr(afit, name)[grew]
        i0, i1, fit = _tangent_ends(prof, fit, i0, i1, least, prof.sigma[chain], fields)
        # where the consensus kept a seed that misses its circle, the three vertices around
        # the middle are nearer the arc than a circle forced through transition vertices
        i0, i1 = _middle_three(fit, tol, centre, i0, i1, vlo, vhi)
        final = _fit(prof, i0, i1)  # geometric refinement once the vertex set is settled
        ok = np.isfinite(final.radius)
        for name in fields:
            getattr(fit, name)[ok] = getattr(final, name)[ok]
        if WEAK_RETRY:
            _retry_weak(prof, fit, i0, i1, vlo, vhi, tol, least, chain, fields)
        lo = prof.gm[i0]
        hi = prof.gm[np.maximum(i1 - 1, i0)]
        accept = np.isfinite(fit.radius) & (i1 - i0 >= 3)
        # the piece's first level is read off noisy curvature: once the circle is known,
        # read the part at the finest scale its own curvature allows
        scale = np.where(accept, prof.choose_scale(1.0 / np.where(accept, fit.radius, 1.0),
                                                   chain), scale)
        if rnd > 0:
            # a second arc must fill most of the stretch where the curvature is at least
            # half of its own, and be flat: a stretch of a transition fits a circle only
            # over a short part of the rising curvature
            span_lo, span_hi = half_level_span(prof, pf, pl, 0.5 * (lo + hi), fit.radius,
                                               sign, scale)
            cover = (hi - lo) >= PIECE_COVER * (span_hi - span_lo)
            accept &= cover & _is_plateau(prof, lo, hi, sign, scale, fit.radius)
            # a circle grown from a seed wider than what is left of a second arc runs on
            # over the transition beyond it: try the arc right next to the part it was
            # peeled from instead
            retry = ~accept & (side != 0)
            if retry.any():
                near = np.where(side > 0, reach_lo, reach_hi)
                r_ok, r0, r1 = _near_arc(prof, np.flatnonzero(retry), side, near, vlo, vhi,
                                         tol, sign, pf, pl, min_length_m, min_deflection_rad)
                _adopt(prof, fit, i0, i1, scale, accept, chain, r_ok, r0, r1, None, fields)
            # a wide seed read at a flat piece's coarse scale can straddle a short sharp
            # arc and the tangent beside it: try the sharpest point read finely instead
            retry = np.flatnonzero(~accept & (side != 0)) if PEAK_RETRY else retry[:0]
            if len(retry):
                p_ok, p0, p1, p_scale, p_fit = _peak_arc(prof, retry, pf, pl, vlo, vhi, tol,
                                                         sign, scale, least, fields)
                _adopt(prof, fit, i0, i1, scale, accept, chain, p_ok, p0, p1, p_scale, fields,
                       p_fit)
            lo, hi = prof.gm[i0], prof.gm[np.maximum(i1 - 1, i0)]
        out.append({"piece": origin[accept], "chain": chain[accept], "scale": scale[accept],
                    "sign": sign[accept],
                    "lo": lo[accept], "hi": hi[accept], "i0": i0[accept], "i1": i1[accept],
                    "round": np.full(accept.sum(), rnd),
                    **{k: getattr(fit, k)[accept] for k in fields}})
        # peel: the rest of each piece beyond the curvature window on either side
        gap = PEEL_GAP * prof.half_m[np.minimum(scale, PEEL_MAX_SCALE), chain]
        left_end = _station_at(prof, lo - gap, "right") - 1
        right_start = _station_at(prof, hi + gap, "left")
        found = np.ones(len(accept), dtype=bool)
        new_pf = np.concatenate([pf[found], right_start[found]])
        new_pl = np.concatenate([left_end[found], pl[found]])
        new_origin = np.concatenate([origin[found], origin[found]])
        new_reach_lo = np.concatenate([np.where(accept, vlo, reach_lo)[found],
                                       np.where(accept, i1, reach_lo)[found]])
        new_reach_hi = np.concatenate([np.where(accept, i0, reach_hi)[found],
                                       np.where(accept, vhi, reach_hi)[found]])
        new_sign = np.concatenate([sign[found], sign[found]])
        new_side = np.concatenate([np.where(accept, -1, side), np.where(accept, 1, side)])
        last = len(prof.s) - 1
        valid = (new_pl > new_pf) & (prof.chain[np.clip(new_pf, 0, last)] ==
                                     prof.chain[np.clip(new_pl, 0, last)])
        new_pf, new_pl = new_pf[valid], new_pl[valid]
        new_origin, new_sign = new_origin[valid], new_sign[valid]
        new_reach_lo, new_reach_hi = new_reach_lo[valid], new_reach_hi[valid]
        new_side = new_side[valid]
        new_chain = prof.chain[new_pf]
        new_scale = prof.choose_scale(_piece_level(prof, new_pf, new_pl), new_chain)
        length = prof.s[new_pl] - prof.s[new_pf]
        turn = _piece_integral(prof, new_pf, new_pl, new_scale)
        worth = (length >= max(min_length_m, 1e-9)) & (turn * new_sign >= min_deflection_rad)
        pf, pl, origin = new_pf[worth], new_pl[worth], new_origin[worth]
        reach_lo, reach_hi = new_reach_lo[worth], new_reach_hi[worth]
        sign, scale, side = new_sign[worth], new_scale[worth], new_side[worth]
    if not out:
        return {k: np.zeros(0) for k in ("piece", "chain", "scale", "sign", "lo", "hi", "i0",
                                           "i1", "round") + fields}
    parts = {k: np.concatenate([o[k] for o in out]) for k in out[0]}
    parts = split_compound(prof.coords, prof.gm, prof.sigma,
                           merge_fragments(prof, parts, tolerance_floor_m))
    if TRIM_TRANSITIONS:
        sig = np.maximum(prof.sigma[parts["chain"].astype(np.int64)],
                         tolerance_floor_m / CONSENSUS_SIGMAS)
        parts = trim_transitions(prof.coords, parts, sig, fields)
        parts["lo"] = prof.gm[parts["i0"].astype(np.int64)]
        parts["hi"] = prof.gm[np.maximum(parts["i1"].astype(np.int64) - 1,
                                         parts["i0"].astype(np.int64))]
    # each part is read at the scale its own radius allows: a merged arc is flatter than its
    # fragments, each arc of a split compound curve differs from the part it came from
    ok = np.isfinite(parts["radius"]) & (parts["radius"] > 0)
    parts["scale"] = np.where(ok, prof.choose_scale(1.0 / np.where(ok, parts["radius"], 1.0),
                                                    parts["chain"].astype(np.int64)),
                              parts["scale"])
    return parts


#: Most vertices at each end of a circular part tested as lying on the tangent instead.
TANGENT_END_VERTICES = 12
#: A tangent end is kept off the circle when it lowers the sum of squared distances by more
#: than this many noise variances.
TANGENT_END_GAIN = 1.0
TANGENT_END_ROUNDS = 4


def _tangent_ends(prof: Profile, fit: CircleFit, i0: np.ndarray, i1: np.ndarray,
                  least: np.ndarray, sigma: np.ndarray, fields: tuple):
    """Shed the vertices at each end of a circular part that lie on a tangent to its circle
    rather than on the circle.

    The consensus tolerance lets in tangent (and transition) vertices up to about
    ``sqrt(2 R tol)`` beyond the arc's end; they lie outside the circle and make it too
    flat. For the first ``b`` vertices at an end (b = 1 .. TANGENT_END_VERTICES, at most a
    third of the part), the line touching the circle between vertex ``b-1`` and ``b`` is
    tried: the ``b`` that lowers the sum of squared distances the most is taken where it
    lowers it by more than TANGENT_END_GAIN noise variances.
    """
    i0, i1 = i0.copy(), i1.copy()
    floor = np.maximum(least, 4)
    # a part that did not move keeps its circle, so a later round would not move it either
    again = np.ones(len(i0), dtype=bool)
    for _ in range(TANGENT_END_ROUNDS):
        n = i1 - i0
        k = np.minimum(n // 3, TANGENT_END_VERTICES)
        active = np.flatnonzero(again & np.isfinite(fit.radius) & (sigma > 0) & (k >= 1)
                                & (n - 1 > floor))
        if len(active) == 0:
            break
        moved = np.zeros(len(fit.radius), dtype=bool)
        for head in (True, False):
            a = active
            end = np.where(head, i0[a], i1[a] - 1)
            best_b, best_gain = _tangent_end_gain(prof.coords, end, 1 if head else -1, k[a],
                                                  fit.cx[a], fit.cy[a], fit.radius[a],
                                                  sigma[a])
            go = best_gain > TANGENT_END_GAIN
            best_b = np.minimum(best_b, (i1[a] - i0[a]) - floor[a] - 1)
            go &= best_b > 0
            if head:
                i0[a[go]] += best_b[go]
            else:
                i1[a[go]] -= best_b[go]
            moved[a[go]] = True
        j = np.flatnonzero(moved)
        if len(j) == 0:
            break
        new = _fit(prof, i0[j], i1[j], refine=False)
        ok = np.isfinite(new.radius)
        for name in fields:
            getattr(fit, name)[j[ok]] = getattr(new, name)[ok]
        again = moved
    return i0, i1, fit


def _tangent_end_gain(coords: np.ndarray, end: np.ndarray, step: int, k: np.ndarray,
                      cx: np.ndarray, cy: np.ndarray, r: np.ndarray, sigma: np.ndarray):
    """For each part, the number ``b`` (1..k) of vertices from ``end`` (walking ``step``)
    whose move from the circle to the tangent line at vertex ``b`` lowers the sum of squared
    distances most, and that drop in noise variances (ties: the larger ``b``)."""
    if kn.compiled():
        return kn.tangent_end_kernel(np.ascontiguousarray(coords, dtype=float),
                                     end.astype(np.int64), int(step), k.astype(np.int64),
                                     cx, cy, r, sigma)
    n = len(end)
    # one group per (part, b): the vertices 0 .. b-1 from the end
    b_part, b_grp = expand(np.zeros(n, dtype=np.int64), k)
    b = b_part + 1
    v_off, v_grp = expand(np.zeros(len(b), dtype=np.int64), b)
    part = b_grp[v_grp]
    e = end[part]
    vi = e + step * v_off
    # tangent point: the circle point halfway between vertex b-1 and b from the end
    bb = b[v_grp]
    pa = coords[e + step * (bb - 1)]
    pb = coords[e + step * bb]
    ux = 0.5 * (pa[:, 0] + pb[:, 0]) - cx[part]
    uy = 0.5 * (pa[:, 1] + pb[:, 1]) - cy[part]
    norm = np.hypot(ux, uy)
    ux, uy = ux / norm, uy / norm
    px, py = coords[vi, 0] - cx[part], coords[vi, 1] - cy[part]
    d_line = px * ux + py * uy - r[part]
    d_circ = np.hypot(px, py) - r[part]
    gain = np.bincount(v_grp, d_circ ** 2 - d_line ** 2, len(b)) / sigma[b_grp] ** 2
    best_gain = np.full(n, -np.inf)
    np.maximum.at(best_gain, b_grp, gain)
    is_best = gain >= best_gain[b_grp]
    best_b = np.zeros(n, dtype=np.int64)
    np.maximum.at(best_b, b_grp[is_best], b[is_best])
    return best_b, best_gain


#: Most vertices the retry next to a peeled-from part tries (it shrinks from there to four).
NEAR_ARC_VERTICES = 8


def _take_fit(fit: CircleFit, rows: np.ndarray) -> CircleFit:
    """The fits ``rows`` (indices or a mask) of ``fit``."""
    return CircleFit(**{f: getattr(fit, f)[rows] for f in CircleFit.__dataclass_fields__})


def _near_arc(prof: Profile, which: np.ndarray, side: np.ndarray, near: np.ndarray,
              vlo: np.ndarray, vhi: np.ndarray, tol: np.ndarray, sign: np.ndarray,
              pf: np.ndarray, pl: np.ndarray, min_length_m: float, min_deflection_rad: float):
    """The longest run of vertices next to the part a piece was peeled from that lies on
    one circle within ``tol`` and reads as a plateau, for the pieces ``which``.

    Returns the pieces that found one and their vertex ranges [i0, i1).
    """
    found = np.zeros(len(which), dtype=bool)
    out0 = np.zeros(len(which), dtype=np.int64)
    out1 = np.zeros(len(which), dtype=np.int64)
    w_side, w_near = side[which], near[which]
    room = np.where(w_side > 0, vhi[which] - w_near, w_near - vlo[which])

    def on_circle(todo, k):
        j = which[todo]
        i0 = np.where(w_side[todo] > 0, w_near[todo], w_near[todo] - k)
        i1 = i0 + k
        fit = _fit(prof, i0, i1, refine=False)
        idx, grp = expand(i0, i1 - i0)
        gap = np.zeros(len(todo))
        np.maximum.at(gap, grp, np.nan_to_num(circle_gaps(prof.coords, idx, grp, fit), nan=np.inf))
        return i0, i1, fit, np.isfinite(fit.radius) & (gap <= tol[j])

    # where the four vertices next to the part are not on one circle, no longer run is
    # tried (most retried pieces are transitions, which stop here)
    first = np.flatnonzero(room >= 4)
    four = on_circle(first, 4)
    room[first[~four[3]]] = 0
    for k in range(NEAR_ARC_VERTICES, 3, -1):
        todo = np.flatnonzero(~found & (room >= k))
        if len(todo) == 0:
            continue
        j = which[todo]
        if k == 4:  # already fitted above
            rows = np.searchsorted(first, todo)
            i0, i1, ok = four[0][rows], four[1][rows], four[3][rows]
            fit = _take_fit(four[2], rows)
        else:
            i0, i1, fit, ok = on_circle(todo, k)
        lo, hi = prof.gm[i0], prof.gm[i1 - 1]
        radius = np.where(np.isfinite(fit.radius), fit.radius, np.inf)
        ok &= (hi - lo >= min_length_m) & ((hi - lo) / radius >= min_deflection_rad)
        if not ok.any():
            continue
        scale = prof.choose_scale(1.0 / np.where(ok, radius, 1.0), prof.chain[pf[j]])
        ok &= _is_plateau(prof, lo, hi, sign[j], scale, np.where(ok, radius, 1.0))
        span_lo, span_hi = half_level_span(prof, pf[j], pl[j], 0.5 * (lo + hi),
                                           np.where(ok, radius, 1.0), sign[j], scale)
        ok &= (hi - lo) >= PIECE_COVER * (span_hi - span_lo)
        found[todo[ok]] = True
        out0[todo[ok]], out1[todo[ok]] = i0[ok], i1[ok]
    return which[found], out0[found], out1[found]


def _adopt(prof: Profile, fit: CircleFit, i0: np.ndarray, i1: np.ndarray,
           scale: np.ndarray, accept: np.ndarray, chain: np.ndarray, which: np.ndarray,
           r0: np.ndarray, r1: np.ndarray, new_scale: np.ndarray | None,
           fields: tuple, again: CircleFit | None = None) -> None:
    """Put a retry's vertex ranges ``[r0, r1)`` in place for the pieces ``which`` (in
    place): their fit (``again``, or fitted here), scale (the part's own radius's unless
    ``new_scale`` is given) and acceptance where the fit holds."""
    if not len(which):
        return
    i0[which], i1[which] = r0, r1
    if again is None:
        again = _fit(prof, r0, r1)
    for name in fields:
        getattr(fit, name)[which] = getattr(again, name)
    scale[which] = (prof.choose_scale(1.0 / fit.radius[which], chain[which])
                    if new_scale is None else new_scale)
    accept[which] = np.isfinite(fit.radius[which])


#: Retry a rejected later-round piece from its sharpest point (:func:`_peak_arc`).
PEAK_RETRY = True
#: Times the peak's scale is refined: the peak read finely is sharper, which allows a
#: finer scale again.
PEAK_REFINE = 3


def _peak_arc(prof: Profile, which: np.ndarray, pf: np.ndarray, pl: np.ndarray,
              vlo: np.ndarray, vhi: np.ndarray, tol: np.ndarray, sign: np.ndarray,
              scale: np.ndarray, least: np.ndarray, fields: tuple):
    """A circular part grown from the sharpest point of each piece ``which``, read at the
    finest scale the peak's own curvature allows, that passes the plateau and cover tests.

    Returns the pieces that found one, their vertex ranges [i0, i1), scales and fits.
    """
    a, b, sg = pf[which], pl[which], sign[which]
    chain = prof.chain[a]
    sc = scale[which].copy()
    idx, grp = expand(a, b - a + 1)
    peak = a.copy()
    for _ in range(PEAK_REFINE):
        k = prof.k(sc[grp], idx) * sg[grp]
        peak = idx[group_argmax(k, grp, len(which))]
        level = prof.k(sc, peak) * sg
        finer = prof.choose_scale(np.maximum(level, 1e-9), chain)
        if not (finer < sc).any():
            break
        sc = np.minimum(sc, finer)
    level = np.maximum(prof.k(sc, peak) * sg, 1e-9)
    span_lo, span_hi = half_level_span(prof, a, b, prof.gs[peak], 1.0 / level, sg, sc)
    # an arc stands on its own: the curvature falls to half its peak on both sides inside
    # the piece (a transition's rises to the piece's end, where the arc it leads to was)
    alone = (span_lo > prof.gs[a]) & (span_hi < prof.gs[b])
    i0, i1 = _vertex_range(prof, span_lo, span_hi, vlo[which], vhi[which], minimum=3)
    centre = np.clip(_nearest_vertex(prof, prof.gs[peak]), i0, np.maximum(i1 - 1, i0))
    i0, i1, fit = _settle(prof, i0, i1, centre, vlo[which], vhi[which], tol[which],
                          np.minimum(least[which], 3), fields)
    i0, i1 = _middle_three(fit, tol[which], centre, i0, i1, vlo[which], vhi[which])
    fit = _fit(prof, i0, i1)
    lo, hi = prof.gm[i0], prof.gm[np.maximum(i1 - 1, i0)]
    radius = np.where(np.isfinite(fit.radius) & (fit.radius > 0), fit.radius, np.inf)
    ok = alone & np.isfinite(radius) & (i1 - i0 >= 3)
    r = np.where(ok, radius, 1.0)
    sc = np.where(ok, prof.choose_scale(1.0 / r, chain), sc)
    s_lo, s_hi = half_level_span(prof, a, b, 0.5 * (lo + hi), r, sg, sc)
    ok &= (hi - lo) >= PIECE_COVER * (s_hi - s_lo)
    ok &= _is_plateau(prof, lo, hi, sg, sc, r)
    return which[ok], i0[ok], i1[ok], sc[ok], _take_fit(fit, ok)


def merge_fragments(prof: Profile, parts: dict[str, np.ndarray],
                    tolerance_floor_m: float) -> dict[str, np.ndarray]:
    """Join neighbouring circular parts of one run that lie on one circle.

    Noise can break one arc into pieces; two neighbours are one arc when a single circle
    through all their vertices (and those between) fits about as well as each alone.
    A compound curve's arcs do not: their joint fit is far worse.
    """
    fields = ("cx", "cy", "radius", "radius_se", "radius_sd_unit", "rmse", "n")
    for _ in range(4):
        order = np.lexsort((parts["lo"], parts["piece"]))
        parts = {k: v[order] for k, v in parts.items()}
        n = len(parts["lo"])
        if n < 2:
            return parts
        a = np.arange(n - 1)
        b = a + 1
        same = parts["piece"][a] == parts["piece"][b]
        if not same.any():
            return parts
        a, b = a[same], b[same]
        i0 = np.minimum(parts["i0"][a], parts["i0"][b]).astype(np.int64)
        i1 = np.maximum(parts["i1"][a], parts["i1"][b]).astype(np.int64)
        joint = _fit(prof, i0, i1)
        chain = parts["chain"][a].astype(np.int64)
        base = np.maximum.reduce([prof.sigma[chain], parts["rmse"][a], parts["rmse"][b],
                                  np.full(len(a), tolerance_floor_m / 2.5)])
        # ... and two parts whose radii are closer than a compound curve's arcs may be are
        # one arc too (a hand-digitised arc wanders a little more than its vertex noise)
        # (two arcs of one direction with a tangent between them are not: their joint
        # circle is far flatter than either and misses its vertices by metres)
        ra, rb = parts["radius"][a], parts["radius"][b]
        alike = ((np.maximum(ra, rb) < MIN_RADIUS_RATIO * np.minimum(ra, rb))
                 & (joint.radius < MIN_RADIUS_RATIO * np.maximum(ra, rb))
                 & (joint.rmse <= ALIKE_RMSE_SHARE * base))
        # ... and so are two parts whose radii the data cannot tell apart, where one circle
        # still fits them within a few noise sd: noise and a transition's first vertices
        # break an arc's end off as a short sharper or flatter fragment
        # (compared in curvature, whose fit error is about symmetric, unlike the radius's)
        with np.errstate(invalid="ignore", divide="ignore"):
            indistinct = (np.abs(1.0 / ra - 1.0 / rb) < FRAGMENT_SIGMAS * np.hypot(
                parts["radius_se"][a] / ra ** 2, parts["radius_se"][b] / rb ** 2))
        merge = np.isfinite(joint.radius) & (
            (joint.rmse <= 1.3 * base) | alike
            | (indistinct & (joint.rmse <= MERGE_RMSE_SHARE * base)))
        # never merge overlapping pairs in one pass: of two candidates sharing a part, take
        # the one whose joint circle fits better (a fragment between two arcs joins the one
        # it belongs to)
        # (without BEST_FIT_MERGE, equal scores: the earlier candidate)
        take = merge.copy()
        score = (np.where(merge, joint.rmse / base, np.inf) if BEST_FIT_MERGE
                 else np.zeros(len(merge)))
        shared = merge[:-1] & merge[1:] & (b[:-1] == a[1:])
        take[1:] &= ~(shared & (score[:-1] <= score[1:]))
        take[:-1] &= ~(shared & (score[1:] < score[:-1]))
        if not take.any():
            return parts
        a, b, i0, i1 = a[take], b[take], i0[take], i1[take]
        for k in fields:
            parts[k][a] = getattr(joint, k)[take]
        parts["i0"][a], parts["i1"][a] = i0, i1
        parts["lo"][a] = prof.gm[i0]
        parts["hi"][a] = prof.gm[i1 - 1]
        keep = np.ones(n, dtype=bool)
        keep[b] = False
        parts = {k: v[keep] for k, v in parts.items()}
    return parts


def cumulative_turn(prof: Profile, scale: int) -> np.ndarray:
    """Running heading change (rad) along stations at one curvature scale, chain by chain."""
    if scale in prof.turn_cache:
        return prof.turn_cache[scale]
    if kn.compiled():
        out = kn.running_turn_kernel(prof.K[scale], prof.s, prof.chain)
        prof.turn_cache[scale] = out
        return out
    step = np.r_[np.diff(prof.s), 0.0]
    step[np.r_[prof.chain[1:] != prof.chain[:-1], True]] = 0.0
    out = np.concatenate([[0.0], np.cumsum(prof.K[scale] * step)])
    prof.turn_cache[scale] = out
    return out


def _piece_integral(prof: Profile, pf: np.ndarray, pl: np.ndarray,
                    scale: np.ndarray) -> np.ndarray:
    """Signed heading change (rad) over stations pf..pl at each piece's scale."""
    out = np.zeros(len(pf))
    for j in np.unique(scale):
        m = scale == j
        csum = cumulative_turn(prof, int(j))
        out[m] = csum[pl[m]] - csum[pf[m]]
    return out


def _piece_level(prof: Profile, pf: np.ndarray, pl: np.ndarray) -> np.ndarray:
    """90th percentile of |curvature| at the finest scale within each piece."""
    return range_quantile(prof.K, np.zeros(len(pf), dtype=np.int64), pf, pl, 0.9)


def _is_plateau(prof: Profile, lo: np.ndarray, hi: np.ndarray, sign: np.ndarray,
                scale: np.ndarray, radius: np.ndarray) -> np.ndarray:
    """Whether the curvature over [lo, hi] is flat (an arc) rather than a ramp.

    Only the interior is read, a curvature window in from each end (the window blurs
    whatever lies beyond), or the middle half where the part is shorter than that.
    """
    chain = prof.chain[np.clip(_station_at(prof, lo, "left"), 0, len(prof.s) - 1)]
    inset = np.minimum(prof.half_m[scale, chain], 0.25 * (hi - lo))
    lo, hi = lo + inset, hi - inset
    f = _station_at(prof, lo, "left")
    last = np.maximum(_station_at(prof, hi, "right") - 1, f)
    idx, grp = expand(f, last - f + 1)
    n = len(lo)
    k = prof.k(scale[grp], idx) * sign[grp]
    x = prof.s[idx]
    cnt = np.bincount(grp, minlength=n).astype(float)
    sx = np.bincount(grp, x, n)
    sk = np.bincount(grp, k, n)
    sxx = np.bincount(grp, x * x, n)
    sxk = np.bincount(grp, x * k, n)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = sxx - sx * sx / cnt
        slope = np.where(var > 0, (sxk - sx * sk / cnt) / var, 0.0)
        mean = sk / cnt
        change = np.abs(slope) * (hi - lo) / np.abs(mean)
        consistent = np.abs(mean * radius - 1.0) < 0.5
        # a smaller change is a ramp too where the noise cannot explain the slope:
        # chord curvature over half window B carries noise of about sqrt(6) sigma / B^2,
        # and stations are independent about once per window
        half = prof.half_m[scale, chain]
        k_sd = np.sqrt(6.0) * prof.sigma[chain] / half ** 2
        n_eff = np.maximum((hi - lo) / half, 1.0)
        slope_se = k_sd * np.sqrt(12.0 / n_eff) / np.maximum(hi - lo, 1e-9)
        ramp = (change >= PLATEAU_CHANGE) | (
            (change >= PLATEAU_MIN_CHANGE) & (np.abs(slope) >= RAMP_SIGMAS * slope_se))
    return (mean > 0) & ~ramp & consistent
