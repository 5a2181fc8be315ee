"""Terrain helpers: cross-section and centreline sample geometry, grouped robust fits.

Everything here is pure numpy over flat arrays of all curves at once; groups (a lane in a
cross-section, a lane over a curve, a curve) are integer ids reduced with ``np.bincount``
or by sorting, never by a Python loop over curves.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .geometry._ragged import expand
from .geometry.stations import Stations

__all__ = [
    "ChainIndex",
    "CrossSections",
    "cross_sections",
    "centreline_samples",
    "lane_section_slopes",
    "robust_group_mean",
    "group_median",
    "robust_line_fit",
    "window_grades",
]

#: Gap (m) between chains on the global station axis, so no search crosses a chain end.
_CHAIN_GAP_M = 1.0e3


@dataclass
class ChainIndex:
    """Stations laid end to end on one increasing axis (``s_global``).

    ``s_global = s - first_s[chain] + base[chain]``; chains are separated by a gap.
    """

    s_global: np.ndarray
    base: np.ndarray
    first_s: np.ndarray
    length: np.ndarray

    @classmethod
    def build(cls, st: Stations) -> "ChainIndex":
        """Index the stations of ``st``."""
        off = np.asarray(st.offsets, dtype=np.int64)
        nonempty = off[1:] > off[:-1]
        first = np.where(nonempty, off[:-1], 0)
        last = np.where(nonempty, off[1:] - 1, 0)
        s = np.asarray(st.s, dtype=float)
        first_s = np.where(nonempty, s[first] if s.size else 0.0, 0.0)
        length = np.where(nonempty, (s[last] - s[first]) if s.size else 0.0, 0.0)
        base = np.concatenate(([0.0], np.cumsum(length + _CHAIN_GAP_M)[:-1]))
        chain = np.asarray(st.chain, dtype=np.int64)
        s_global = s - first_s[chain] + base[chain] if s.size else s
        return cls(s_global, base, first_s, length)

    def to_global(self, chain: np.ndarray, s: np.ndarray) -> np.ndarray:
        """Global axis position of chain-local ``s``, clipped to the chain."""
        local = np.clip(s - self.first_s[chain], 0.0, self.length[chain])
        return local + self.base[chain]


def _interp_pose(st: Stations, ix: ChainIndex, q: np.ndarray) -> tuple[np.ndarray, ...]:
    x = np.interp(q, ix.s_global, st.x)
    y = np.interp(q, ix.s_global, st.y)
    c = np.interp(q, ix.s_global, np.cos(st.heading))
    s = np.interp(q, ix.s_global, np.sin(st.heading))
    return x, y, np.arctan2(s, c)


def _ragged(counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Parent id and position within parent for ``counts`` children per parent."""
    counts = np.asarray(counts, dtype=np.int64)
    position, parent = expand(np.zeros(counts.size, dtype=np.int64), counts)
    return parent, position


@dataclass
class CrossSections:
    """Sample points of all cross-sections of all curves.

    Attributes
    ----------
    x, y : ndarray
        Point coordinates (working CRS, m).
    u : ndarray
        Offset from the centreline toward the curve centre (m).
    lane_sec : ndarray of int
        Group id ``section * max_lanes + lane`` (lane 0 outermost).
    sec_curve : ndarray of int
        Curve of each section.
    max_lanes : int
        Lane-id stride.
    """

    x: np.ndarray
    y: np.ndarray
    u: np.ndarray
    lane_sec: np.ndarray
    sec_curve: np.ndarray
    max_lanes: int


