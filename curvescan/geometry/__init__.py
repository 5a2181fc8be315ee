"""Stage: geometry. Stations, curvature, curves and their circular parts, segments.

The entry point is :func:`find_curves`; see ``docs/geometry.md`` for the method and for
why the defaults are what they are.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pyproj

from ..declare import Param
from ._ragged import expand, find, range_quantile, scatter_max, scatter_min
from .circular import (
    Profile,
    circular_parts,
    consensus_tolerance,
    cumulative_turn,
    half_level_span,
)
from .circlefit import circle_covariance, fit_circles
from .noise import local_vertex_noise, vertex_noise
from .pieces import piece_table, resolve_overlaps
from . import _kernels as kn
from .resample import (chord_curvature, make_stations, resample_stations,
                       shape_vertex_classes)
from .segment import find_runs
from . import spirals as sp
from .stations import Stations

__all__ = ["PARAMETERS", "GeometryResult", "find_curves", "Stations", "chord_tolerance_for"]

PARAMETERS: tuple[Param, ...] = (
    Param("station_spacing_m", "float", 4.0,
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
    Param("circle_tolerance_m", "float", 0.005,
          "Least distance from the fitted circle within which a vertex still belongs to the "
          "circular part (raised to 2.5 times the vertex noise or fit RMSE).", unit="m",
          stage="geometry", minimum=0.001, maximum=10.0, advanced=True),
    Param("chord_vertex_tolerance_m", "float", None,
          "A vertex within this distance of the segment between its two neighbours, where "
          "neither neighbour lies so on its own, carries no shape (a point added where a "
          "feature was split or a side road joins) and is left out of the curve search and "
          "fits; on a line cut into short pieces along its own segments (densified) every "
          "vertex within this distance of the line through the vertices kept around it. "
          "Output lines keep every vertex. Default: 0.006 for input in degrees (stored "
          "rounded, OpenStreetMap's to 1e-7 degree), else 0.001. 0 leaves out only exactly "
          "collinear ones.",
          unit="m", stage="geometry", minimum=0.0, maximum=1.0, advanced=True),
    Param("min_significance", "float", 3.0,
          "Keep a curve only when its curvature is this many statistical standard errors "
          "from zero (radius / its noise-only standard deviation); rejects noise on "
          "straight roads.",
          stage="geometry", minimum=0.0, maximum=100.0, advanced=True),
)


@dataclass
class GeometryResult:
    """What the geometry stage gives the later stages."""

    stations: Stations
    curves: pd.DataFrame
    segments: pd.DataFrame
    #: input vertices, those left out as carrying no shape, and chains found densified
    vertices: dict = None  # type: ignore[assignment]


def _chain_half_windows(chains: Any, spacing: float, smoothing: float) -> np.ndarray:
    """Half-window in stations per chain: half the smoothing length, widened to the
    chain's median vertex spacing so a window always spans several vertices."""
    if kn.compiled():
        med = kn.median_segment_kernel(np.asarray(chains.measure, dtype=float),
                                       np.asarray(chains.offsets, dtype=np.int64))
        half = np.maximum(0.5 * smoothing, 1.0 * med)
        return np.maximum(np.round(half / spacing).astype(np.int64), 1)
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


def find_curves(chains: Any, config: Any, *, keep_stations: bool = True,
                progress: Any = None) -> GeometryResult:
    """Find curves on every chain and fit their circular parts.

    Parameters
    ----------
    chains : curvescan.prepare.Chains
    config : ScanConfig
        Uses the geometry parameters (``station_spacing_m``, ``smoothing_length_m``,
        ``max_radius_m``, ``min_deflection_deg``, ``min_curve_length_m``,
        ``circle_tolerance_m``, ``min_significance``).
    keep_stations : bool
        Return the stations (the terrain stage needs them with a DEM); without, memory
        stays bounded by one batch of chains.
    progress : callable, optional
        Called with the fraction of chains done after each batch (it may raise to cancel).

    Returns
    -------
    GeometryResult
        ``curves`` has one row per curve (see docs/output.md); ``segments`` one row per
        tangent, transition or circular piece of every chain.
    """
    config = chord_tolerance_for(config, None)  # a caller that gives no input CRS
    spacing = config.station_spacing_m
    est = np.ceil(chains.lengths / spacing).astype(np.int64) + 2
    batch = (np.cumsum(est) - est) // BATCH_STATIONS
    firsts = np.flatnonzero(np.r_[True, batch[1:] != batch[:-1]])
    bounds = np.r_[firsts, chains.n_chains]
    curves, segments, stations = [], [], []
    counts = {"input": 0, "left_out_on_chords": 0, "densified_chains": 0}
    n_curves = n_stations = 0
    for c0, c1 in zip(bounds[:-1], bounds[1:]):
        part = _batch(_subset(chains, int(c0), int(c1)), config)
        cur, seg = part.curves, part.segments
        cur["chain_id"] += c0
        seg["chain_id"] += c0
        cur["curve_id"] += n_curves
        seg["curve_id"] = np.where(seg["curve_id"] > 0, seg["curve_id"] + n_curves, 0)
        n_curves += len(cur)
        for key in counts:
            counts[key] += part.vertices[key]
        curves.append(cur)
        segments.append(seg)
        if keep_stations:
            st = part.stations
            st.chain = st.chain + c0
            st.offsets = st.offsets + n_stations
            n_stations += len(st)
            stations.append(st)
        if progress is not None:
            progress(float(c1) / max(chains.n_chains, 1))
    return GeometryResult(
        stations=_concat_stations(stations) if keep_stations else None,
        curves=pd.concat(curves, ignore_index=True),
        segments=pd.concat(segments, ignore_index=True), vertices=counts)


