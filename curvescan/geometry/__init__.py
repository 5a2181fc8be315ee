"""Stage: geometry. Stations, curvature, curves and their circular parts, segments.

The entry point is :func:`find_curves`; see ``docs/geometry.md`` for the method and for
why the defaults are what they are.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..declare import Param
from .circlefit import fit_circles
from .pieces import piece_table, resolve_overlaps
from .resample import chord_curvature, global_measure, make_stations, resample
from .segment import find_runs, run_boundaries
from .stations import Stations

__all__ = ["PARAMETERS", "GeometryResult", "find_curves", "Stations"]

PARAMETERS: tuple[Param, ...] = (
    Param("station_spacing_m", "float", 2.0,
          "Distance between resampled stations along each chain.", unit="m",
          stage="geometry", minimum=0.25, maximum=50.0),
    Param("smoothing_length_m", "float", 40.0,
          "Length over which curvature is measured (two chords of half this length); "
          "widened on chains whose vertices are farther apart.", unit="m",
          stage="geometry", minimum=2.0, maximum=500.0),
    Param("max_radius_m", "float", 2000.0,
          "Largest radius reported as a curve; flatter bends count as tangent.", unit="m",
          stage="geometry", minimum=10.0, maximum=100000.0),
    Param("min_deflection_deg", "float", 5.0,
          "Smallest total heading change of a curve.", unit="deg", stage="geometry",
          minimum=0.1, maximum=180.0),
    Param("min_curve_length_m", "float", 5.0,
          "Shortest curve reported.", unit="m", stage="geometry", minimum=0.0,
          maximum=1000.0),
    Param("circle_tolerance_m", "float", 0.10,
          "Distance from the fitted circle within which a vertex still belongs to the "
          "circular part (raised to three times the fit's RMSE on noisy data).", unit="m",
          stage="geometry", minimum=0.001, maximum=10.0, advanced=True),
)


@dataclass
class GeometryResult:
    """What the geometry stage gives the later stages."""

    stations: Stations
    curves: pd.DataFrame
    segments: pd.DataFrame


def _chain_half_windows(chains: Any, spacing: float, smoothing: float) -> np.ndarray:
    """Half-window in stations per chain: half the smoothing length, widened to the
    chain's median vertex spacing so a window always spans several vertices."""
    seg = np.diff(chains.measure)
    vchain = np.repeat(np.arange(chains.n_chains), np.diff(chains.offsets))
    same = vchain[1:] == vchain[:-1]
    seg, sc = seg[same], vchain[1:][same]
    order = np.lexsort((seg, sc))
    counts = np.bincount(sc, minlength=chains.n_chains)
    first = np.cumsum(counts) - counts
    med = np.where(counts > 0, seg[order][np.minimum(first + counts // 2, len(seg) - 1)], 0.0)
    half = np.maximum(0.5 * smoothing, 1.0 * med)
    return np.maximum(np.round(half / spacing).astype(np.int64), 1)


def find_curves(chains: Any, config: Any) -> GeometryResult:
    """Find curves on every chain and fit their circular parts.

    Parameters
    ----------
    chains : curvescan.prepare.Chains
    config : ScanConfig
        Uses the geometry parameters (``station_spacing_m``, ``smoothing_length_m``,
        ``max_radius_m``, ``min_deflection_deg``, ``min_curve_length_m``,
        ``circle_tolerance_m``).

    Returns
    -------
    GeometryResult
        ``curves`` has one row per curve (see docs/output.md); ``segments`` one row per
        tangent, transition or circular piece of every chain.
    """
    spacing = config.station_spacing_m
    xy, s, chain, st_off = resample(chains.coords, chains.measure, chains.offsets, spacing)
    half = _chain_half_windows(chains, spacing, config.smoothing_length_m)
    kappa, heading = chord_curvature(xy, s, chain, st_off, half)
    stations = make_stations(xy, s, chain, st_off, kappa, heading)
    kappa_on = 1.0 / config.max_radius_m
    first, last = find_runs(
        kappa, s, chain, kappa_on=kappa_on, kappa_off=0.5 * kappa_on,
        min_deflection_rad=np.radians(config.min_deflection_deg),
        min_length_m=config.min_curve_length_m,
        merge_gap_m=0.5 * config.smoothing_length_m,
    )
    curves = _measure_runs(chains, stations, first, last, half, config)
    segments = piece_table(chains, curves)
    return GeometryResult(stations=stations, curves=curves, segments=segments)


def _vertices_between(gm: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    """Flat vertex indices with global measure in [lo, hi] per group, and group ids."""
    i0 = np.searchsorted(gm, lo - 1e-9, side="left")
    i1 = np.searchsorted(gm, hi + 1e-9, side="right")
    counts = np.maximum(i1 - i0, 0)
    grp = np.repeat(np.arange(len(lo)), counts)
    idx = i0[grp] + (np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts))
    return idx, grp, counts


def _measure_runs(chains, stations, first, last, half, config) -> pd.DataFrame:
    s, kappa = stations.s, stations.curvature
    n = len(first)
    run_chain = stations.chain[first]
    gm, base = global_measure(chains.measure, chains.offsets)
    b = run_boundaries(kappa, s, first, last, core_fraction=0.85)
    gbase = base[run_chain]
    run_lo, run_hi = s[first] + gbase, s[last] + gbase
    core_lo, core_hi = s[b["core_first"]] + gbase, s[b["core_last"]] + gbase
    # vertices of the core; widen to the whole run where the core has too few
    _, _, cnt = _vertices_between(gm, core_lo, core_hi)
    few = cnt < 3
    core_lo = np.where(few, run_lo, core_lo)
    core_hi = np.where(few, run_hi, core_hi)
    idx, grp, cnt = _vertices_between(gm, core_lo, core_hi)
    fit = fit_circles(chains.coords[idx, 0], chains.coords[idx, 1], grp, n)
    ridx, rgrp, _ = _vertices_between(gm, run_lo, run_hi)
    lo_m, hi_m = core_lo.copy(), core_hi.copy()
    for _ in range(3):
        d = np.abs(np.hypot(chains.coords[ridx, 0] - fit.cx[rgrp],
                            chains.coords[ridx, 1] - fit.cy[rgrp]) - fit.radius[rgrp])
        tol = np.maximum(3.0 * np.nan_to_num(fit.rmse, nan=0.0), config.circle_tolerance_m)
        bad = ~(d <= tol[rgrp])
        lo_m, hi_m = _grow(gm[ridx], rgrp, bad, core_lo, core_hi, n)
        idx, grp, cnt = _vertices_between(gm, lo_m, hi_m)
        ok_groups = np.bincount(grp, minlength=n) >= 3
        new = fit_circles(chains.coords[idx, 0], chains.coords[idx, 1], grp, n)
        for name in ("cx", "cy", "radius", "radius_se", "rmse", "n"):
            getattr(fit, name)[ok_groups] = getattr(new, name)[ok_groups]
    circ_start = lo_m - gbase
    circ_end = hi_m - gbase
    # ramps: extrapolate the quarter and three-quarter crossings to zero curvature
    hw = half[run_chain] * config.station_spacing_m
    s25a, s75a = s[b["q25_first"]], s[b["q75_first"]]
    s25b, s75b = s[b["q25_last"]], s[b["q75_last"]]
    start = np.minimum(s25a - 0.5 * np.maximum(s75a - s25a, 0.0), circ_start)
    end = np.maximum(s25b + 0.5 * np.maximum(s25b - s75b, 0.0), circ_end)
    start = np.where(circ_start - start < 0.75 * hw, circ_start, start)
    end = np.where(end - circ_end < 0.75 * hw, circ_end, end)
    start = np.maximum(start, s[first] - hw)
    end = np.minimum(end, s[last] + hw)
    lengths = chains.lengths[run_chain]
    start = np.clip(start, 0.0, lengths)
    end = np.clip(end, 0.0, lengths)
    step = np.r_[np.diff(s), 0.0]
    step[np.r_[stations.chain[1:] != stations.chain[:-1], True]] = 0.0
    csum = np.cumsum(kappa * step)
    turn = csum[last] - np.where(first > 0, csum[first - 1], 0.0)
    radius = fit.radius
    keep = np.isfinite(radius) & (radius <= config.max_radius_m) & (radius > 0)
    circ_len = circ_end - circ_start
    circ_defl = np.degrees(circ_len / np.where(radius > 0, radius, np.nan))
    rel_se = fit.radius_se / radius
    reliability = np.where(
        (fit.n < 4) | (circ_defl < 2.0) | ~(rel_se <= 0.25), "poor",
        np.where((fit.n < 6) | ~(rel_se <= 0.10), "fair", "good"))
    frame = pd.DataFrame({
        "chain_id": run_chain,
        "s_start_m": start,
        "s_end_m": end,
        "circ_start_m": circ_start,
        "circ_end_m": circ_end,
        "radius_m": radius,
        "radius_se_m": fit.radius_se,
        "length_m": end - start,
        "circular_length_m": circ_len,
        "transition_in_m": circ_start - start,
        "transition_out_m": end - circ_end,
        "deflection_deg": np.abs(np.degrees(turn)),
        "direction": np.where(turn > 0, "left", "right"),
        "fit_rmse_m": fit.rmse,
        "fit_vertices": fit.n,
        "reliability": reliability,
        "center_x": fit.cx,
        "center_y": fit.cy,
    })
    frame = resolve_overlaps(frame[keep])
    frame.insert(0, "curve_id", np.arange(1, len(frame) + 1, dtype=np.int64))
    return frame


def _grow(gmv, grp, bad, core_lo, core_hi, n):
    """Measures of the first and last vertex of the contiguous good run around the core."""
    inf = np.inf
    bad_before = np.where(bad & (gmv < core_lo[grp]), gmv, -inf)
    last_bad_before = np.full(n, -inf)
    np.maximum.at(last_bad_before, grp, bad_before)
    bad_after = np.where(bad & (gmv > core_hi[grp]), gmv, inf)
    first_bad_after = np.full(n, inf)
    np.minimum.at(first_bad_after, grp, bad_after)
    good_lo = np.where(~bad & (gmv > last_bad_before[grp]), gmv, inf)
    lo = np.full(n, inf)
    np.minimum.at(lo, grp, good_lo)
    good_hi = np.where(~bad & (gmv < first_bad_after[grp]), gmv, -inf)
    hi = np.full(n, -inf)
    np.maximum.at(hi, grp, good_hi)
    lo = np.where(np.isfinite(lo), np.minimum(lo, core_lo), core_lo)
    hi = np.where(np.isfinite(hi), np.maximum(hi, core_hi), core_hi)
    return lo, hi
