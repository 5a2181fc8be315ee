"""Circle fits vectorised over many groups of points.

Each point carries a group label; every function fits one circle per group with
group-wise sums (``np.bincount``) and batched small linear algebra, so thousands of
curves are fitted without a Python loop per curve.

* :func:`hyper_fit`: the algebraic "hyper" fit of Al-Sharadqah & Chernov, *Error
  analysis for circle fitting algorithms*, Electron. J. Statist. 3 (2009) 886-911: the
  generalised eigenproblem ``M A = eta N A`` with the hyper constraint matrix, which has
  no essential bias, solved through the smallest non-negative root of its characteristic
  polynomial (Newton's method, as in Chernov's published implementation) so that no
  per-group eigen-decomposition is needed.
* :func:`geometric_fit`: orthogonal least squares (minimise the sum of squared distances
  to the circle) by damped Gauss-Newton from the algebraic start, with the parameter
  covariance ``sigma^2 (J^T J)^-1`` that gives the radius standard error.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _kernels as kn

__all__ = ["CircleFit", "hyper_fit", "geometric_fit", "fit_circles", "circle_gaps"]


@dataclass
class CircleFit:
    """Per-group circle parameters (arrays of length ``n_groups``)."""

    cx: np.ndarray
    cy: np.ndarray
    radius: np.ndarray
    radius_se: np.ndarray
    rmse: np.ndarray
    n: np.ndarray
    radius_sd_unit: np.ndarray  # sqrt of C_rr of (J^T J)^-1: radius SD per metre of noise


def _sums(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    return np.bincount(group, weights=values, minlength=n_groups)


def _centre(x, y, group, n_groups):
    n = np.bincount(group, minlength=n_groups).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = _sums(group, x, n_groups) / n
        my = _sums(group, y, n_groups) / n
    return n, mx, my


def _moments(x, y, group, n_groups):
    """Count, mean and the centred sums ``XX, YY, XY, XZ, YZ, ZZ`` (rows) of each group."""
    if kn.compiled():
        cnt, sx, sy, sums = kn.moment_sums_kernel(np.asarray(x, dtype=float),
                                                  np.asarray(y, dtype=float),
                                                  np.asarray(group, dtype=np.int64), n_groups)
        with np.errstate(invalid="ignore", divide="ignore"):
            return cnt, sx / cnt, sy / cnt, sums
    n, mx, my = _centre(x, y, group, n_groups)
    X = x - mx[group]
    Y = y - my[group]
    Z = X * X + Y * Y
    sums = np.stack([_sums(group, v, n_groups) for v in (X * X, Y * Y, X * Y, X * Z, Y * Z,
                                                          Z * Z)])
    return n, mx, my, sums


def hyper_fit(x: np.ndarray, y: np.ndarray, group: np.ndarray, n_groups: int):
    """Algebraic hyper fit per group.

    Parameters
    ----------
    x, y : ndarray
        Point coordinates (m).
    group : ndarray of int
        Group label of each point, ``0 <= group < n_groups``.
    n_groups : int
        Number of groups.

    Returns
    -------
    cx, cy, radius : ndarray
        NaN for groups with fewer than three points or collinear points.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        n, mx, my, sums = _moments(x, y, group, n_groups)
        Mxx, Myy, Mxy, Mxz, Myz, Mzz = sums / n
        Mz = Mxx + Myy
        cov = Mxx * Myy - Mxy * Mxy
        var_z = Mzz - Mz * Mz
        # det(M - eta N) for the hyper constraint N: 4 eta^4 + A2 eta^2 + A1 eta + A0
        A2 = 4.0 * cov - 3.0 * Mz * Mz - Mzz
        A1 = var_z * Mz + 4.0 * cov * Mz - Mxz * Mxz - Myz * Myz
        A0 = Mxz * (Mxz * Myy - Myz * Mxy) + Myz * (Myz * Mxx - Mxz * Mxy) - var_z * cov
        # its smallest non-negative root, by Newton's method from zero
        eta = np.zeros(n_groups)
        val = A0.copy()
        live = np.isfinite(A0) & (n >= 3)
        for _ in range(40):
            slope = A1 + eta * (2.0 * A2 + 16.0 * eta * eta)
            step_to = eta - val / slope
            new_val = A0 + step_to * (A1 + step_to * (A2 + 4.0 * step_to * step_to))
            better = live & np.isfinite(step_to) & (np.abs(new_val) < np.abs(val))
            eta = np.where(better, step_to, eta)
            val = np.where(better, new_val, val)
            live = better
            if not live.any():
                break
        det = eta * eta - eta * Mz + cov
        ccx = (Mxz * (Myy - eta) - Myz * Mxy) / det / 2.0
        ccy = (Myz * (Mxx - eta) - Mxz * Mxy) / det / 2.0
        rr = np.sqrt(ccx * ccx + ccy * ccy + Mz - 2.0 * eta)
    ok = (n >= 3) & np.isfinite(rr)
    cx = np.where(ok, ccx + mx, np.nan)
    cy = np.where(ok, ccy + my, np.nan)
    r = np.where(ok, rr, np.nan)
    return cx, cy, r


