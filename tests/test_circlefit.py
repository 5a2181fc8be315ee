"""Circle fits against scipy.optimize.least_squares and published curve-element values."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares

from curvescan.geometry.circlefit import circle_covariance, fit_circles, hyper_fit


def test_four_points_unit_circle():
    """(1,0), (-1,0), (0,1), (0,-1) give centre (0,0) and R = 1 (REFERENCES section 8,
    the example of the circle-fit package README, derived)."""
    x = np.array([1.0, -1.0, 0.0, 0.0])
    y = np.array([0.0, 0.0, 1.0, -1.0])
    g = np.zeros(4, dtype=int)
    for fit in (hyper_fit(x, y, g, 1), fit_circles(x, y, g, 1)):
        cx, cy, r = (fit[0], fit[1], fit[2]) if isinstance(fit, tuple) else (fit.cx, fit.cy, fit.radius)
        np.testing.assert_allclose([cx[0], cy[0], r[0]], [0.0, 0.0, 1.0], atol=1e-12)


def test_geometric_fit_matches_scipy_least_squares():
    """The vectorised geometric fit equals scipy's orthogonal least squares per group."""
    rng = np.random.default_rng(3)
    xs, ys, gs, truth = [], [], [], []
    for k in range(40):
        r = float(np.exp(rng.uniform(np.log(30), np.log(1500))))
        span = np.radians(rng.uniform(8, 120))
        n = int(rng.integers(4, 40))
        t = np.sort(rng.uniform(0, span, n))
        cx, cy = rng.uniform(-1e4, 1e4, 2)
        xs.append(cx + r * np.cos(t) + rng.normal(0, 0.3, n))
        ys.append(cy + r * np.sin(t) + rng.normal(0, 0.3, n))
        gs.append(np.full(n, k))
        truth.append((cx, cy, r))
    x, y, g = np.concatenate(xs), np.concatenate(ys), np.concatenate(gs)
    fit = fit_circles(x, y, g, 40)
    for k in range(40):
        m = g == k
        ref = least_squares(lambda p: np.hypot(x[m] - p[0], y[m] - p[1]) - p[2],
                            [fit.cx[k] + 1, fit.cy[k] - 1, fit.radius[k] * 1.01],
                            xtol=1e-14, ftol=1e-14, gtol=1e-14)
        cost_ours = np.sum((np.hypot(x[m] - fit.cx[k], y[m] - fit.cy[k]) - fit.radius[k]) ** 2)
        assert cost_ours <= 2 * ref.cost * (1 + 1e-6) + 1e-9
        # equal optimum: where the valley is flat (short noisy arcs) the two solvers may stop
        # at slightly different points, so compare within a hundredth of the standard error
        assert abs(fit.radius[k] - ref.x[2]) <= max(1e-5 * ref.x[2], 0.01 * fit.radius_se[k])


def test_published_curve_elements_and_middle_ordinate():
    """Worked example, REFERENCES section 8 (curve-element formulas, highway-curve course
    pages): R = 500 ft, delta = 55 deg gives L = 479.965, LC = 461.749, M = 56.494 ft, and
    the chord/middle-ordinate rule R = C^2/(8M) + M/2 (US Army field manual tape method)."""
    C, M = 461.749, 56.494
    assert C ** 2 / (8 * M) + M / 2 == pytest.approx(500.0, abs=0.01)
    # points on that arc: the fit recovers R, and the arc reproduces L, LC and M
    t = np.linspace(0, np.radians(55.0), 12)
    x, y = 500 * np.cos(t), 500 * np.sin(t)
    fit = fit_circles(x, y, np.zeros(12, dtype=int), 1)
    assert fit.radius[0] == pytest.approx(500.0, rel=1e-9)
    chord = np.hypot(x[-1] - x[0], y[-1] - y[0])
    assert chord == pytest.approx(461.749, abs=0.001)
    mid = fit.radius[0] - np.hypot((x[0] + x[-1]) / 2 - fit.cx[0], (y[0] + y[-1]) / 2 - fit.cy[0])
    assert mid == pytest.approx(56.494, abs=0.001)
    assert fit.radius[0] * np.radians(55.0) == pytest.approx(479.965, abs=0.001)


