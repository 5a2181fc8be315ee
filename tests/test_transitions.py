"""Transition vertices taken off the ends of circular parts (curvescan.geometry.transitions).

The truth comes from the exact alignment generator (clothoids from scipy.special.fresnel);
the clothoid's offset from its osculating circle, d^3 / (6 R L), is common practice in
alignment design.
"""

import numpy as np
import pytest

from curvescan.geometry.circlefit import fit_circles
from curvescan.geometry.transitions import trim_transitions
from curvescan.synthetic import Element, build, curve_elements

FIELDS = ("cx", "cy", "radius", "radius_se", "radius_sd_unit", "rmse", "n")


def _part(xy, lo, hi):
    """A parts dict of one circular part over vertices ``[lo, hi)``, fitted as one circle."""
    fit = fit_circles(xy[lo:hi, 0], xy[lo:hi, 1], np.zeros(hi - lo, dtype=np.int64), 1)
    parts = {"i0": np.array([lo]), "i1": np.array([hi]), "chain": np.array([0])}
    parts.update({k: np.asarray(getattr(fit, k), dtype=float) for k in FIELDS})
    return parts


def _spiralled(radius, arc, spiral, step=1.0):
    al = build([Element("tangent", 100.0, 0, 0)] + curve_elements(radius, arc, spiral)
               + [Element("tangent", 100.0, 0, 0)], heading=0.7)
    s = np.arange(0.0, al.length_m, step)
    return al.points(s), s


def test_transition_vertices_admitted_to_a_part_are_trimmed():
    # a 15 m arc of R 50 between 25 m clothoids; the part spans 12 m of each clothoid
    xy, s = _spiralled(50.0, 15.0, 25.0)
    lo, hi = int(np.searchsorted(s, 113.0)), int(np.searchsorted(s, 153.0))
    rng = np.random.default_rng(3)
    noisy = xy + rng.normal(0.0, 0.01, xy.shape)
    parts = _part(noisy, lo, hi)
    assert parts["radius"][0] > 51.0  # the one circle averages arc and transitions
    out = trim_transitions(noisy, parts, np.array([0.01]), FIELDS)
    assert out["trim_in"][0] > 0 and out["trim_out"][0] > 0
    start, end = s[out["i0"][0]], s[out["i1"][0] - 1]
    # the arc runs from 125 to 140 m; a clothoid stays within 0.02 m of the circle for
    # about 4 m, so the trimmed ends lie within a few metres of the arc's
    assert start == pytest.approx(125.0, abs=4.5)
    assert end == pytest.approx(140.0, abs=4.5)
    assert out["radius"][0] == pytest.approx(50.0, rel=0.01)


@pytest.mark.parametrize("noise", [0.05, 0.3])
def test_a_plain_noisy_arc_is_rarely_trimmed(noise):
    els = [Element("arc", 120.0, 1 / 150.0, 1 / 150.0, 1)]
    al = build(els)
    s = np.arange(0.0, 120.0, 2.0)
    trimmed = 0
    for k in range(100):
        rng = np.random.default_rng(k)
        xy = al.points(s) + rng.normal(0.0, noise, (len(s), 2))
        out = trim_transitions(xy, _part(xy, 0, len(s)), np.array([noise]), FIELDS)
        trimmed += int(out["trim_in"][0] > 0 or out["trim_out"][0] > 0)
    # a trim must lower the residual sum by 9 noise variances per end (two parameters; the
    # chi-square tail with 2 degrees of freedom is exp(-x/2): 9 is exceeded 1.1 % of the
    # time, about 2 % with either end)
    assert trimmed <= 8


def test_parts_too_short_to_test_and_bad_fits_pass_unchanged():
    xy, s = _spiralled(50.0, 15.0, 25.0, step=5.0)
    parts = _part(xy, 22, 27)  # five vertices: below the fewest tested
    bad = _part(xy, 22, 30)
    bad["radius"][:] = np.nan  # a failed fit is left alone
    for p in (parts, bad):
        out = trim_transitions(xy, p, np.array([0.1]), FIELDS)
        assert out["i0"][0] == p["i0"][0] and out["i1"][0] == p["i1"][0]
        assert out["trim_in"][0] == 0 and out["trim_out"][0] == 0