def cross_sections(
    st: Stations,
    ix: ChainIndex,
    chain: np.ndarray,
    s_from: np.ndarray,
    s_to: np.ndarray,
    toward_centre: np.ndarray,
    width_m: np.ndarray,
    lanes: np.ndarray,
    *,
    spacing_m: float,
    step_m: float,
    margin_m: float,
    edge_margin_m: float,
) -> CrossSections:
    """Lay cross-sections every ``spacing_m`` over ``[s_from, s_to]`` of each curve.

    Sections are centred in the interval; each samples every lane at about ``step_m``
    apart (at least 3 points per lane), keeping ``margin_m`` from lane boundaries inside
    the carriageway and ``edge_margin_m`` from the carriageway edges (each margin at most
    30 % of the lane). ``toward_centre`` is +1 for left curves and -1 for right curves.
    """
    n = chain.size
    span = np.maximum(s_to - s_from, 0.0)
    k_sec = (np.floor(span / spacing_m) + 1).astype(np.int64)
    first = s_from + (span - (k_sec - 1) * spacing_m) / 2.0
    sec_curve, k = _ragged(k_sec)
    q = ix.to_global(chain[sec_curve], first[sec_curve] + k * spacing_m)
    sx, sy, h = _interp_pose(st, ix, q)
    sgn = toward_centre[sec_curve].astype(float)
    nx, ny = -np.sin(h) * sgn, np.cos(h) * sgn

    lanes = np.maximum(np.asarray(lanes, dtype=np.int64), 1)
    lane_w = width_m / lanes
    inner_m = np.minimum(margin_m, 0.3 * lane_w)
    edge_m = np.minimum(edge_margin_m, 0.3 * lane_w)
    # a lane at the carriageway edge keeps edge_m from it (unknown width, shoulder break)
    usable_one = lane_w - 2 * edge_m
    usable_edge = lane_w - edge_m - inner_m
    usable_mid = lane_w - 2 * inner_m
    m = np.maximum(3, np.floor(usable_mid / step_m).astype(np.int64) + 1)
    per_sec = (lanes * m)[sec_curve]
    pt_sec, qloc = _ragged(per_sec)
    cur = sec_curve[pt_sec]
    mm = m[cur]
    lane = qloc // mm
    j = qloc % mm
    nl = lanes[cur]
    first_lane, last_lane = lane == 0, lane == nl - 1
    lo = np.where(first_lane, edge_m[cur], inner_m[cur])
    usable = np.where(nl == 1, usable_one[cur],
                      np.where(first_lane | last_lane, usable_edge[cur], usable_mid[cur]))
    u = -width_m[cur] / 2 + lane * lane_w[cur] + lo + j * usable / (mm - 1)
    max_lanes = int(lanes.max()) if n else 1
    return CrossSections(
        x=sx[pt_sec] + u * nx[pt_sec],
        y=sy[pt_sec] + u * ny[pt_sec],
        u=u,
        lane_sec=pt_sec * max_lanes + lane,
        sec_curve=sec_curve,
        max_lanes=max_lanes,
    )