#: ``chord_vertex_tolerance_m`` where not given: points put on a segment by software are
#: exact to floating point; :data:`CHORD_TOLERANCE_DEGREES_M` where the input is in degrees
#: (see :func:`chord_tolerance_for`).
CHORD_TOLERANCE_M = 0.001
#: Coordinates stored in degrees are usually rounded (OpenStreetMap's to 1e-7 degree, 11 mm
#: of latitude): a point put on a segment lies up to about 6 mm off it.
CHORD_TOLERANCE_DEGREES_M = 0.006


def chord_tolerance_for(config: Any, input_crs: Any) -> Any:
    """``config`` with ``chord_vertex_tolerance_m`` set from the input CRS where not given."""
    if config.chord_vertex_tolerance_m is not None:
        return config
    geographic = input_crs is not None and pyproj.CRS.from_user_input(input_crs).is_geographic
    return config.replace(chord_vertex_tolerance_m=CHORD_TOLERANCE_DEGREES_M if geographic
                          else CHORD_TOLERANCE_M)


#: Chains are processed in batches of about this many stations, so memory stays bounded
#: on a region of any size (results do not depend on the batching).
BATCH_STATIONS = 2_000_000


def _subset(chains: Any, c0: int, c1: int) -> Any:
    """The chains ``c0 .. c1-1`` as a :class:`curvescan.prepare.Chains` of their own."""
    v0, v1 = int(chains.offsets[c0]), int(chains.offsets[c1])
    return _with_vertices(chains, slice(v0, v1), chains.offsets[c0:c1 + 1] - v0,
                          chains.rows[c0:c1], chains.closed[c0:c1])


def _with_vertices(chains: Any, take: Any, offsets: np.ndarray, rows: Any,
                   closed: np.ndarray) -> Any:
    """A :class:`curvescan.prepare.Chains` of the vertices ``take`` (slice, mask or
    indices) of ``chains``, with the given chain offsets, input rows and ring flags."""
    rev = chains.vertex_reversed
    return type(chains)(
        coords=chains.coords[take], offsets=offsets, vertex_row=chains.vertex_row[take],
        measure=chains.measure[take], crs=chains.crs, rows=rows, closed=closed,
        vertex_reversed=None if rev is None else rev[take])


def _concat_stations(parts: list) -> Stations:
    offsets = np.concatenate([parts[0].offsets[:1]] + [p.offsets[1:] for p in parts])
    return Stations(*(np.concatenate([getattr(p, k) for p in parts])
                      for k in ("x", "y", "s", "heading", "curvature", "chain")),
                    offsets=offsets)


def _shape_chains(chains: Any, tol: float) -> tuple[Any, np.ndarray]:
    """The chains without the vertices that carry no shape, and which chains are densified
    (:func:`shape_vertex_classes`)."""
    keep, densified = shape_vertex_classes(chains.coords, chains.offsets, tol)
    if keep.all():
        return chains, densified
    n_chains = len(chains.offsets) - 1
    chain_of = np.repeat(np.arange(n_chains), np.diff(chains.offsets))
    offsets = np.r_[0, np.cumsum(np.bincount(chain_of[keep], minlength=n_chains))]
    return _with_vertices(chains, keep, offsets.astype(chains.offsets.dtype), chains.rows,
                          chains.closed), densified


def _batch(all_chains: Any, config: Any) -> GeometryResult:
    """Curves of one batch of chains (the whole method; see :func:`find_curves`)."""
    spacing = config.station_spacing_m
    # a point on the chord of its neighbours carries no shape; output lines keep it
    chains, densified = _shape_chains(all_chains, config.chord_vertex_tolerance_m)
    st = resample_stations(chains.coords, chains.measure, chains.offsets, spacing)
    s, gs, chain, st_off, gm, base = (st[k] for k in ("s", "gs", "chain", "st_off", "gm",
                                                        "base"))
    xy = (st["x"], st["y"])
    half_fine = _chain_half_windows(chains, spacing, config.smoothing_length_m)
    kf = chord_curvature(xy, s, chain, st_off, half_fine)
    # noise per chain, with the sagitta of real curvature removed
    near = _near_vertices(gs, gm)  # the stations either side of each vertex
    k_wide = chord_curvature(xy, s, chain, st_off, 3 * half_fine, at=near)
    k_at_vertex = np.interp(gm, gs[near], k_wide)
    sigma = vertex_noise(chains.coords, chains.offsets, chains.measure, k_at_vertex)
    if densified.any():
        # densified chains lost the zero offsets of their exact tangents with the collinear
        # vertices; the wide curvature's sagitta misreads short sharp arcs as noise there
        d = np.flatnonzero(densified)
        sub = _subset_vertices(chains, d)
        sigma[d] = np.minimum(sigma[d], local_vertex_noise(*sub))
    # detection scale: long enough that noise curvature stays well below 1/max_radius
    det_m = np.sqrt(10.0 * sigma * config.max_radius_m)
    half_det = np.maximum(half_fine, np.round(np.minimum(det_m, 150.0) / spacing).astype(np.int64))
    kd = chord_curvature(xy, s, chain, st_off, half_det)
    stations = make_stations(xy, s, chain, st_off, kf, st["heading"])
    kappa_on = 1.0 / config.max_radius_m
    first, last = find_runs(
        kd, s, chain, kappa_on=kappa_on, kappa_off=0.5 * kappa_on,
        min_deflection_rad=0.5 * np.radians(config.min_deflection_deg),
        min_length_m=config.min_curve_length_m,
        merge_gap_m=0.5 * config.smoothing_length_m,
    )
    # curvature at several scales; each piece is read at the finest one its noise allows
    max_half = np.maximum(np.round(150.0 / spacing).astype(np.int64), half_fine)
    halves = [np.minimum(half_fine * f, max_half) for f in SCALE_FACTORS]
    # the coarser scales are read only in and around curve runs: compute them there
    active = _around_runs(first, last, s, chain, st_off, half_det * spacing + 2 * 150.0)
    K = np.zeros((len(SCALE_FACTORS), len(s)))
    K[0] = kf
    for i, h in enumerate(halves[1:], start=1):
        chord_curvature(xy, s, chain, st_off, h, at=active, out=K[i])
    prof = Profile(s=s, gs=gs, K=K, chain=chain, gm=gm, coords=chains.coords,
                   v_off=chains.offsets, sigma=sigma,
                   half_m=np.stack(halves).astype(float) * spacing)
    level = range_quantile(K, np.ones(len(first), dtype=np.int64), first, last, 0.9)
    parts = circular_parts(prof, first, last, level,
                           tolerance_floor_m=config.circle_tolerance_m,
                           min_length_m=config.min_curve_length_m,
                           min_deflection_rad=0.5 * np.radians(config.min_deflection_deg))
    # the tangents are fitted to every vertex: on a densified chain the collinear vertices
    # of an exact tangent are left out of the shape, and its ends alone are no line fit
    n_all = np.diff(all_chains.offsets)
    all_gm = all_chains.measure + np.repeat(base, n_all)
    every = (all_chains.coords, all_gm, all_chains.offsets)
    curves = _assemble(prof, parts, first, last, half_det * spacing, base, chains, config,
                       every)
    segments = piece_table(all_chains, curves)
    counts = {"input": int(len(all_chains.coords)),
              "left_out_on_chords": int(len(all_chains.coords) - len(chains.coords)),
              "densified_chains": int(np.count_nonzero(densified))}
    return GeometryResult(stations=stations, curves=curves, segments=segments,
                          vertices=counts)