def geometric_fit(x, y, group, n_groups, cx0, cy0, r0, iterations: int = 20) -> CircleFit:
    """Orthogonal least-squares circle per group, started from ``(cx0, cy0, r0)``.

    Returns the fitted circle, the RMS orthogonal distance of the points, and the
    standard error of the radius from the covariance ``s^2 (J^T J)^-1`` with
    ``s^2 = RSS / (n - 3)``.
    """
    use = kn.compiled()
    if use:
        group = np.asarray(group, dtype=np.int64)
        n, mx, my, _ = _moments(x, y, group, n_groups)
    else:
        n, mx, my = _centre(x, y, group, n_groups)
    X = x - mx[group]
    Y = y - my[group]
    a = cx0 - mx
    b = cy0 - my
    r = r0.copy()
    live = np.isfinite(a) & np.isfinite(b) & np.isfinite(r) & (n >= 3)
    a, b, r = np.where(live, a, 0.0), np.where(live, b, 0.0), np.where(live, r, 1.0)
    lam = np.full(n_groups, 1e-6)
    everyone = np.ones(n_groups, dtype=bool)
    if use:
        # one compiled pass gives the cost and the normal equations at the same circles:
        # at the start, then at each trial step (kept where the step is taken), so
        # ``JTJ_at`` always holds them at the current circles
        JTJ_at, JTd_at, cost = kn.normal_kernel(X, Y, group, everyone, a, b, r, n_groups)
    else:
        cost = _cost(X, Y, group, n_groups, a, b, r, everyone)
    active = live.copy()
    eye = np.eye(3)
    # the compiled passes skip the points of groups that have stopped; they walk a subset
    # holding every active group's points (in index order), cut whenever half have stopped
    gX, gY, gg, walked = X, Y, group, n_groups
    for _ in range(iterations):
        # live groups have points, so no active group means no points to fit
        act = np.flatnonzero(active)
        if act.size == 0:
            break
        if use:
            if act.size < walked // 2:
                keep = active[gg]
                gX, gY, gg, walked = gX[keep], gY[keep], gg[keep], act.size
            JTJ, JTd = JTJ_at, JTd_at
        else:
            pts = np.flatnonzero(active[group])
            gX, gY, gg = X[pts], Y[pts], group[pts]
            JTJ, JTd = _normal(gX, gY, gg, n_groups, a, b, r)
        # each group's 3x3 system is solved on its own: solving only the active ones
        # gives them the same steps; the bookkeeping too touches only the active groups
        JTJ, JTd = JTJ[act], JTd[act]
        scale = np.trace(JTJ, axis1=1, axis2=2)[:, None, None] + 1e-12
        with np.errstate(invalid="ignore", over="ignore"):
            try:
                step = np.linalg.solve(JTJ + lam[act, None, None] * eye * scale,
                                       -JTd[:, :, None])[:, :, 0]
            except np.linalg.LinAlgError:
                step = np.zeros((act.size, 3))
        step = np.where(np.isfinite(step), step, 0.0)
        na, nb, nr = a.copy(), b.copy(), r.copy()  # trial circles (used where active)
        na[act] += step[:, 0]
        nb[act] += step[:, 1]
        nr[act] += step[:, 2]
        if use:
            JTJ_new, JTd_new, trial = kn.normal_kernel(gX, gY, gg, active, na, nb, nr, n_groups)
            new_cost = trial[act]
        else:
            new_cost = _cost(gX, gY, gg, n_groups, na, nb, nr, active)[act]
        better = new_cost <= cost[act]
        took = act[better]
        if use:
            JTJ_at[took], JTd_at[took] = JTJ_new[took], JTd_new[took]
        a[took], b[took], r[took] = na[took], nb[took], nr[took]
        cost[took] = new_cost[better]
        lam_act = np.where(better, lam[act] * 0.3, lam[act] * 10.0)
        lam[act] = lam_act
        # a group is done when its step is negligible or damping has given up
        big = np.maximum(np.maximum(np.abs(step[:, 0]), np.abs(step[:, 1])), np.abs(step[:, 2]))
        tiny = big <= 1e-10 * (np.abs(r[act]) + 1.0)
        active[act] = ~(tiny | (lam_act > 1e6))
    if use:
        JTJ = JTJ_at
    else:
        JTJ, _ = _normal(X, Y, group, n_groups, a, b, r)
    dof = n - 3
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(dof > 0, cost / np.maximum(dof, 1), np.nan)
        c22 = np.full(n_groups, np.nan)  # groups that were never fitted stay NaN
        if live.any():
            c22[live] = _inverse_22(JTJ[live])
        unit = np.sqrt(np.maximum(c22, 0.0))
        se = unit * np.sqrt(s2)
        rmse = np.sqrt(cost / n)
    bad = ~live
    cx, cy = a + mx, b + my
    for arr in (cx, cy, r, se, rmse, unit):
        arr[bad] = np.nan
    return CircleFit(cx=cx, cy=cy, radius=np.abs(r), radius_se=se, rmse=rmse, n=n.astype(int),
                     radius_sd_unit=unit)


