"""Split a circular part in two where two circles explain its vertices better than one.

On noisy vertices the consensus tolerance (a few noise standard deviations) can let one
circle grow over both arcs of a compound curve: the joint fit is only a little worse than
the noise. Whether one or two circles are there is a model choice, decided per part:

1. every split position that leaves at least :data:`MIN_SUB_VERTICES` vertices on either
   side is scored at once with the algebraic (Kasa) residual of a circle on each side,
   from running sums of the vertices' moments (no loop over positions or parts);
2. the best position gets two geometric circle fits;
3. the split is kept when the two circles reduce the residual sum of squares by more
   than noise would, their radii differ by more than :data:`RADIUS_SIGMAS` standard
   errors and by at least :data:`MIN_RADIUS_RATIO`.

The test is the extra-sum-of-squares test for nested least-squares models (e.g. Draper &
Smith, *Applied Regression Analysis*, 3rd ed., 1998, section 6.1): the drop in the
residual sum of squares from 3 to 6 parameters, divided by the noise variance, is
chi-square with 3 degrees of freedom when one circle is right. The noise variance is the
chain's vertex noise (estimated from all its vertices, so known far better than from the
part alone), or the two circles' residual variance where that is larger (a wobbly
digitisation must not read as a compound curve). The search over positions makes the
test somewhat liberal, which the strict :data:`SPLIT_CONFIDENCE` offsets.
"""

from __future__ import annotations

import numpy as np

from . import _kernels as kn
from ._ragged import expand
from .circlefit import fit_circles

__all__ = ["split_compound", "MIN_SUB_VERTICES", "SPLIT_CONFIDENCE", "MIN_RADIUS_RATIO"]

#: Fewest vertices on each side of a split.
MIN_SUB_VERTICES = 4
#: Confidence of the test that two circles fit better than one.
SPLIT_CONFIDENCE = 0.999
#: Smallest ratio of the two radii that counts as a compound curve.
MIN_RADIUS_RATIO = 1.2
#: Standard errors by which the two radii must differ.
RADIUS_SIGMAS = 3.0
#: Rounds of splitting (a part may hold three arcs).
ROUNDS = 2

_FIT_FIELDS = ("cx", "cy", "radius", "radius_se", "radius_sd_unit", "rmse", "n")


def _kasa_rss(m: np.ndarray) -> np.ndarray:
    """Algebraic residual sum of squares of the Kasa fit from moment sums.

    ``m`` rows: n, su, sv, sz, suu, suv, svv, suz, svz, szz (any number of columns).
    """
    n, su, sv, sz, suu, suv, svv, suz, svz, szz = m
    a = np.stack([np.stack([suu, suv, su], -1), np.stack([suv, svv, sv], -1),
                  np.stack([su, sv, n], -1)], -2)
    b = np.stack([suz, svz, sz], -1)
    det = np.linalg.det(a)
    good = np.abs(det) > 1e-300
    out = np.full(len(n), np.inf)
    if good.any():
        x = np.linalg.solve(a[good], b[good][..., None])[..., 0]
        out[good] = szz[good] - np.einsum("ij,ij->i", b[good], x)
    return out


def _lowest_per_part(total: np.ndarray, part: np.ndarray, position: np.ndarray,
                     out: np.ndarray) -> None:
    """``out[q]`` = the ``position`` with the lowest ``total`` among those of part ``q``
    (the first such position on ties)."""
    order = np.lexsort((total, part))
    first = np.r_[True, part[order][1:] != part[order][:-1]]
    out[part[order][first]] = position[order][first]


def _best_split(coords: np.ndarray, i0: np.ndarray, i1: np.ndarray, cx: np.ndarray,
                cy: np.ndarray, radius: np.ndarray, todo: np.ndarray) -> np.ndarray:
    """Vertex index ``j`` (first vertex of the second arc) minimising the summed Kasa
    residual of ``[i0, j)`` and ``[j, i1)``, per part; -1 where ``todo`` is False.

    The compiled form scores every position with its own 3x3 solve and a bound on how far
    that can be from LAPACK's; only where the bounds leave more than one position in the
    running does it evaluate those positions as the numpy form does (same moment sums,
    same ``_kasa_rss``), so both give the same ``j``.
    """
    count = i1 - i0
    if kn.compiled():
        k, grp, pos, left, right = kn.best_split_kernel(
            np.ascontiguousarray(coords, dtype=float), i0.astype(np.int64),
            count.astype(np.int64), cx, cy, radius, todo, MIN_SUB_VERTICES)
        if len(grp):
            _lowest_per_part(_kasa_rss(left) + _kasa_rss(right), grp, pos, k)
        return np.where(k >= 0, i0 + k, -1)
    idx, grp = expand(i0, count)
    u = (coords[idx, 0] - cx[grp]) / radius[grp]
    v = (coords[idx, 1] - cy[grp]) / radius[grp]
    z = u * u + v * v
    mom = np.stack([np.ones_like(u), u, v, z, u * u, u * v, v * v, u * z, v * z, z * z])
    csum = np.concatenate([np.zeros((10, 1)), np.cumsum(mom, axis=1)], axis=1)
    start = np.cumsum(count) - count
    k = np.arange(len(idx)) - start[grp]
    ok = (k >= MIN_SUB_VERTICES) & (k <= count[grp] - MIN_SUB_VERTICES)
    p = np.flatnonzero(ok)
    g = grp[p]
    left = csum[:, p] - csum[:, start[g]]
    right = csum[:, start[g] + count[g]] - csum[:, p]
    best = np.full(len(i0), -1)
    if len(p):
        _lowest_per_part(_kasa_rss(left) + _kasa_rss(right), g, p, best)
    return np.where((best >= 0) & todo, i0 + k[np.maximum(best, 0)], -1)