def _subset_vertices(chains: Any, which: np.ndarray) -> tuple[np.ndarray, ...]:
    """Coordinates, offsets and measures of the chains ``which`` (sorted)."""
    counts = np.diff(chains.offsets)[which]
    idx, _ = expand(chains.offsets[which], counts)
    return (chains.coords[idx], np.r_[0, np.cumsum(counts)].astype(np.int64),
            chains.measure[idx])


def _near_vertices(gs: np.ndarray, gm: np.ndarray) -> np.ndarray:
    """Sorted indices of the stations either side of each vertex (global measures)."""
    if kn.compiled():
        return kn.near_vertex_kernel(gs, gm)
    j = np.clip(np.searchsorted(gs, gm), 1, len(gs) - 1)
    mark = np.zeros(len(gs), dtype=bool)
    mark[j - 1] = mark[j] = True
    return np.flatnonzero(mark)


def _around_runs(first, last, s, chain, st_off, margin_m):
    """Station indices within each run, extended by the run's length plus ``margin_m``
    (per chain) on both sides, clipped to the chain."""
    if len(first) == 0:
        return np.zeros(0, dtype=np.int64)
    ch = chain[first]
    run_len = s[last] - s[first]
    reach = run_len + margin_m[ch]
    step = np.maximum(np.diff(s)[np.minimum(first, len(s) - 2)], 1e-9)
    extra = np.ceil(reach / step).astype(np.int64)
    a = np.maximum(first - extra, st_off[ch])
    b = np.minimum(last + extra, st_off[ch + 1] - 1)
    mark = (np.bincount(a, minlength=len(s) + 1)
            - np.bincount(b + 1, minlength=len(s) + 1))
    return np.flatnonzero(np.cumsum(mark[:-1]) > 0)


#: Multiples of the fine half window at which curvature is computed.
SCALE_FACTORS = (1, 2, 4, 8)

#: Prior weight (in degrees of freedom) of the chain's noise estimate when the radius
#: standard error is computed from a fit with few vertices.
PRIOR_DOF = 4.0


#: Reliability classes: ``good`` needs a relative radius standard error of at most
#: GOOD_REL_SE (two standard errors within 10 %) and 6 vertices; above POOR_REL_SE, under 4
#: vertices or 2 degrees of circular arc it is ``poor``; ``fair`` between.
GOOD_REL_SE = 0.05
POOR_REL_SE = 0.25

#: Shares of the consensus tolerance and of the fit RMSE taken as a systematic offset of
#: the vertices in the radius standard error; calibrated with benchmarks/accuracy.py so
#: that two standard errors cover 90-98 % of true radii in every scenario.
SYSTEMATIC_TOL_SHARE = 0.15
SYSTEMATIC_RMSE_SHARE = 0.25


def _radius_se(parts: dict, sigma_chain: np.ndarray, tolerance_floor_m: float) -> np.ndarray:
    """Radius standard error with the fit's residual variance pooled with the chain noise.

    ``radius_se`` from the fit is ``s * sqrt(C_rr)`` with ``s^2 = RSS/(n-3)``. The pooled
    variance ``(RSS + nu0 * sigma^2) / (n - 3 + nu0)`` keeps a three- or four-vertex fit
    from claiming a tiny error, and a Student-t factor makes two standard errors cover
    about 95 %.
    """
    from scipy.special import stdtrit  # Student-t quantile, without scipy.stats' import cost

    n = parts["n"].astype(float)
    dof = np.maximum(n - 3.0, 0.0)
    sig = sigma_chain[parts["chain"].astype(np.int64)]
    factor = stdtrit(dof + PRIOR_DOF, 0.975) / 2.0
    statistical = _radius_sd(parts, sigma_chain) * factor
    # systematic part: departures from the circle that the consensus tolerance lets in
    # (transition vertices near the arc's ends) do not average out over the vertices
    tol = consensus_tolerance(sig, tolerance_floor_m)
    amplitude = np.maximum(SYSTEMATIC_TOL_SHARE * tol, SYSTEMATIC_RMSE_SHARE * parts["rmse"])
    systematic = parts["radius_sd_unit"] * np.sqrt(n) * amplitude
    return np.hypot(statistical, systematic)