def circle_covariance(x: np.ndarray, y: np.ndarray, group: np.ndarray, n_groups: int,
                      cx: np.ndarray, cy: np.ndarray, r: np.ndarray,
                      sigma: np.ndarray) -> np.ndarray:
    """Covariance ``sigma^2 (J^T J)^-1`` of ``(cx, cy, r)`` of the circles of each group
    (shape ``(n_groups, 3, 3)``), for points with noise ``sigma`` per group; infinite
    where a group has fewer than three points or a singular geometry."""
    jtj, _ = _normal(x, y, group, n_groups, cx, cy, r)
    n = np.bincount(group, minlength=n_groups)
    cov = np.full((n_groups, 3, 3), np.inf)
    det = np.linalg.det(jtj)
    ok = (n >= 3) & np.isfinite(det) & (np.abs(det) > 1e-12)
    if ok.any():
        cov[ok] = np.linalg.inv(jtj[ok]) * (sigma[ok] ** 2)[:, None, None]
    return cov


def _inverse_22(M: np.ndarray) -> np.ndarray:
    """Element (2, 2) of the inverse of each symmetric 3x3 matrix ``M`` (cofactor over
    determinant; the pseudo-inverse where the matrix is near singular)."""
    cof = M[:, 0, 0] * M[:, 1, 1] - M[:, 0, 1] * M[:, 1, 0]
    det = (M[:, 0, 0] * (M[:, 1, 1] * M[:, 2, 2] - M[:, 1, 2] * M[:, 2, 1])
           - M[:, 0, 1] * (M[:, 1, 0] * M[:, 2, 2] - M[:, 1, 2] * M[:, 2, 0])
           + M[:, 0, 2] * (M[:, 1, 0] * M[:, 2, 1] - M[:, 1, 1] * M[:, 2, 0]))
    norm = np.abs(M).reshape(len(M), -1).max(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        out = cof / det
    weak = ~(np.abs(det) > 1e-9 * norm ** 3) | ~np.isfinite(out)
    if weak.any():
        out[weak] = np.linalg.pinv(M[weak])[:, 2, 2]
    return out


def _dist(X, Y, group, a, b):
    return np.hypot(X - a[group], Y - b[group])


def _cost(X, Y, group, n_groups, a, b, r, active):
    """Sum of squared distances from the circle, per group (where ``active``)."""
    if kn.compiled():
        return kn.cost_kernel(X, Y, np.asarray(group, dtype=np.int64), active, a, b, r,
                              n_groups)
    d = _dist(X, Y, group, a, b) - r[group]
    return _sums(group, d * d, n_groups)


def _normal(X, Y, group, n_groups, a, b, r):
    rho = _dist(X, Y, group, a, b)
    rho = np.where(rho > 0, rho, 1e-12)
    ju = -(X - a[group]) / rho
    jv = -(Y - b[group]) / rho
    jw = -np.ones_like(rho)
    d = rho - r[group]
    J = (ju, jv, jw)
    JTJ = np.empty((n_groups, 3, 3))
    for i in range(3):
        for j in range(i, 3):
            JTJ[:, i, j] = JTJ[:, j, i] = _sums(group, J[i] * J[j], n_groups)
    JTd = np.stack([_sums(group, J[i] * d, n_groups) for i in range(3)], axis=1)
    return JTJ, JTd


def fit_circles(x: np.ndarray, y: np.ndarray, group: np.ndarray, n_groups: int,
                refine: bool = True) -> CircleFit:
    """Hyper fit followed by geometric refinement, per group.

    With ``refine=False`` only the (non-iterative) hyper fit is made, with its RMSE; the
    standard errors are then NaN. It is close enough to decide which vertices lie on the
    circle, and several times cheaper.
    """
    cx, cy, r = hyper_fit(x, y, group, n_groups)
    if refine:
        return geometric_fit(x, y, group, n_groups, cx, cy, r)
    n = np.bincount(group, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss = _cost(x, y, group, n_groups, cx, cy, r, np.ones(n_groups, dtype=bool))
        rmse = np.sqrt(rss / n)
    nan = np.full(n_groups, np.nan)
    return CircleFit(cx=cx, cy=cy, radius=r, radius_se=nan, rmse=rmse, n=n.astype(int),
                     radius_sd_unit=nan.copy())


def circle_gaps(coords: np.ndarray, idx: np.ndarray, grp: np.ndarray, fit: CircleFit) -> np.ndarray:
    """Distance (m) of the vertices ``coords[idx]`` from the circle of their group ``grp``."""
    if kn.compiled():
        return kn.circle_gap_kernel(np.ascontiguousarray(coords, dtype=float),
                                    np.asarray(idx, dtype=np.int64),
                                    np.asarray(grp, dtype=np.int64), fit.cx, fit.cy, fit.radius)
    return np.abs(np.hypot(coords[idx, 0] - fit.cx[grp], coords[idx, 1] - fit.cy[grp])
                  - fit.radius[grp])