def centreline_samples(
    st: Stations, ix: ChainIndex, chain: np.ndarray, s_from: np.ndarray, s_to: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Station indices within ``[s_from, s_to]`` of each curve's chain.

    Returns
    -------
    curve : ndarray of int
        Curve of each sample (samples of a curve are contiguous, in increasing ``s``).
    idx : ndarray of int
        Station index of each sample.
    """
    lo = np.searchsorted(ix.s_global, ix.to_global(chain, s_from), side="left")
    hi = np.searchsorted(ix.s_global, ix.to_global(chain, s_to), side="right")
    curve, k = _ragged(np.maximum(hi - lo, 0))
    return curve, lo[curve] + k


def _ols(x, z, g, n_groups, w):
    """Fit z = a + b x per group (weighted); return a, b, n, sxx."""
    def bc(v):
        return np.bincount(g, weights=v, minlength=n_groups)

    cnt = bc(w)
    sx, sz = bc(w * x), bc(w * z)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx, mz = sx / cnt, sz / cnt
        dx = x - mx[g]
        sxx = bc(w * dx * dx)
        b = bc(w * dx * (z - mz[g])) / sxx
        a = mz - b * mx
    return a, b, cnt, sxx


def lane_section_slopes(
    u: np.ndarray, z: np.ndarray, group: np.ndarray, n_groups: int, min_points: int = 3
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Least-squares cross-slope of each lane in each section.

    Returns
    -------
    slope : ndarray
        Fall toward the curve centre (``-dz/du``), NaN with fewer than ``min_points``.
    n : ndarray
        Valid points per group.
    ss : ndarray
        Sum of squared residuals per group (m^2).
    """
    ok = np.isfinite(z)
    w = ok.astype(float)
    zz = np.where(ok, z, 0.0)
    a, b, cnt, _ = _ols(u, zz, group, n_groups, w)
    r = np.where(ok, zz - a[group] - b[group] * u, 0.0)
    ss = np.bincount(group, weights=r * r, minlength=n_groups)
    slope = np.where(cnt >= min_points, -b, np.nan)
    return slope, cnt, ss


def group_median(values: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """Median of ``values`` per group (NaN for empty groups); values must be finite."""
    order = np.lexsort((values, group))
    v, g = values[order], group[order]
    cnt = np.bincount(g, minlength=n_groups)
    start = np.cumsum(cnt) - cnt
    out = np.full(n_groups, np.nan)
    has = cnt > 0
    lo = start[has] + (cnt[has] - 1) // 2
    hi = start[has] + cnt[has] // 2
    out[has] = 0.5 * (v[lo] + v[hi])
    return out


def robust_group_mean(
    values: np.ndarray, group: np.ndarray, n_groups: int, k: float = 3.0, floor: float = 0.0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean per group after dropping values beyond ``k`` robust sigmas of the median.

    The robust sigma is ``1.4826 * MAD`` (at least ``floor``). NaN values are ignored.

    Returns
    -------
    mean, se, n_kept : ndarray
        Mean of kept values, its standard error ``std(ddof=1) / sqrt(n)`` (NaN below 2
        values), and the number kept.
    """
    ok = np.isfinite(values)
    v, g = values[ok], group[ok]
    med = group_median(v, g, n_groups)
    mad = group_median(np.abs(v - med[g]), g, n_groups)
    sigma = np.maximum(1.4826 * mad, floor)
    keep = np.abs(v - med[g]) <= k * sigma[g]
    v, g = v[keep], g[keep]
    cnt = np.bincount(g, minlength=n_groups).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.bincount(g, weights=v, minlength=n_groups) / cnt
        var = np.bincount(g, weights=(v - mean[g]) ** 2, minlength=n_groups) / (cnt - 1)
        se = np.where(cnt >= 2, np.sqrt(var / cnt), np.nan)
    return mean, se, cnt.astype(np.int64)


def robust_line_fit(
    x: np.ndarray, z: np.ndarray, group: np.ndarray, n_groups: int, *, k: float = 3.0,
    floor: float = 0.5, min_points: int = 3,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Slope of z on x per group: least squares, then again without outliers.

    Points with residuals beyond ``k`` robust sigmas (``1.4826 * MAD``, at least
    ``floor`` in z units, so vertical curves stay) of the first fit are dropped
    (bridges, culverts, vehicles).

    Returns
    -------
    slope, se, n : ndarray
        Slope (dz/dx), its standard error from the residuals, points used.
    """
    ok = np.isfinite(z)
    zz = np.where(ok, z, 0.0)
    a, b, _, _ = _ols(x, zz, group, n_groups, ok.astype(float))
    r = zz - a[group] - b[group] * x
    scale = np.full(n_groups, np.inf)
    if ok.any():
        scale = 1.4826 * group_median(np.abs(r[ok]), group[ok], n_groups)
    keep = ok & (np.abs(r) <= k * np.maximum(np.nan_to_num(scale, nan=np.inf), floor)[group])
    a, b, cnt, sxx = _ols(x, zz, group, n_groups, keep.astype(float))
    r = np.where(keep, zz - a[group] - b[group] * x, 0.0)
    ss = np.bincount(group, weights=r * r, minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(ss / (cnt - 2) / sxx)
    bad = cnt < min_points
    return np.where(bad, np.nan, b), np.where(bad, np.nan, se), cnt.astype(np.int64)


def window_grades(
    key: np.ndarray, z: np.ndarray, window_m: float, lo_key: np.ndarray, hi_key: np.ndarray
) -> np.ndarray:
    """Least-squares grade over a centred window at every sample.

    ``key`` is increasing, with each curve's samples on their own stretch; ``lo_key`` and
    ``hi_key`` (per sample) bound the stretch of its curve. Windows reaching beyond the
    stretch, or holding fewer than 3 valid samples, give NaN.
    """
    ok = np.isfinite(z)
    w = ok.astype(float)
    zz = np.where(ok, z, 0.0)
    half = window_m / 2.0
    x = key - (lo_key + hi_key) / 2.0  # centre per curve for numerical range

    def csum(v):
        return np.concatenate(([0.0], np.cumsum(v)))

    cw, cx, cz = csum(w), csum(w * x), csum(w * zz)
    cxx, cxz = csum(w * x * x), csum(w * x * zz)
    lo = np.searchsorted(key, key - half, side="left")
    hi = np.searchsorted(key, key + half, side="right")
    n = cw[hi] - cw[lo]
    sx, sz = cx[hi] - cx[lo], cz[hi] - cz[lo]
    sxx, sxz = cxx[hi] - cxx[lo], cxz[hi] - cxz[lo]
    with np.errstate(divide="ignore", invalid="ignore"):
        g = (n * sxz - sx * sz) / (n * sxx - sx * sx)
    full = (key - half >= lo_key - 1e-9) & (key + half <= hi_key + 1e-9) & (n >= 3)
    return np.where(full, g, np.nan)