#: Parts with at most this many vertices get the shift spread in their standard error.
FEW_VERTICES = 5
#: Share of the shift spread taken as a standard error (calibrated with
#: benchmarks/accuracy.py on sparse vertices).
SHIFT_SHARE = 0.5


def _shift_spread(prof: Any, parts: dict, tolerance_floor_m: float) -> np.ndarray:
    """Radius uncertainty of a fit through few vertices, from its neighbours.

    Three to five vertices fit a circle (nearly) exactly, so their residuals say nothing
    about whether they all lie on the arc: on sparse vertices some belong to a transition.
    The same fit moved one vertex back and one forward along the chain shows how fast the
    radius changes there; :data:`SHIFT_SHARE` of the larger change is taken as a standard
    error. Zero for parts with more than :data:`FEW_VERTICES` vertices and for parts of
    four or more vertices that lie within the consensus tolerance of their circle.
    """
    i0 = parts["i0"].astype(np.int64)
    i1 = parts["i1"].astype(np.int64)
    chain = parts["chain"].astype(np.int64)
    # only where the consensus could not vouch for the vertices: three (always on a
    # circle) or a few that miss the circle by more than the consensus tolerance
    tol = consensus_tolerance(prof.sigma[chain], tolerance_floor_m)
    unsure = (i1 - i0 <= 3) | (parts["rmse"] > tol)
    few = np.flatnonzero((i1 - i0 <= FEW_VERTICES) & unsure & np.isfinite(parts["radius"]))
    out = np.zeros(len(i0))
    if len(few) == 0:
        return out
    lo, hi = prof.v_off[chain[few]], prof.v_off[chain[few] + 1]
    # from the part's second vertex to its centre
    to_centre = np.column_stack([parts["cx"][few], parts["cy"][few]]) - prof.coords[i0[few] + 1]
    spread = np.zeros(len(few))
    for step in (-1, 1):
        a, b = i0[few] + step, i1[few] + step
        ok = (a >= lo) & (b <= hi)
        idx, grp = expand(np.where(ok, a, 0), np.where(ok, b - a, 0))
        fit = fit_circles(prof.coords[idx, 0], prof.coords[idx, 1], grp, len(few),
                          refine=False)
        # the moved circle must bend the same way (its centre on the same side)
        moved = np.column_stack([fit.cx, fit.cy]) - prof.coords[
            np.clip(a + 1, 0, len(prof.coords) - 1)]
        same_side = moved[:, 0] * to_centre[:, 0] + moved[:, 1] * to_centre[:, 1] > 0
        change = np.abs(fit.radius - parts["radius"][few])
        use = ok & same_side & np.isfinite(change)
        spread = np.where(use, np.maximum(spread, change), spread)
    out[few] = SHIFT_SHARE * spread
    return out


def _turn_significant(prof, parts: dict, significant: np.ndarray, base: np.ndarray,
                      lengths: np.ndarray, config: Any) -> np.ndarray:
    """Parts whose circle fit is too weak to show the road bends (a short arc on two or
    three vertices) but whose heading change is: the turn at the part's scale from one
    window before to one window after it, against the noise of that turn (two chord
    headings, each with standard deviation about sqrt(2) sigma / window), at least
    ``min_deflection_deg`` and at least one window clear of every part kept on its own
    (a weak part beside a well-fitted one is the fit's split of that curve or the
    curvature window's blur of its end, not a curve of its own)."""
    n = len(parts["radius"])
    out = np.zeros(n, dtype=bool)
    weak = np.flatnonzero(~significant & np.isfinite(parts["radius"]))
    if not len(weak):
        return out
    chain = parts["chain"].astype(np.int64)
    scale = parts["scale"].astype(np.int64)
    reach = prof.half_m[scale, chain]
    lo = np.maximum(parts["lo"] - reach, base[chain])
    hi = np.minimum(parts["hi"] + reach, base[chain] + lengths[chain])
    i_s = find(prof.gs, lo, side="left")
    i_e = np.maximum(find(prof.gs, hi, side="right") - 1, i_s)
    turn = np.zeros(n)
    for j in np.unique(scale[weak]):
        m = weak[scale[weak] == j]
        csum = cumulative_turn(prof, int(j))
        turn[m] = csum[i_e[m]] - csum[i_s[m]]
    sd = 2.0 * prof.sigma[chain] / reach
    with np.errstate(invalid="ignore", divide="ignore"):
        strong = ((np.abs(turn) >= np.radians(config.min_deflection_deg))
                  & (np.abs(turn) / sd >= config.min_significance)
                  & (np.sign(turn) == parts["sign"]))
    # clear of the parts kept on their own
    sure = np.flatnonzero(significant)
    cand = weak[strong[weak]]
    if len(cand) and len(sure):
        a = (parts["lo"] - reach)[cand][:, None] < parts["hi"][sure][None, :]
        b = (parts["hi"] + reach)[cand][:, None] > parts["lo"][sure][None, :]
        same = chain[cand][:, None] == chain[sure][None, :]
        cand = cand[~(a & b & same).any(axis=1)]
    out[cand] = True
    return out


