"""The compiled (numba) kernels of the geometry stage give exactly the numpy fallbacks' values.

Each kernel replaces a numpy form that stays in place for installs without numba; both
must agree bit for bit (the compiled chord curvature, which takes ``atan2`` from the C
library, only to round-off: see test_geometry).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from curvescan.config import make_config
from curvescan.errors import DataQualityWarning
from curvescan.geometry import _kernels as kn
from curvescan.geometry import _ragged, circlefit, noise, resample
from curvescan.prepare import prepare
from curvescan.read import load
from curvescan.synthetic import vertices

from .conftest import UTM, frame_from_lines, simple_curve

pytestmark = pytest.mark.skipif(not kn.HAVE_NUMBA, reason="numba not installed")


def _both(monkeypatch, fn):
    """``fn()`` with the compiled kernels and with the numpy fallbacks."""
    monkeypatch.setattr(kn, "ENABLED", True)
    a = fn()
    monkeypatch.setattr(kn, "ENABLED", False)
    b = fn()
    monkeypatch.setattr(kn, "ENABLED", True)
    return a, b


def _equal(a, b):
    if isinstance(a, tuple | list):
        assert len(a) == len(b)
        for u, v in zip(a, b):
            _equal(u, v)
    elif isinstance(a, dict):
        assert a.keys() == b.keys()
        for k in a:
            _equal(a[k], b[k])
    else:
        assert np.asarray(a).dtype == np.asarray(b).dtype
        np.testing.assert_array_equal(a, b, strict=True)


def _network():
    """Noisy and clean curves, a reverse curve, a two-vertex line, repeated vertices."""
    lines = []
    for k, (r, defl) in enumerate([(60.0, 70.0), (250.0, 40.0), (900.0, 20.0)]):
        al = simple_curve(r, defl, spiral_m=0.2 * r, tangent_m=150.0, left=k % 2 == 0)
        xy, _ = vertices(al, np.random.default_rng(k), jitter=(3.0, 20.0), noise_m=0.1 * k)
        lines.append(xy + [4000.0 * k, 0.0])
    lines.append(np.array([[0.0, -500.0], [80.0, -500.0]]))
    lines.append(np.array([[0.0, -900.0], [10.0, -900.0], [10.0, -900.0], [20.0, -901.0],
                           [30.0, -903.0], [40.0, -906.0]]))
    return lines


def _chains():
    cfg = make_config(crs=UTM)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return prepare(load(frame_from_lines(_network()), cfg), cfg), cfg


def test_scan_geometry_is_the_same_with_and_without_numba(monkeypatch):
    import curvescan.geometry as geometry

    chains, cfg = _chains()
    # the chord curvature differs in the last bit (atan2): compile it in both runs
    chord = geometry.chord_curvature

    def same_chord(*args, **kwargs):
        with monkeypatch.context() as m:
            m.setattr(kn, "ENABLED", True)
            return chord(*args, **kwargs)

    monkeypatch.setattr(geometry, "chord_curvature", same_chord)
    a, b = _both(monkeypatch, lambda: geometry.find_curves(chains, cfg))
    assert len(a.curves) >= 3
    pd.testing.assert_frame_equal(a.curves, b.curves, check_exact=True)
    pd.testing.assert_frame_equal(a.segments, b.segments, check_exact=True)
    for k in ("x", "y", "s", "heading", "curvature", "chain", "offsets"):
        _equal(getattr(a.stations, k), getattr(b.stations, k))


def test_resample_and_noise_kernels(monkeypatch):
    chains, _ = _chains()
    c, m, off = chains.coords, chains.measure, chains.offsets
    _equal(*_both(monkeypatch, lambda: resample.resample_stations(c, m, off, 3.0)))
    kappa = np.random.default_rng(3).normal(0, 0.01, len(c))
    sigma = _both(monkeypatch, lambda: noise.vertex_noise(c, off, m))
    _equal(*sigma)
    assert (sigma[0] > noise.NOISE_FLOOR_M).any()
    _equal(*_both(monkeypatch, lambda: noise.vertex_noise(c, off, m, kappa)))


def test_points_on_chords_compiled_equals_numpy(monkeypatch):
    """``shape_vertices``: the compiled on-chord test gives numpy's marks, here on lines
    with points put on a third of their chords (exactly, and 0.5 mm off)."""
    from curvescan.synthetic import add_chord_points
    rng = np.random.default_rng(8)
    lines, off = [], [0]
    for k in range(40):
        xy = np.cumsum(rng.normal(0.0, 12.0, (60, 2)), axis=0) + [5e5, 5e6]
        xy, added = add_chord_points(xy, rng, 0.3)
        xy[added[::2]] += 0.0005
        lines.append(xy)
        off.append(off[-1] + len(xy))
    c, o = np.concatenate(lines), np.array(off)
    for tol in (0.0001, 0.001, 0.01):
        a, b = _both(monkeypatch, lambda: resample.shape_vertices(c, o, tol))
        _equal(a, b)
    assert 200 < (~a).sum() < 800


def test_chain_half_windows_and_near_vertices(monkeypatch):
    import curvescan.geometry as geometry

    chains, _ = _chains()
    _equal(*_both(monkeypatch, lambda: geometry._chain_half_windows(chains, 4.0, 40.0)))
    st = resample.resample_stations(chains.coords, chains.measure, chains.offsets, 4.0)
    _equal(*_both(monkeypatch, lambda: geometry._near_vertices(st["gs"], st["gm"])))


@pytest.mark.parametrize("seed", range(6))
def test_group_helpers(monkeypatch, seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 40))
    grp = rng.integers(0, n, int(rng.integers(0, 500)))
    if seed % 2:
        grp = np.sort(grp)
    # many ties, and a few NaN
    values = rng.choice([0.0, 1.0, 2.5, 1e-300, 7.0], len(grp)) + (seed % 3) * rng.random(len(grp))
    if seed > 2 and len(grp):
        values[rng.integers(0, len(grp), 3)] = np.nan
    for q in (0.0, 0.5, 0.9, 1.0):
        _equal(*_both(monkeypatch, lambda: _ragged.group_quantile(values, grp, n, q)))
    _equal(*_both(monkeypatch, lambda: _ragged.group_argmax(values, grp, n)))
    counts = rng.integers(-1, 5, n)
    starts = rng.integers(0, 100, n)
    _equal(*_both(monkeypatch, lambda: _ragged.expand(starts, counts)))

    def scatter(fn, init):
        out = np.full(n, init)
        fn(out, grp, values)
        return out

    with np.errstate(invalid="ignore"):  # NaN values
        for fn in (_ragged.scatter_min, _ragged.scatter_max):
            _equal(*_both(monkeypatch, lambda: scatter(fn, 3.0)))


def test_circle_fits(monkeypatch):
    rng = np.random.default_rng(7)
    xs, ys, gs = [], [], []
    for g in range(60):
        m = int(rng.integers(1, 30))  # some groups too small to fit
        r = rng.uniform(20.0, 3000.0)
        t = rng.uniform(0, 0.5) + np.sort(rng.uniform(0, 1.0, m))
        x = 1e5 + r * np.cos(t) + rng.normal(0, 0.05, m)
        y = 5e6 + r * np.sin(t) + rng.normal(0, 0.05, m)
        if g % 10 == 0:
            y = 5e6 + 0.0 * x  # collinear
        xs.append(x)
        ys.append(y)
        gs.append(np.full(m, g))
    x, y, g = np.concatenate(xs), np.concatenate(ys), np.concatenate(gs)
    for refine in (False, True):
        a, b = _both(monkeypatch, lambda: circlefit.fit_circles(x, y, g, 62, refine=refine))
        assert np.isfinite(a.radius).sum() > 40
        for k in ("cx", "cy", "radius", "radius_se", "rmse", "n", "radius_sd_unit"):
            _equal(getattr(a, k), getattr(b, k))


def test_find_runs(monkeypatch):
    from curvescan.geometry.segment import find_runs

    rng = np.random.default_rng(11)
    n = 3000
    chain = np.repeat(np.arange(6), n // 6)
    s = np.concatenate([np.arange(n // 6) * 4.0] * 6)
    kappa = 0.004 * np.sin(s / 150.0 + chain) + rng.normal(0, 0.0008, n)
    kappa[::97] = 0.0
    kw = dict(kappa_on=0.0005, kappa_off=0.00025, min_deflection_rad=0.04,
              min_length_m=5.0, merge_gap_m=20.0)
    a, b = _both(monkeypatch, lambda: find_runs(kappa, s, chain, **kw))
    assert len(a[0]) > 10
    _equal(a, b)


def test_circle_gaps(monkeypatch):
    rng = np.random.default_rng(4)
    coords = rng.normal(0, 100.0, (200, 2)) + [6e5, 5e6]
    fit = circlefit.CircleFit(cx=np.array([6e5, 6e5 + 50.0, np.nan]),
                              cy=np.array([5e6, 5e6 - 20.0, 5e6]),
                              radius=np.array([80.0, 10.0, 5.0]),
                              radius_se=np.zeros(3), rmse=np.zeros(3), n=np.zeros(3, int),
                              radius_sd_unit=np.zeros(3))
    idx = rng.integers(0, 200, 500)
    grp = rng.integers(0, 3, 500)
    a, b = _both(monkeypatch, lambda: circlefit.circle_gaps(coords, idx, grp, fit))
    _equal(a, b)


def test_chord_curvature_into_a_row(monkeypatch):
    chains, _ = _chains()
    st = resample.resample_stations(chains.coords, chains.measure, chains.offsets, 4.0)
    args = ((st["x"], st["y"]), st["s"], st["chain"], st["st_off"],
            np.full(chains.n_chains, 5))
    at = np.arange(3, len(st["s"]), 2)

    def into():
        row = np.full(len(st["s"]), 7.0)
        return resample.chord_curvature(*args, at=at, out=row)

    a, b = _both(monkeypatch, into)
    plain = resample.chord_curvature(*args, at=at)
    np.testing.assert_array_equal(a[at], plain)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15)  # atan2: see module doc
    assert (a[:3] == 7.0).all() and (b[4:len(b):2] == 7.0).all()


def test_best_split(monkeypatch):
    from curvescan.geometry import compound

    rng = np.random.default_rng(5)
    pts, i0, i1, cx, cy, r = [], [], [], [], [], []
    start = 0
    for g in range(80):
        m = int(rng.integers(8, 60))
        r1 = rng.uniform(30.0, 3000.0)
        r2 = r1 * (1.0 if g % 3 == 0 else rng.uniform(0.5, 2.0))  # one arc or two
        t = np.sort(rng.uniform(0.0, 0.6, m))
        rad = np.where(np.arange(m) < m // 2, r1, r2)
        noise = 0.0 if g % 4 == 0 else rng.uniform(0.001, 0.3)  # exact circles tie
        x = 4e5 + rad * np.cos(t) + rng.normal(0, noise, m)
        y = 6e6 + rad * np.sin(t) + rng.normal(0, noise, m)
        if g % 17 == 0:
            x = np.round(x, 1)  # repeated coordinates
        pts.append(np.column_stack([x, y]))
        i0.append(start)
        i1.append(start + m)
        start += m
        cx.append(4e5)
        cy.append(6e6)
        r.append(r1)
    coords = np.concatenate(pts)
    i0, i1 = np.array(i0), np.array(i1)
    cx, cy, r = np.array(cx), np.array(cy), np.array(r)
    todo = rng.random(len(i0)) < 0.8
    a, b = _both(monkeypatch, lambda: compound._best_split(coords, i0, i1, cx, cy, r, todo))
    assert (a[todo] > i0[todo]).all() and (a[~todo] == -1).all()
    _equal(a, b)


@pytest.mark.parametrize("seed", range(4))
def test_piece_core(monkeypatch, seed):
    from curvescan.geometry import circular

    rng = np.random.default_rng(seed)
    n_st = 3000
    s = np.arange(n_st) * 4.0
    K = 0.01 * np.sin(s / rng.uniform(30.0, 300.0, (4, 1))) + rng.normal(0, 0.002, (4, n_st))
    if seed % 2:
        K = np.round(K, 3)  # ties between values and between runs
        K[:, ::3] += 1e-16  # apart by less than the quantile's sort key resolves
    if seed == 3:
        K[2, 100:200:7] = np.nan
    prof = circular.Profile(s=s, gs=s, K=K, chain=np.zeros(n_st, dtype=np.int64), gm=s,
                            coords=np.zeros((n_st, 2)), v_off=np.array([0, n_st]),
                            sigma=np.ones(1), half_m=np.ones((4, 1)))
    pf = np.sort(rng.integers(0, n_st - 60, 200))
    pl = pf + rng.integers(-1, 60, 200)
    scale = rng.integers(0, 4, 200)
    a, b = _both(monkeypatch, lambda: circular._core(prof, pf, pl, scale))
    assert (a[1] - a[0] >= 0).sum() > 150
    _equal(a, b)
    for q in (0.0, 0.9, 1.0):
        _equal(*_both(monkeypatch, lambda: _ragged.range_quantile(K, scale, pf, pl, q)))
    radius = rng.choice([50.0, 100.0, 400.0, 0.0, np.nan], 200)
    sign = rng.choice([-1.0, 1.0], 200)
    centre_m = s[pf] + rng.uniform(-10.0, 250.0, 200)
    with np.errstate(divide="ignore"):  # radius 0
        spans = _both(monkeypatch, lambda: circular.half_level_span(prof, pf, pl, centre_m,
                                                                     radius, sign, scale))
    assert (spans[0][1] - spans[0][0] > 0).sum() > 50
    _equal(*spans)
    # the only stations below half the level are the range's ends
    K[0, 1000:1100] = 0.05
    K[0, [1000, 1099]] = 0.0
    one = np.array([1000]), np.array([1099]), s[[1050]], np.array([50.0]), np.ones(1)
    ends = _both(monkeypatch, lambda: circular.half_level_span(prof, *one, np.zeros(1, int)))
    _equal(*ends)
    np.testing.assert_array_equal(np.r_[ends[0]], s[[1000, 1099]])


@pytest.mark.parametrize("seed", [0, 1])
def test_spike_candidates(monkeypatch, seed):
    from curvescan.prepare import _remove_spikes

    rng = np.random.default_rng(seed)
    xy = np.cumsum(rng.normal(size=(3000, 2)), axis=0)
    xy[::7] = xy[::7] + 40.0 * rng.normal(size=(len(xy[::7]), 2))  # spikes
    vidx = np.repeat(np.arange(30), 100)
    for limit in (np.radians(150.0), np.radians(60.0)):
        a, b = _both(monkeypatch, lambda: _remove_spikes(xy.copy(), vidx.copy(), limit))
        _equal(a, b)
        assert len(a[0]) < len(xy)  # spikes were removed
    got = kn.spike_candidate_kernel(xy)
    dx, dy = np.diff(xy[:, 0]), np.diff(xy[:, 1])
    _equal(got, np.flatnonzero(dx[1:] * dx[:-1] + dy[1:] * dy[:-1] <= 0.0))


def test_linestring_wkb(monkeypatch):
    import shapely

    from curvescan.geometry.pieces import linestring_wkb

    rng = np.random.default_rng(3)
    count = rng.integers(2, 9, size=50)
    offsets = np.r_[0, np.cumsum(count)]
    xy = rng.normal(size=(int(offsets[-1]), 2)) * 1e5
    a, b = _both(monkeypatch, lambda: linestring_wkb(xy, offsets))
    assert a.type == b.type and a.equals(b)
    lines = shapely.from_ragged_array(shapely.GeometryType.LINESTRING, xy, (offsets,))
    assert a.to_pylist() == list(shapely.to_wkb(lines))


def test_substring_points(monkeypatch):
    from curvescan.geometry import pieces

    chains, _ = _chains()
    rng = np.random.default_rng(5)
    n = 400
    chain = rng.integers(0, chains.n_chains, size=n)
    length = chains.lengths[chain]
    # inside, at and beyond the chain's ends, zero-length and on vertices
    s0 = rng.uniform(-5.0, 1.0, n) * length
    s0[::7] = 0.0
    s1 = s0 + rng.uniform(0.0, 1.2, n) * length
    s1[::5] = s0[::5]
    s1[::11] = length[::11]
    vert = chains.measure[chains.offsets[chain]]
    s0[::13] = vert[::13]

    def lines(wkb):
        return lambda: pieces.substrings(chains, chain, s0, s1, wkb=wkb)

    a, b = _both(monkeypatch, lines(True))
    assert a.equals(b)
    a, b = _both(monkeypatch, lines(False))
    import shapely

    assert list(shapely.to_wkb(a)) == list(shapely.to_wkb(b))


def test_tangent_end_gain(monkeypatch):
    from curvescan.geometry import circular

    rng = np.random.default_rng(11)
    t = np.linspace(0.0, 1.2, 300)
    coords = np.c_[100.0 * np.cos(t), 100.0 * np.sin(t)] + rng.normal(0, 0.3, (300, 2))
    end = rng.integers(20, 280, 40)
    k = rng.integers(0, 13, 40)
    cx, cy = rng.normal(0, 1.0, 40), rng.normal(0, 1.0, 40)
    r = 100.0 + rng.normal(0, 2.0, 40)
    sigma = np.full(40, 0.3)
    for step in (1, -1):
        a, b = _both(monkeypatch, lambda: circular._tangent_end_gain(coords, end, step, k, cx,
                                                                     cy, r, sigma))
        _equal(a, b)
        assert (a[0][k == 0] == 0).all() and (a[0] <= k).all()


def test_shape_vertex_kernel(monkeypatch):
    """The sequential collinear rule: densified lines (exact and noisy), exact tangents,
    runs longer than the bound, a point doubling back, repeated points."""
    import shapely

    lines = [shapely.get_coordinates(shapely.segmentize(shapely.LineString(xy), d))
             for xy, d in zip(_network(), (2.0, 1.0, 5.0, 3.0, 0.5))]
    rng = np.random.default_rng(2)
    straight = np.column_stack([np.arange(0.0, 600.0, 1.0), np.zeros(600)])
    straight[::7, 1] += rng.normal(0.0, 0.0008, len(straight[::7]))
    back = np.array([[0.0, 0.0], [10.0, 0.0], [5.0, 0.0], [20.0, 0.0], [20.0, 0.0],
                     [30.0, 0.0]])
    lines += [straight, back]
    xy = np.vstack(lines)
    off = np.r_[0, np.cumsum([len(v) for v in lines])]
    got = _both(monkeypatch, lambda: resample.shape_vertex_classes(xy, off, 0.001))
    _equal(*got)
    assert got[0][1].sum() >= 3 and (~got[0][0]).sum() > len(xy) // 2
