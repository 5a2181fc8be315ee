"""The synthetic alignment generator against clothoid formulas."""

from __future__ import annotations

import numpy as np
import pytest

from curvescan.synthetic import Element, build


def test_clothoid_end_point_and_shift():
    """Clothoid with R = 300 m, L = 100 m (REFERENCES section 10: A^2 = R*L, spiral angle
    L/(2R), offset Y ~ L^2/(6R), shift dR ~ L^2/(24R) = 1.389 m; derived values)."""
    R, L = 300.0, 100.0
    al = build([Element("transition", L, 0.0, 1.0 / R, 1)])
    x, y = al.points(np.array([L]))[0]
    tau = L / (2 * R)
    assert al.curvature(np.array([L]))[0] == pytest.approx(1 / R)
    # series expansions of the clothoid (first terms)
    assert x == pytest.approx(L - L ** 3 / (40 * R ** 2), abs=1e-3)
    assert y == pytest.approx(L ** 2 / (6 * R) - L ** 4 / (336 * R ** 3), abs=1e-3)
    shift = y - R * (1 - np.cos(tau))
    assert shift == pytest.approx(1.389, abs=0.002)
    assert np.sqrt(R * L) == pytest.approx(173.205, abs=0.001)


def test_arc_and_tangent_are_exact_and_continuous():
    al = build([Element("tangent", 50.0, 0, 0), Element("arc", np.pi * 100 / 2, 0.01, 0.01, 1),
                Element("tangent", 50.0, 0, 0)])
    end = al.points(np.array([al.length_m]))[0]
    np.testing.assert_allclose(end, [150.0, 150.0], atol=1e-9)
    s = np.linspace(0, al.length_m, 2001)
    step = np.hypot(*np.diff(al.points(s), axis=0).T)
    np.testing.assert_allclose(step, np.diff(s), rtol=1e-4)


def test_chord_points_lie_on_their_segments():
    from curvescan.synthetic import add_chord_points
    rng = np.random.default_rng(4)
    xy = np.cumsum(rng.normal(0.0, 10.0, (200, 2)), axis=0)
    out, added = add_chord_points(xy, np.random.default_rng(1), 0.3)
    assert len(out) == len(xy) + len(added)
    assert 40 <= len(added) <= 80  # 30 % of 199 segments
    kept = np.setdiff1d(np.arange(len(out)), added)
    np.testing.assert_array_equal(out[kept], xy)
    a, p, b = out[added - 1], out[added], out[added + 1]
    cross = (b - a)[:, 0] * (p - a)[:, 1] - (b - a)[:, 1] * (p - a)[:, 0]
    assert np.all(np.abs(cross) / np.hypot(*(b - a).T) < 1e-9)
    t = np.einsum("ij,ij->i", p - a, b - a) / np.einsum("ij,ij->i", b - a, b - a)
    assert np.all((t >= 0.2 - 1e-12) & (t <= 0.8 + 1e-12))