def _radius_sd(parts: dict, sigma_chain: np.ndarray) -> np.ndarray:
    """Statistical standard deviation of the radius: the fit's geometry times the pooled
    residual and chain noise (no Student-t factor, no systematic share)."""
    n = parts["n"].astype(float)
    dof = np.maximum(n - 3.0, 0.0)
    sig = sigma_chain[parts["chain"].astype(np.int64)]
    pooled = np.sqrt((parts["rmse"] ** 2 * n + PRIOR_DOF * sig ** 2) / (dof + PRIOR_DOF))
    return parts["radius_sd_unit"] * pooled


def _ramp_end(prof: Profile, a: np.ndarray, b: np.ndarray, level: np.ndarray, sign: np.ndarray,
              scale: np.ndarray, outward: int) -> np.ndarray:
    """Where the curvature ramp between stations ``a``..``b`` meets zero.

    ``outward`` is -1 for the start side (search backward from ``b``) and +1 for the end
    side (search forward from ``a``). The ramp is the line through the points where the
    curvature crosses a quarter and three quarters of ``level``.
    """
    n = len(a)
    idx, grp = expand(a, np.maximum(b - a + 1, 0))
    k = prof.k(scale[grp], idx) * sign[grp]
    out = {}
    for frac in (0.25, 0.75):
        below = k < frac * level[grp]
        if outward < 0:
            pos = np.full(n, -1)
            scatter_max(pos, grp[below], idx[below])
            pos = np.where(pos < 0, a, pos)
        else:
            pos = np.full(n, np.iinfo(np.int64).max)
            scatter_min(pos, grp[below], idx[below])
            pos = np.where(pos == np.iinfo(np.int64).max, b, pos)
        out[frac] = prof.s[pos]
    s25, s75 = out[0.25], out[0.75]
    return s25 - 0.5 * (s75 - s25)


#: A later-round part on three vertices next to a sharper part of its run is folded into
#: that curve's transition (:func:`_flat_fragments`).
DROP_FLAT_END_FRAGMENTS = True


def _flat_fragments(parts: dict, keep: np.ndarray) -> np.ndarray:
    """Parts found after the first round on only three vertices (a circle through three
    points, no redundancy) whose kept neighbour in the same run is sharper.

    On sparse vertices the last vertex of an arc and the first two of its transition make
    such a part: a flatter "second arc" beside the first. The data cannot tell it from a
    compound curve's flatter arc, but either way the sharper neighbour governs the curve,
    and the stretch stays in that curve as transition.
    """
    n = len(parts["radius"])
    out = np.zeros(n, dtype=bool)
    if n < 2:
        return out
    order = np.lexsort((parts["lo"], parts["piece"]))
    piece = parts["piece"][order]
    radius = np.where(keep[order], parts["radius"][order], np.inf)
    cand = (parts["n"][order] <= 3) & (parts["round"][order] > 0) & keep[order]
    same_prev = np.r_[False, piece[1:] == piece[:-1]]
    same_next = np.r_[piece[1:] == piece[:-1], False]
    sharper_prev = same_prev & (np.r_[np.inf, radius[:-1]] < radius)
    sharper_next = same_next & (np.r_[radius[1:], np.inf] < radius)
    out[order] = cand & (sharper_prev | sharper_next)
    return out


#: Circular parts of one run meet halfway only where their ramps reach each other.
MEET_ONLY_WHERE_RAMPS_DO = True


