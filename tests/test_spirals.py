"""Transition lengths and curve ends from the tangents and the circle they join
(curvescan.geometry.spirals).

Outside checks: the clothoid shift of ../shared/REFERENCES.md section 10 (worked value
R = 300 m, L = 100 m gives a shift of 1.389 m from dR = L^2 / (24 R); source named there:
the clothoid highway design demonstration by so-okada and the GeoGebra clothoid page), and
the clothoid's end point integrated numerically with scipy.integrate.quad. The end-to-end
truth comes from the exact alignment generator (clothoids from scipy.special.fresnel).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
from click.testing import CliRunner
from scipy.integrate import quad

import curvescan
from curvescan.cli.main import main
from curvescan.geometry import spirals as sp
from curvescan.synthetic import vertices

from .conftest import UTM, frame_from_lines, simple_curve
from .test_geometry import _curves, _digitise


def test_shift_matches_the_published_clothoid_example():
    # REFERENCES.md section 10 (clothoid row): R 300 m, L 100 m -> shift 1.389 m by the
    # first-order formula L^2 / (24 R); the exact shift is smaller by about L^4/(2688 R^3)
    # (0.0014 m here), within 0.2 % of the published figure
    p, k = sp.shift_of(np.array([100.0]), np.array([300.0]))
    assert p[0] == pytest.approx(1.389, rel=2e-3)
    assert p[0] < 100.0 ** 2 / (24 * 300.0)


@pytest.mark.parametrize("radius,length", [(300.0, 100.0), (45.0, 30.0), (1200.0, 250.0)])
def test_shift_and_start_equal_the_integrated_clothoid(radius, length):
    # the clothoid's end point by numerical integration of its heading s^2 / (2 R L)
    x = quad(lambda s: np.cos(s * s / (2 * radius * length)), 0.0, length)[0]
    y = quad(lambda s: np.sin(s * s / (2 * radius * length)), 0.0, length)[0]
    tau = length / (2 * radius)
    p, k = sp.shift_of(np.array([length]), np.array([radius]))
    assert p[0] == pytest.approx(y - radius * (1 - np.cos(tau)), rel=1e-9)
    assert k[0] == pytest.approx(x - radius * np.sin(tau), rel=1e-9)
    # and the start lies about half the transition before the foot (common practice)
    assert k[0] == pytest.approx(0.5 * length, rel=0.01)


def test_length_for_shift_inverts_the_shift():
    radius = np.array([50.0, 200.0, 800.0, 1500.0])
    length = np.array([20.0, 60.0, 150.0, 300.0])
    p, _ = sp.shift_of(length, radius)
    assert sp.length_for_shift(p, radius) == pytest.approx(length, rel=1e-6)
    # no shift, or a circle cutting the tangent: no transition
    assert np.all(sp.length_for_shift(np.array([0.0, -0.5]), np.array([200.0, 200.0])) == 0)


def _line_and_circle(radius=200.0, gap=0.5, n=12, spacing=10.0, noise=0.0, seed=0,
                     bend=None):
    """Tangent vertices along +x ending at x = 0, and a circle (centre above) at ``gap``
    from the line. ``bend``: put the "tangent" vertices on a circle of that radius."""
    x = -spacing * np.arange(n)[::-1] - 20.0
    y = np.zeros(n) if bend is None else bend - np.sqrt(bend ** 2 - x ** 2)
    rng = np.random.default_rng(seed)
    xy = np.column_stack([x, y]) + rng.normal(0.0, noise, (n, 2))
    gm = x - x[0]
    cx, cy = np.array([10.0]), np.array([radius + gap])
    cov = np.zeros((1, 3, 3))
    return xy, gm, cx, cy, np.array([radius]), cov


def _ends(xy, gm, cx, cy, r, cov, sigma):
    return sp.tangent_ends(xy, gm, np.array([0]), np.array([len(xy)]), cx, cy, r,
                           np.array([1.0]), np.array([sigma]), cov, -1)


def test_the_shift_gives_the_transition_and_its_start():
    radius, length = 200.0, 60.0
    p, k = sp.shift_of(np.array([length]), np.array([radius]))
    xy, gm, cx, cy, r, cov = _line_and_circle(radius, gap=float(p[0]))
    usable, out_len, outer, inner, shift, _se = _ends(xy, gm, cx, cy, r, cov, 0.005)
    assert usable[0]
    assert out_len[0] == pytest.approx(length, rel=1e-4)
    assert shift[0] == pytest.approx(p[0], abs=1e-9)
    # the foot of the centre is at x = 10, i.e. measure 10 - x[0]; the start k before it
    foot = 10.0 - xy[0, 0]
    assert outer[0] == pytest.approx(foot - k[0], abs=1e-6)
    assert inner[0] == pytest.approx(outer[0] + length, abs=1e-6)


def test_a_shift_within_the_noise_is_no_transition():
    xy, gm, cx, cy, r, cov = _line_and_circle(200.0, gap=0.05, noise=0.3, seed=4)
    usable, out_len, outer, _inner, _shift, se = _ends(xy, gm, cx, cy, r, cov, 0.3)
    assert usable[0] and out_len[0] == 0.0
    assert se[0] > 0.05


@pytest.mark.parametrize("case", ["cuts", "short", "few", "bent", "gentle"])
def test_tangents_that_cannot_place_the_ends_are_not_used(case):
    # "gentle": 290 m of a 4000 m radius (flatter than any curve reported) under 0.5 m
    # noise; its 2.6 m sagitta passes for a tangent under a plain 2x-noise test
    kw = {"cuts": dict(gap=-3.0), "short": dict(n=2, spacing=5.0), "few": dict(n=2),
          "bent": dict(bend=150.0, gap=0.5),
          "gentle": dict(bend=4000.0, n=30, noise=0.5, seed=2)}[case]
    xy, gm, cx, cy, r, cov = _line_and_circle(200.0, **kw)
    usable = _ends(xy, gm, cx, cy, r, cov, kw.get("noise", 0.01) or 0.01)[0]
    assert not usable[0]


def test_a_noisy_straight_tangent_is_used():
    # the straightness test must not reject a true tangent for its noise (20 draws)
    used = 0
    for seed in range(20):
        xy, gm, cx, cy, r, cov = _line_and_circle(200.0, n=30, noise=0.3, seed=seed)
        used += bool(_ends(xy, gm, cx, cy, r, cov, 0.3)[0][0])
    assert used >= 19


@pytest.mark.parametrize("left", [True, False])
@pytest.mark.parametrize("radius,spiral", [(150.0, 40.0), (600.0, 90.0), (300.0, 0.0)])
def test_exact_lines_get_their_transitions(radius, spiral, left):
    """Exact vertices every 10 m: the curve's ends and transitions within 0.5 m of the
    truth (the curvature profile alone placed them 2-8 m off)."""
    al = simple_curve(radius, 40.0, spiral_m=spiral, tangent_m=300.0, left=left)
    truth = al.truth().iloc[0]
    c = _curves([_digitise(al, 10.0)]).curves
    assert len(c) == 1
    c = c.iloc[0]
    for ours, true in (("s_start_m", "s_start_m"), ("s_end_m", "s_end_m"),
                       ("circ_start_m", "circ_start_m"), ("circ_end_m", "circ_end_m")):
        assert c[ours] == pytest.approx(truth[true], abs=0.5)
    assert c["transition_in_m"] == pytest.approx(spiral, abs=0.5)
    assert c["transition_out_m"] == pytest.approx(spiral, abs=0.5)


def test_dense_noisy_lines_place_the_transitions_better_than_the_profile():
    """GPS-like vertices (1-3 m, 0.3 m noise), R 200 m with 60 m transitions, 12 seeds:
    the curve's start and end within 10 m of the truth in the median (the curvature
    profile alone: about 20 m, inside the transitions), and a plain arc of R 200 m keeps
    transitions under 10 m in the median."""
    for spiral, limit in ((60.0, 10.0), (0.0, 10.0)):
        al = simple_curve(200.0, 50.0, spiral_m=spiral, tangent_m=250.0)
        truth = al.truth().iloc[0]
        errors, trans = [], []
        for seed in range(12):
            xy, _ = vertices(al, np.random.default_rng(seed), jitter=(1.0, 3.0), noise_m=0.3)
            c = _curves([xy]).curves
            assert len(c) == 1
            errors += [abs(c["s_start_m"].iloc[0] - truth["s_start_m"]),
                       abs(c["s_end_m"].iloc[0] - truth["s_end_m"])]
            trans += [c["transition_in_m"].iloc[0], c["transition_out_m"].iloc[0]]
        assert np.median(errors) < limit
        if spiral == 0.0:
            assert np.median(trans) < 10.0


def test_scan_and_cli_report_the_transitions(tmp_path):
    al = simple_curve(250.0, 45.0, spiral_m=70.0, tangent_m=300.0)
    truth = al.truth().iloc[0]
    frame = frame_from_lines([_digitise(al, 10.0)], road_name=["Test Lane"])
    result = curvescan.scan(frame, crs=UTM)
    assert result.curves["transition_in_m"].iloc[0] == pytest.approx(70.0, abs=0.5)
    path = tmp_path / "roads.gpkg"
    frame.to_file(path, layer="roads")
    out = tmp_path / "out.gpkg"
    res = CliRunner().invoke(main, ["scan", str(path), "-o", str(out)])
    assert res.exit_code == 0, res.output
    curves = gpd.read_file(out, layer="curves")
    assert len(curves) == 1
    assert curves["transition_out_m"].iloc[0] == pytest.approx(70.0, abs=0.5)
    assert curves["length_m"].iloc[0] == pytest.approx(
        truth["s_end_m"] - truth["s_start_m"], abs=1.0)


def test_a_reversed_line_gets_the_same_ends_mirrored():
    """The tangent fits do not depend on the digitised direction (GPS-like vertices)."""
    al = simple_curve(220.0, 55.0, spiral_m=60.0, tangent_m=250.0)
    for seed in range(3):
        xy, _ = vertices(al, np.random.default_rng(seed), jitter=(1.0, 3.0), noise_m=0.3)
        total = float(np.hypot(*np.diff(xy, axis=0).T).sum())
        a = _curves([xy]).curves.iloc[0]
        b = _curves([xy[::-1]]).curves.iloc[0]
        assert total - b["s_end_m"] == pytest.approx(a["s_start_m"], abs=0.05)
        assert total - b["s_start_m"] == pytest.approx(a["s_end_m"], abs=0.05)
        assert b["direction"] != a["direction"]
        # and the transitions were placed (the profile alone found about a fifth of them)
        assert a["transition_in_m"] > 40.0 and b["transition_out_m"] > 40.0