def split_compound(coords: np.ndarray, gm: np.ndarray, sigma: np.ndarray,
                   parts: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Circular parts with every part that holds two arcs of clearly different radius
    replaced by the two arcs (same ``piece``, ``scale``, ``sign`` and ``round``).

    ``coords`` and ``gm`` are the vertices and their global measures, ``sigma`` the
    vertex noise per chain; ``parts`` as returned by
    :func:`curvescan.geometry.circular.circular_parts` before this step.
    """
    from scipy.special import chdtri  # chi-square quantile, without scipy.stats' import
    critical = chdtri(3.0, 1.0 - SPLIT_CONFIDENCE)

    for _ in range(ROUNDS):
        i0 = parts["i0"].astype(np.int64)
        i1 = parts["i1"].astype(np.int64)
        cand = np.flatnonzero((i1 - i0 >= 2 * MIN_SUB_VERTICES) & np.isfinite(parts["radius"])
                              & (parts["radius"] > 0))
        if len(cand) == 0:
            return parts
        a0, a1 = i0[cand], i1[cand]
        n_all = (a1 - a0).astype(float)
        rss0 = parts["rmse"][cand] ** 2 * n_all
        noise_var = sigma[parts["chain"][cand].astype(np.int64)] ** 2
        # two circles cannot lower the residual sum of squares by more than all of it:
        # where that is below the test's threshold (``drop`` below, with the smallest
        # variance) the part keeps its circle, and its split is not searched for
        with np.errstate(invalid="ignore", divide="ignore"):
            hopeful = rss0 / noise_var > critical
        j = _best_split(coords, a0, a1, parts["cx"][cand], parts["cy"][cand],
                        parts["radius"][cand], hopeful)
        has = j > 0
        cand, a0, a1, j = cand[has], a0[has], a1[has], j[has]
        n_all, rss0, noise_var = n_all[has], rss0[has], noise_var[has]
        if len(cand) == 0:
            return parts
        starts = np.r_[a0, j]
        ends = np.r_[j, a1]
        idx, grp = expand(starts, ends - starts)
        fit = fit_circles(coords[idx, 0], coords[idx, 1], grp, len(starts))
        m = len(cand)
        rss12 = fit.rmse[:m] ** 2 * fit.n[:m] + fit.rmse[m:] ** 2 * fit.n[m:]
        dof = np.maximum(n_all - 6.0, 1.0)
        variance = np.maximum(noise_var, rss12 / dof)
        with np.errstate(invalid="ignore", divide="ignore"):
            drop = (rss0 - rss12) / variance
            ratio = np.maximum(fit.radius[:m], fit.radius[m:]) / np.minimum(
                fit.radius[:m], fit.radius[m:])
            # the radii themselves must differ beyond their standard errors (a circle
            # that only shifts, as over a transition's first metres, is no compound curve)
            z = np.abs(fit.radius[:m] - fit.radius[m:]) / np.hypot(
                fit.radius_sd_unit[:m], fit.radius_sd_unit[m:]) / np.sqrt(variance)
        split = (np.isfinite(fit.radius[:m]) & np.isfinite(fit.radius[m:])
                 & (drop > critical) & (z >= RADIUS_SIGMAS)
                 & (ratio >= MIN_RADIUS_RATIO))
        if not split.any():
            return parts
        which = cand[split]
        first = {k: v.copy() for k, v in parts.items()}
        second = {k: v[which].copy() for k, v in parts.items()}
        sel = np.flatnonzero(split)
        for name in _FIT_FIELDS:
            vals = getattr(fit, name)
            first[name][which] = vals[:m][sel]
            second[name] = vals[m:][sel].astype(second[name].dtype, copy=False)
        first["i1"][which] = j[sel]
        first["hi"][which] = gm[j[sel] - 1]
        second["i0"] = j[sel].astype(second["i0"].dtype)
        second["lo"] = gm[j[sel]]
        parts = {k: np.concatenate([first[k], second[k]]) for k in parts}
    return parts