def _assemble(prof, parts, first, last, half_det_m, base, chains, config,
              every) -> pd.DataFrame:
    """One curve per circular part: extents, transitions, deflection, fit quality.

    ``every``: coordinates, global measures and chain offsets of all the chains' vertices
    (the tangents beside the curves are fitted to them)."""
    se = np.hypot(_radius_se(parts, prof.sigma, config.circle_tolerance_m),
                  _shift_spread(prof, parts, config.circle_tolerance_m))
    radius = parts["radius"]
    with np.errstate(invalid="ignore", divide="ignore"):
        # existence is a question of noise only: the curvature against its purely
        # statistical standard error (the systematic share of ``se`` is about how well
        # the radius is known, not whether the road bends)
        significant = radius / _radius_sd(parts, prof.sigma) >= config.min_significance
    significant |= _turn_significant(prof, parts, significant, base, chains.lengths, config)
    keep = np.isfinite(radius) & (radius > 0) & (radius <= config.max_radius_m)
    keep &= significant | ~np.isfinite(se)
    if DROP_FLAT_END_FRAGMENTS:
        keep &= ~_flat_fragments(parts, keep)
    p = {k: v[keep] for k, v in parts.items()}
    se = se[keep]
    order = np.lexsort((p["lo"], p["piece"]))
    p = {k: v[order] for k, v in p.items()}
    se = se[order]
    n = len(order)
    chain = p["chain"].astype(np.int64)
    piece = p["piece"].astype(np.int64)
    gbase = base[chain]
    scale = p["scale"].astype(np.int64)
    sign = p["sign"]
    # the circular part lies where the fitted vertices are and the curvature is above
    # half the circle's: with sparse vertices the fit reaches into the tangents
    half_lo, half_hi = _half_level_extent(prof, p, sign, scale, gbase)
    # the arc ends somewhere between its last fitted vertex and the first one left out:
    # halfway is the unbiased guess
    i0 = p["i0"].astype(np.int64)
    i1 = p["i1"].astype(np.int64)
    first_v = prof.v_off[chain]
    last_v = prof.v_off[chain + 1] - 1
    out_lo = prof.gm[np.maximum(i0 - 1, first_v)]
    out_hi = prof.gm[np.minimum(i1, last_v)]
    arc_lo = 0.5 * (p["lo"] + np.where(i0 > first_v, out_lo, p["lo"]))
    arc_hi = 0.5 * (p["hi"] + np.where(i1 <= last_v, out_hi, p["hi"]))
    circ_start = np.maximum(arc_lo - gbase, half_lo)
    circ_end = np.minimum(arc_hi - gbase, half_hi)
    bad = circ_end <= circ_start
    mid = 0.5 * (p["lo"] + p["hi"]) - gbase
    circ_start = np.where(bad, mid, circ_start)
    circ_end = np.where(bad, mid, circ_end)
    level = 1.0 / p["radius"]
    # neighbours within the same run (compound curves) meet halfway between their arcs
    same_prev = np.r_[False, piece[1:] == piece[:-1]]
    same_next = np.r_[piece[1:] == piece[:-1], False]
    hw = half_det_m[chain]
    lengths = chains.lengths[chain]
    # where to look for each transition: from the circular part outward, as far again as
    # the run reaches beyond it (a gentle transition starts below the run threshold), but
    # not past the neighbouring circular part on the chain
    run_lo = prof.s[first[piece]] - hw
    run_hi = prof.s[last[piece]] + hw
    chain_prev = np.r_[False, chain[1:] == chain[:-1]]
    chain_next = np.r_[chain[1:] == chain[:-1], False]
    # (where neighbouring circular parts overlap, not past this part's own: the overlap is
    # settled in ``resolve_overlaps``, and a transition is never negative)
    prev_end = np.minimum(np.where(chain_prev, np.r_[0.0, circ_end[:-1]], 0.0), circ_start)
    next_start = np.maximum(np.where(chain_next, np.r_[circ_start[1:], 0.0], lengths), circ_end)
    look_lo = np.maximum(circ_start - 2.0 * np.maximum(circ_start - run_lo, 0.0), prev_end)
    look_hi = np.minimum(circ_end + 2.0 * np.maximum(run_hi - circ_end, 0.0), next_start)
    a = find(prof.gs, np.maximum(look_lo, 0.0) + gbase, side="left")
    b = find(prof.gs, p["lo"], side="right") - 1
    start = np.minimum(_ramp_end(prof, a, np.maximum(b, a), level, sign, scale, -1), circ_start)
    a2 = find(prof.gs, p["hi"], side="left")
    b2 = find(prof.gs, np.minimum(look_hi, lengths) + gbase, side="right") - 1
    end = np.maximum(_ramp_end(prof, a2, np.maximum(b2, a2), level, sign, scale, +1), circ_end)
    fine = prof.half_m[scale, chain]
    start = np.where(circ_start - start < 0.75 * fine, circ_start, start)
    end = np.where(end - circ_end < 0.75 * fine, circ_end, end)
    # a transition needs vertices that leave the line touching the arc at its end: where
    # every vertex of the ramp lies on that line (within the consensus tolerance), the
    # ramp is the curvature window's blur of a plain tangent, as on sparse vertices
    tol = consensus_tolerance(prof.sigma[chain], config.circle_tolerance_m)
    straight_in = _on_end_tangent(prof, p, start + gbase, i0, i0, tol, first_v, last_v)
    straight_out = _on_end_tangent(prof, p, end + gbase, i1 - 1, i1, tol, first_v, last_v)
    start = np.where(straight_in, circ_start, start)
    end = np.where(straight_out, circ_end, end)
    # neighbours of one run meet halfway where their own ramps reach each other (a
    # compound curve); where they do not, a tangent lies between them (a run is read at a
    # window wide enough to join two curves across a short tangent)
    mid_next = 0.5 * (circ_end[:-1] + circ_start[1:])
    meet = same_next[:-1].copy()
    if MEET_ONLY_WHERE_RAMPS_DO and meet.any():
        # read at the finer of the two parts' scales: a flat arc's coarse window reaches
        # over a short tangent into its sharp neighbour and never sees the tangent
        k = np.flatnonzero(meet)
        fine_scale = np.minimum(scale[k], scale[k + 1])
        out_end = _ramp_end(prof, a2[k], np.maximum(b2[k], a2[k]), level[k], sign[k],
                            fine_scale, +1)
        in_start = _ramp_end(prof, a[k + 1], np.maximum(b[k + 1], a[k + 1]), level[k + 1],
                             sign[k + 1], fine_scale, -1)
        meet[k] = out_end >= in_start
    end[:-1] = np.where(meet, mid_next, np.where(same_next[:-1],
                                                 np.minimum(end[:-1], mid_next), end[:-1]))
    start[1:] = np.where(meet, mid_next, np.where(same_prev[1:],
                                                  np.maximum(start[1:], mid_next), start[1:]))
    start = np.clip(np.maximum(start, look_lo), 0.0, lengths)
    end = np.clip(np.minimum(end, look_hi), 0.0, lengths)
    # neighbouring circular parts never overlap (they meet in the middle of the overlap),
    # and a curve always holds its circular part: no negative transition
    over = np.flatnonzero(chain_next[:-1] & (circ_start[1:] < circ_end[:-1]))
    meet = 0.5 * (circ_start[over + 1] + circ_end[over])
    circ_end[over] = np.maximum(meet, circ_start[over])
    circ_start[over + 1] = np.minimum(meet, circ_end[over + 1])
    if TRANSITIONS_FROM_TANGENTS:
        start, end, circ_start, circ_end = _from_tangents(
            prof, p, chain, gbase, start, end, circ_start, circ_end, se, lengths,
            chain_prev, chain_next, every, hw, config)
    start = np.minimum(start, circ_start)
    end = np.maximum(end, circ_end)
    # deflection over the whole curve, from the curvature at the part's scale; the
    # window blurs curvature up to one half window beyond the curve's ends, so the sum
    # reaches that far, but never into the neighbouring curve of the same chain
    reach = prof.half_m[scale, chain]
    same_chain_prev = np.r_[False, chain[1:] == chain[:-1]]
    same_chain_next = np.r_[chain[1:] == chain[:-1], False]
    lo_lim = np.where(same_chain_prev, np.r_[0.0, end[:-1]], 0.0)
    hi_lim = np.where(same_chain_next, np.r_[start[1:], 0.0], lengths)
    ext_lo = np.maximum(start - reach, np.maximum(lo_lim, 0.5 * (lo_lim + start)))
    ext_hi = np.minimum(end + reach, np.minimum(hi_lim, 0.5 * (hi_lim + end)))
    i_s = find(prof.gs, ext_lo + gbase, side="left")
    i_e = np.maximum(find(prof.gs, ext_hi + gbase, side="right") - 1, i_s)
    turn = np.zeros(n)
    for j in np.unique(scale):
        m = scale == j
        csum = cumulative_turn(prof, int(j))
        turn[m] = csum[i_e[m]] - csum[i_s[m]]
    # an arc of radius R cannot be longer than R times the curve's whole deflection: where
    # sparse or noisy vertices let the fit reach into the tangents, shrink the circular
    # part about its middle (the curve's ends stay)
    # transitions turn half as much per metre as the arc: they take L/(2R) of the deflection
    trans = np.maximum(circ_start - start, 0.0) + np.maximum(end - circ_end, 0.0)
    longest = np.maximum(p["radius"] * np.abs(turn) - 0.5 * trans, 0.2 * p["radius"] * np.abs(turn))
    too_long = (circ_end - circ_start) > longest
    centre = 0.5 * (circ_start + circ_end)
    circ_start = np.where(too_long, np.maximum(centre - 0.5 * longest, start), circ_start)
    circ_end = np.where(too_long, np.minimum(centre + 0.5 * longest, end), circ_end)
    circ_len = circ_end - circ_start
    circ_defl = np.degrees(circ_len / p["radius"])
    rel_se = se / p["radius"]
    nvert = p["n"].astype(int)
    reliability = np.where(
        (nvert < 4) | (circ_defl < 2.0) | ~(rel_se <= POOR_REL_SE), "poor",
        np.where((nvert < 6) | ~(rel_se <= GOOD_REL_SE), "fair", "good"))
    frame = pd.DataFrame({
        "chain_id": chain,
        "s_start_m": start,
        "s_end_m": end,
        "circ_start_m": circ_start,
        "circ_end_m": circ_end,
        "radius_m": p["radius"],
        "radius_se_m": se,
        "length_m": end - start,
        "circular_length_m": circ_len,
        "transition_in_m": circ_start - start,
        "transition_out_m": end - circ_end,
        "deflection_deg": np.abs(np.degrees(turn)),
        "direction": np.where(sign > 0, "left", "right"),
        "fit_rmse_m": p["rmse"],
        "fit_vertices": nvert,
        "reliability": reliability,
        "noise_m": prof.sigma[chain],
        "on_ring": chains.closed[chain].astype(bool),
        "center_x": p["cx"],
        "center_y": p["cy"],
    })
    ok = (frame["deflection_deg"] >= config.min_deflection_deg) & (
        frame["length_m"] >= config.min_curve_length_m)
    frame = resolve_overlaps(frame[ok.to_numpy()])
    frame.insert(0, "curve_id", np.arange(1, len(frame) + 1, dtype=np.int64))
    return frame