def test_too_few_or_collinear_points_give_nan():
    x = np.array([0.0, 1.0, 0.0, 1.0, 2.0])
    y = np.array([0.0, 0.0, 0.0, 0.0, 0.0])
    g = np.array([0, 0, 1, 1, 1])
    fit = fit_circles(x, y, g, 2)
    assert np.isnan(fit.radius[0])  # two points
    assert not np.isfinite(fit.radius[1]) or fit.radius[1] > 1e6  # collinear


@settings(max_examples=40, deadline=None)
@given(angle=st.floats(0, 2 * np.pi), dx=st.floats(-1e5, 1e5), dy=st.floats(-1e5, 1e5),
       scale=st.floats(0.2, 5.0))
def test_radius_invariant_under_rigid_motion_and_scaling(angle, dx, dy, scale):
    rng = np.random.default_rng(0)
    t = np.linspace(0.1, 0.9, 15)
    x = 250 * np.cos(t) + rng.normal(0, 0.2, 15)
    y = 250 * np.sin(t) + rng.normal(0, 0.2, 15)
    g = np.zeros(15, dtype=int)
    base = fit_circles(x, y, g, 1).radius[0]
    c, s = np.cos(angle), np.sin(angle)
    xr, yr = c * x - s * y + dx, s * x + c * y + dy
    moved = fit_circles(xr[::-1], yr[::-1], g, 1).radius[0]
    assert moved == pytest.approx(base, rel=1e-6)
    scaled = fit_circles(x * scale, y * scale, g, 1).radius[0]
    assert scaled == pytest.approx(base * scale, rel=1e-6)


def test_hyper_fit_solves_the_generalised_eigenproblem():
    """The Newton root of the characteristic polynomial gives the same circle as solving
    M A = eta N A directly with scipy.linalg.eig (hyper constraint matrix of
    Al-Sharadqah & Chernov 2009, for centred data)."""
    from scipy.linalg import eig

    rng = np.random.default_rng(11)
    for _ in range(25):
        r = float(np.exp(rng.uniform(np.log(20), np.log(2000))))
        n = int(rng.integers(4, 30))
        t = np.sort(rng.uniform(0, np.radians(rng.uniform(5, 150)), n))
        x = 300 + r * np.cos(t) + rng.normal(0, 0.3, n)
        y = -200 + r * np.sin(t) + rng.normal(0, 0.3, n)
        X, Y = x - x.mean(), y - y.mean()
        Z = X * X + Y * Y
        D = np.column_stack([Z, X, Y, np.ones(n)])
        M = D.T @ D / n
        mz = Z.mean()
        N = np.array([[8 * mz, 0, 0, 2], [0, 1, 0, 0], [0, 0, 1, 0], [2, 0, 0, 0]])
        vals, vecs = eig(M, N)
        vals = np.real(vals)
        k = np.argmin(np.where(vals > -1e-12 * np.abs(vals).max(), vals, np.inf))
        A = np.real(vecs[:, k])
        cx, cy = -A[1] / (2 * A[0]) + x.mean(), -A[2] / (2 * A[0]) + y.mean()
        ours = hyper_fit(x, y, np.zeros(n, dtype=int), 1)
        np.testing.assert_allclose([ours[0][0], ours[1][0]], [cx, cy], rtol=0, atol=1e-6 * r)


def test_circle_covariance_matches_scipy_least_squares_jacobian():
    """sigma^2 (J^T J)^-1 at the fitted circle, against the Jacobian that
    scipy.optimize.least_squares reports for the same orthogonal-distance problem."""
    rng = np.random.default_rng(5)
    t = np.linspace(0.2, 1.4, 15)
    x = 300.0 * np.cos(t) + rng.normal(0, 0.2, t.size)
    y = 300.0 * np.sin(t) + rng.normal(0, 0.2, t.size)
    sol = least_squares(lambda q: np.hypot(x - q[0], y - q[1]) - q[2], [10.0, -5.0, 290.0])
    cx, cy, r = sol.x
    cov = circle_covariance(x, y, np.zeros(t.size, dtype=np.int64), 1, np.array([cx]),
                            np.array([cy]), np.array([r]), np.array([0.2]))
    want = 0.2 ** 2 * np.linalg.inv(sol.jac.T @ sol.jac)
    np.testing.assert_allclose(cov[0], want, rtol=1e-4)
    # fewer than three points: no covariance
    two = circle_covariance(x[:2], y[:2], np.zeros(2, dtype=np.int64), 1, np.array([cx]),
                            np.array([cy]), np.array([r]), np.array([0.2]))
    assert np.isinf(two).all()