#: Curve ends and transitions from the shift between the fitted tangents and circle
#: (:mod:`curvescan.geometry.spirals`) where a tangent lies next to the curve.
TRANSITIONS_FROM_TANGENTS = True


def _from_tangents(prof, p, chain, gbase, start, end, circ_start, circ_end, se, lengths,
                   chain_prev, chain_next, every, hw, config):
    """Curve and circular-part ends from the tangents on either side (see
    :mod:`curvescan.geometry.spirals`); ends without a usable tangent stay.

    ``every``: coordinates, global measures and chain offsets of the vertices the tangents
    are fitted to."""
    t_xy, t_gm, t_off = every
    first_v, last_v = t_off[chain], t_off[chain + 1] - 1
    n = len(chain)
    if n == 0:
        return start, end, circ_start, circ_end
    sigma = np.maximum(prof.sigma[chain], config.circle_tolerance_m)
    sign = np.sign(p["sign"]).astype(float)
    cx, cy, r = p["cx"], p["cy"], p["radius"]
    prev_out = np.where(chain_prev, np.r_[0.0, end[:-1]], 0.0)
    next_in = np.where(chain_next, np.r_[start[1:], 0.0], lengths)
    i0 = p["i0"].astype(np.int64)
    idx, grp = expand(i0, p["i1"].astype(np.int64) - i0)
    cov = circle_covariance(prof.coords[idx, 0], prof.coords[idx, 1], grp, n, cx, cy, r, sigma)
    # the tangent windows: from the neighbouring curve (or the chain's end) to a half
    # detection window before the profile's end of the curve (the profile's ends lie
    # inside long transitions), then before each transition found
    in_hi = start - 0.5 * hw
    out_lo = end + 0.5 * hw
    res_in = res_out = None
    for _round in range(sp.ROUNDS):
        lo_in = np.where(chain_prev, np.r_[0.0, out_lo[:-1]], 0.0)
        lo_in = np.maximum(lo_in, prev_out) if _round == 0 else lo_in
        hi_out = np.where(chain_next, np.r_[in_hi[1:], 0.0], lengths)
        hi_out = np.minimum(hi_out, next_in) if _round == 0 else hi_out
        # only the stretch of tangent next to the curve: a long straight may bend gently
        # far from it (flatter than any curve reported)
        lo_in = np.maximum(lo_in, in_hi - sp.MAX_TANGENT_M)
        hi_out = np.minimum(hi_out, out_lo + sp.MAX_TANGENT_M)
        v0, v1 = sp.vertex_window(t_gm, lo_in + gbase, in_hi + gbase, first_v, last_v)
        res_in = sp.tangent_ends(t_xy, t_gm, v0, v1, cx, cy, r, sign, sigma, cov, -1)
        v0, v1 = sp.vertex_window(t_gm, out_lo + gbase, hi_out + gbase, first_v, last_v)
        res_out = sp.tangent_ends(t_xy, t_gm, v0, v1, cx, cy, r, sign, sigma, cov, +1)
        ui, li, oi = res_in[0], res_in[1], res_in[2] - gbase
        uo, lo_, oo = res_out[0], res_out[1], res_out[2] - gbase
        in_hi = np.where(ui, np.minimum(in_hi, oi - sp.MARGIN * li), in_hi)
        out_lo = np.where(uo, np.maximum(out_lo, oo + sp.MARGIN * lo_), out_lo)
    ui, li, oi, ii = res_in[0], res_in[1], res_in[2] - gbase, res_in[3] - gbase
    uo, lo_, oo, io = res_out[0], res_out[1], res_out[2] - gbase, res_out[3] - gbase
    # a circle through a handful of vertices is too loose to place the curve's ends, and
    # one whose radius is known only to several per cent makes transitions out of its own
    # error (its shift from the tangent moves with the radius)
    firm = p["n"] >= sp.MIN_CIRCLE_VERTICES
    loose = ~(se <= sp.MAX_REL_SE * r)
    ui &= firm & ~(loose & (li > 0))
    uo &= firm & ~(loose & (lo_ > 0))
    # a curve keeps a circular part, starts after its neighbour ends and stays on its chain
    new_cs = np.where(ui, ii, circ_start)
    new_ce = np.where(uo, io, circ_end)
    fits = new_cs < new_ce
    ui &= fits & (oi >= np.where(chain_prev, np.r_[0.0, circ_end[:-1]], 0.0)) & (oi >= 0)
    uo &= fits & (oo <= np.where(chain_next, np.r_[circ_start[1:], 0.0], lengths)) & (
        oo <= lengths)
    start = np.where(ui, oi, start)
    circ_start = np.where(ui, ii, circ_start)
    end = np.where(uo, oo, end)
    circ_end = np.where(uo, io, circ_end)
    # neighbours never overlap: a shared tangent too short for both transitions is split
    over = np.flatnonzero(chain_next[:-1] & (start[1:] < end[:-1]))
    mid = 0.5 * (start[over + 1] + end[over])
    end[over] = np.maximum(mid, circ_end[over])
    start[over + 1] = np.minimum(mid, circ_start[over + 1])
    return start, end, circ_start, circ_end


def _on_end_tangent(prof, p, ramp_end, touch, edge, tol, first_v, last_v):
    """Whether the vertices between the fitted vertices' ``edge`` and ``ramp_end`` (global
    measure; the outer vertex at or beyond it included) lie each on the circle or on the line
    from the outer vertex touching the circle next to the fitted vertex ``touch``, within
    ``tol``: a plain tangent, no transition. False where no vertex lies there."""
    before = ramp_end < prof.gm[touch]
    outer = np.where(before, np.maximum(find(prof.gm, ramp_end, side="right") - 1, first_v),
                     np.minimum(find(prof.gm, ramp_end, side="left"), last_v))
    # ... and the next vertex out: two vertices fix the tangent's direction
    lo = np.where(before, np.maximum(outer - 1, first_v), edge)
    hi = np.where(before, edge, np.minimum(outer + 2, last_v + 1))
    hi = np.maximum(hi, lo)
    cx, cy, r = p["cx"], p["cy"], p["radius"]
    # the two lines from the outer vertex touching the circle; take the one whose touching
    # point is nearer the fitted vertex
    px, py = prof.coords[outer, 0] - cx, prof.coords[outer, 1] - cy
    dist = np.hypot(px, py)
    half = np.arccos(np.clip(r / np.maximum(dist, 1e-12), -1.0, 1.0))
    base = np.arctan2(py, px)
    tx, ty = prof.coords[touch, 0] - cx, prof.coords[touch, 1] - cy
    ang = np.where(np.cos(base + half - np.arctan2(ty, tx))
                   >= np.cos(base - half - np.arctan2(ty, tx)), base + half, base - half)
    ux, uy = np.cos(ang), np.sin(ang)
    idx, grp = expand(lo, hi - lo)
    vx, vy = prof.coords[idx, 0] - cx[grp], prof.coords[idx, 1] - cy[grp]
    on_line = np.abs(vx * ux[grp] + vy * uy[grp] - r[grp])
    on_circle = np.abs(np.hypot(vx, vy) - r[grp])
    worst = np.zeros(len(lo))
    np.maximum.at(worst, grp, np.minimum(on_line, on_circle))
    return (hi > lo) & (dist >= r) & (worst <= tol)


def _half_level_extent(prof, p, sign, scale, gbase):
    """Stretch around each part's middle where curvature stays above half of 1/R."""
    chain = p["chain"].astype(np.int64)
    reach = prof.half_m[scale, chain]
    a = np.maximum(find(prof.gs, p["lo"] - reach, side="left"),
                   np.searchsorted(prof.chain, chain, side="left"))
    b = np.minimum(find(prof.gs, p["hi"] + reach, side="right") - 1,
                   np.searchsorted(prof.chain, chain, side="right") - 1)
    lo, hi = half_level_span(prof, a, np.maximum(a, b), 0.5 * (p["lo"] + p["hi"]),
                             p["radius"], sign, scale)
    return lo - gbase, hi - gbase
