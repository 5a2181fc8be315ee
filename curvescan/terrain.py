"""Stage: terrain. Superelevation and grade per curve, and where they came from.

Superelevation comes, per curve, from the first source that can give it:

1. ``attribute``: the user's superelevation field (see
   :func:`curvescan.terrain_attr.parse_superelevation` for the percent/fraction rule);
2. ``terrain``: cross-sections of a DEM across every lane of the circular part, a robust
   cross-slope per lane, the lowest lane governing;
3. ``assumed``: a stated assumption (``superelevation_assumption``).

Grade comes from the DEM along the centreline over the curve and its approaches, and is
NaN without a DEM. See ``docs/terrain.md`` for methods, quality words and error figures.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .declare import Param
from .errors import AssumptionWarning, CRSError, DataQualityWarning, InputError
from .geometry.stations import Stations
from .physics.limits import (SUPERELEVATION_RANGE, SUPERELEVATION_RANGE_TEXT,
                             superelevation_accepted)
from .recording import warn_counted
from .terrain_attr import (
    assume_superelevation,
    largest_bare_magnitude,
    parse_number,
    parse_superelevation,
)
from .terrain_fit import (
    ChainIndex,
    centreline_samples,
    cross_sections,
    lane_section_slopes,
    robust_group_mean,
    robust_line_fit,
    window_grades,
)

__all__ = ["PARAMETERS", "OUTPUT_COLUMNS", "evaluate", "run_record", "field_largest_bare"]

_T = "terrain"
PARAMETERS: tuple[Param, ...] = (
    Param("superelevation_field", "field", None,
          "Input field holding superelevation (fraction, or percent; see --superelevation-unit).",
          stage=_T),
    Param("superelevation_unit", "choice", "auto",
          "How bare numbers in the superelevation field are read: auto (percent if any value "
          "exceeds 0.20), percent or fraction; values written with % are always percent.",
          stage=_T, choices=("auto", "percent", "fraction")),
    Param("superelevation_assumption", "choice", "crown",
          "Superelevation where neither attribute nor DEM gives one: crown (normal crown kept, "
          "outer lane adverse), design (AASHTO method 1 from posted speed and radius), zero, "
          "or value (--superelevation-assumed).",
          stage=_T, choices=("crown", "design", "zero", "value")),
    Param("superelevation_assumed", "float", None,
          "Superelevation used with --superelevation-assumption value (fraction).",
          unit="fraction", stage=_T, minimum=SUPERELEVATION_RANGE[0],
          maximum=SUPERELEVATION_RANGE[1]),
    Param("crown_slope", "float", 0.02,
          "Normal crown cross-slope of a lane on tangents (fraction, positive).",
          unit="fraction", stage=_T, minimum=0.0, maximum=0.1, advanced=True),
    Param("superelevation_max", "float", 0.08,
          "Maximum superelevation rate e_max for the design assumption (fraction).",
          unit="fraction", stage=_T, minimum=0.02, maximum=0.2, advanced=True),
    Param("dem_vertical_unit", "choice", "metre",
          "Unit of the DEM's elevation values.", stage=_T, choices=("metre", "foot")),
    Param("lane_width_m", "float", 3.5,
          "Lane width used when no width attribute is given (m).",
          unit="m", stage=_T, minimum=2.0, maximum=6.0),
    Param("lanes", "int", 2,
          "Number of lanes across the carriageway when no lanes attribute is given.",
          stage=_T, minimum=1, maximum=8),
    Param("lanes_field", "field", "lanes",
          "Input field with the lane count (used where present and readable).", stage=_T),
    Param("width_field", "field", "width",
          "Input field with the carriageway width in metres (used where present and readable).",
          stage=_T),
    Param("cross_section_spacing_m", "float", 2.0,
          "Distance between DEM cross-sections along the circular part (m).",
          unit="m", stage=_T, minimum=0.25, maximum=100.0, advanced=True),
    Param("cross_section_step_m", "float", 0.5,
          "Distance between samples across a lane (m).",
          unit="m", stage=_T, minimum=0.05, maximum=5.0, advanced=True),
    Param("grade_approach_m", "float", 50.0,
          "Approach length before and after each curve included in its grade (m).",
          unit="m", stage=_T, minimum=0.0, maximum=1000.0, advanced=True),
    Param("grade_window_m", "float", 30.0,
          "Window over which the steepest downgrade into a curve is measured (m).",
          unit="m", stage=_T, minimum=5.0, maximum=500.0, advanced=True),
    Param("dem_min_cells_per_lane", "float", 2.5,
          "A DEM resolves cross-slope only if a lane spans at least this many cells.",
          stage=_T, minimum=1.0, maximum=20.0, advanced=True),
    Param("dem_max_residual_m", "float", 0.10,
          "Largest RMS residual of the lane fits for a terrain superelevation to be used (m).",
          unit="m", stage=_T, minimum=0.001, maximum=10.0, advanced=True),
)

#: Output columns and dtypes (fixed, so empty inputs and partitions share one schema).
OUTPUT_COLUMNS: dict[str, str] = {
    "superelevation": "float64",
    "superelevation_source": "object",
    "superelevation_se": "float64",
    "superelevation_inner": "float64",
    "superelevation_outer": "float64",
    "superelevation_adverse": "bool",
    "superelevation_assumption": "object",
    "superelevation_dem": "float64",
    "grade": "float64",
    "grade_se": "float64",
    "grade_max_down": "float64",
    "grade_max_down_direction": "object",
    "dem_quality": "object",
    "dem_cell_m": "float64",
    "dem_residual_m": "float64",
    "dem_sections": "int64",
    "dem_coverage": "float64",
}

_MIN_SECTIONS = 3
_TERRAIN_OK = ("good", "partial")


def _col(curves: pd.DataFrame, name: str, default: Any = np.nan) -> np.ndarray:
    if name in curves.columns:
        return curves[name].to_numpy()
    return np.full(len(curves), default, dtype=object if default is None else float)


def _lanes_and_width(curves: pd.DataFrame, config: Any) -> tuple[np.ndarray, np.ndarray]:
    n = len(curves)
    lanes = np.full(n, float(config.lanes))
    if "attr_lanes" in curves.columns:
        v, _, bad = parse_number(curves["attr_lanes"])
        good = np.isfinite(v) & (v >= 1) & (v <= 8) & (v == np.round(v))
        lanes = np.where(good, v, lanes)
        nbad = int((bad | (np.isfinite(v) & ~good)).sum())
        if nbad:
            warn_counted("lanes field: {bad} unusable value(s) ignored (default {lanes} lanes "
                         "used)", DataQualityWarning, {"bad": nbad}, {"lanes": config.lanes},
                         stacklevel=3)
    width = lanes * config.lane_width_m
    if "attr_width_m" in curves.columns:
        v, _, bad = parse_number(curves["attr_width_m"])
        per_lane = v / lanes
        good = np.isfinite(v) & (per_lane >= 2.0) & (per_lane <= 6.0)
        width = np.where(good, v, width)
        nbad = int((bad | (np.isfinite(v) & ~good)).sum())
        if nbad:
            warn_counted("width field: {bad} value(s) unreadable or outside 2-6 m per lane "
                         "ignored (lane width default used)", DataQualityWarning, {"bad": nbad},
                         stacklevel=3)
    return lanes.astype(np.int64), width


def _empty(index: pd.Index) -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=t) for c, t in OUTPUT_COLUMNS.items()}, index=index)


def field_largest_bare(frame: pd.DataFrame, config: Any) -> float | None:
    """Largest bare magnitude in the superelevation field of the input rows ``frame``.

    What the ``auto`` unit rule decides on (:func:`~curvescan.terrain_attr.auto_bare_percent`)
    when taken over the whole layer; a partitioned scan takes the largest over its
    partitions.

    Returns
    -------
    float or None
        None when no superelevation field is used or its unit is given (not ``auto``).
    """
    name = config.superelevation_field
    if config.superelevation_unit != "auto" or name is None or name not in frame.columns:
        return None
    return largest_bare_magnitude(frame[name].unique())  # few distinct values: parse those


def evaluate(
    curves: pd.DataFrame, stations: Stations, config: Any, dem: str | None = None, *,
    superelevation_bare_percent: bool | None = None,
) -> pd.DataFrame:
    """Superelevation, grade and DEM quality for every curve.

    Parameters
    ----------
    curves : pandas.DataFrame
        Curve table: ``chain_id``, ``s_start_m``, ``s_end_m``, ``circ_start_m``,
        ``circ_end_m``, ``direction`` (``left``/``right``), ``radius_m``; optional
        ``attr_superelevation``, ``attr_lanes``, ``attr_width_m``, ``posted_kmh``.
        ``curves.attrs["crs"]`` names the working CRS (needed with a DEM).
    stations : Stations
        Resampled stations of all chains, in the working CRS.
    config : ScanConfig
        Settings; this stage reads the parameters in :data:`PARAMETERS`.
    dem : str, optional
        DEM raster path.
    superelevation_bare_percent : bool, optional
        Whether bare numbers of the superelevation field are percent, decided by the
        ``auto`` unit on the whole input layer (see :func:`field_largest_bare`); None
        decides on the curves' values alone.

    Returns
    -------
    pandas.DataFrame
        Same index as ``curves``; columns :data:`OUTPUT_COLUMNS`. ``attrs["terrain"]``
        holds the run record (:func:`run_record`).

    Raises
    ------
    CRSError
        A DEM is given but the curves have no CRS, or the DEM has none.
    InputError
        Missing columns, or ``value`` assumption without ``superelevation_assumed``.
    DataSourceError
        The DEM cannot be read.
    """
    need = ("chain_id", "s_start_m", "s_end_m", "circ_start_m", "circ_end_m", "direction",
            "radius_m")
    missing = [c for c in need if c not in curves.columns]
    if missing:
        raise InputError(f"terrain: curve table lacks column(s) {', '.join(missing)}")
    mode = config.superelevation_assumption
    if mode == "value" and config.superelevation_assumed is None:
        raise InputError("--superelevation-assumption value needs --superelevation-assumed")
    out = _empty(curves.index)
    n = len(curves)
    record: dict[str, Any] = {"dem": None if dem is None else str(dem), "assumption": mode}
    if config.superelevation_field is not None:
        # how bare numbers of the superelevation field were read ("auto" when decided on
        # the curves' values alone, in a direct call)
        unit = config.superelevation_unit
        if unit == "auto" and superelevation_bare_percent is not None:
            unit = "percent" if superelevation_bare_percent else "fraction"
        record["superelevation_field_unit"] = unit
    out.attrs["terrain"] = record
    if n == 0:
        record.update(counts={"attribute": 0, "terrain": 0, "assumed": 0})
        return out

    direction = curves["direction"].astype(str).str.lower().to_numpy()
    bad_dir = ~np.isin(direction, ("left", "right"))
    if bad_dir.any():
        raise InputError(f"terrain: {int(bad_dir.sum())} curve(s) with direction other than "
                         "left/right")
    toward = np.where(direction == "left", 1, -1)
    radius = curves["radius_m"].to_numpy(dtype=float)
    posted = _col(curves, "posted_kmh").astype(float)
    lanes, width = _lanes_and_width(curves, config)

    e_attr = np.full(n, np.nan)
    if "attr_superelevation" in curves.columns:
        e_attr = parse_superelevation(curves["attr_superelevation"], config.superelevation_unit,
                                      superelevation_bare_percent)

    meas = _measure(curves, stations, config, dem, toward, lanes, width, record) if dem else None

    inner_a, outer_a, applied = assume_superelevation(
        mode, radius, posted, crown=config.crown_slope, e_max=config.superelevation_max,
        value=config.superelevation_assumed,
    )
    has_attr = np.isfinite(e_attr)
    quality = np.full(n, "no-dem", dtype=object)
    terr = np.zeros(n, dtype=bool)
    if meas is not None:
        quality = meas["quality"]
        terr = np.isin(quality, _TERRAIN_OK) & ~has_attr
        for c in ("grade", "grade_se", "grade_max_down", "dem_cell_m", "dem_residual_m",
                  "dem_coverage"):
            out[c] = meas[c]
        out["grade_max_down_direction"] = meas["grade_max_down_direction"]
        out["dem_sections"] = meas["dem_sections"]
        out["superelevation_dem"] = np.where(np.isin(quality, _TERRAIN_OK), meas["e_gov"],
                                             np.nan)
    else:
        out["dem_sections"] = 0
        out["grade_max_down_direction"] = None
    assumed = ~has_attr & ~terr
    source = np.where(has_attr, "attribute", np.where(terr, "terrain", "assumed"))
    inner = np.where(has_attr, e_attr, inner_a)
    outer = np.where(has_attr, e_attr, outer_a)
    gov = np.minimum(inner, outer)
    se = np.where(has_attr, 0.0, np.nan)
    if meas is not None:
        inner = np.where(terr, meas["e_inner"], inner)
        outer = np.where(terr, meas["e_outer"], outer)
        gov = np.where(terr, meas["e_gov"], gov)
        se = np.where(terr, meas["e_gov_se"], se)
    out["superelevation"] = gov
    out["superelevation_source"] = source.astype(object)
    out["superelevation_se"] = se
    out["superelevation_inner"] = inner
    out["superelevation_outer"] = outer
    out["superelevation_adverse"] = (gov + 2 * np.nan_to_num(se)) < 0
    out["superelevation_assumption"] = np.where(assumed, applied, None)
    out["dem_quality"] = quality

    counts = {k: int((source == k).sum()) for k in ("attribute", "terrain", "assumed")}
    record["counts"] = counts
    record["quality"] = {str(k): int(v) for k, v in zip(*np.unique(quality.astype(str),
                                                                     return_counts=True))}
    what = {"crown": f"normal crown, outer lane -{config.crown_slope:.3f}",
            "design": f"design method 1, e_max {config.superelevation_max:.2f}",
            "zero": "flat cross-section",
            "value": f"{config.superelevation_assumed}"}[mode]
    warn_counted("superelevation assumed ({what}) for {assumed} of {n} curve(s); see "
                 "superelevation_assumption", AssumptionWarning,
                 {"assumed": counts["assumed"], "n": n}, {"what": what}, when=["assumed"])
    return out


def _measure(
    curves: pd.DataFrame, st: Stations, config: Any, dem: str,
    toward: np.ndarray, lanes: np.ndarray, width: np.ndarray, record: dict[str, Any],
) -> dict[str, Any]:
    """Sample the DEM once for all curves and fit cross-slopes and grades."""
    from .io.dem import sample_dem

    crs = curves.attrs.get("crs")
    if not crs:
        raise CRSError("terrain: the curve table has no working CRS (curves.attrs['crs']); "
                       "cannot place it on the DEM")
    n = len(curves)
    chain = curves["chain_id"].to_numpy(dtype=np.int64)
    s0 = curves["s_start_m"].to_numpy(dtype=float)
    s1 = curves["s_end_m"].to_numpy(dtype=float)
    c0 = curves["circ_start_m"].to_numpy(dtype=float)
    c1 = curves["circ_end_m"].to_numpy(dtype=float)
    # too short a circular part: use the middle third of the whole curve instead
    short = ~(c1 - c0 >= 2 * config.cross_section_spacing_m)
    third = (s1 - s0) / 3.0
    c0 = np.where(short, s0 + third, c0)
    c1 = np.where(short, s1 - third, c1)

    ix = ChainIndex.build(st)
    xs = cross_sections(st, ix, chain, c0, c1, toward, width, lanes,
                        spacing_m=config.cross_section_spacing_m,
                        step_m=config.cross_section_step_m, margin_m=0.5,
                        edge_margin_m=1.0)
    a = config.grade_approach_m
    g_curve, g_idx = centreline_samples(st, ix, chain, s0 - a, s1 + a)
    px = np.concatenate((xs.x, st.x[g_idx]))
    py = np.concatenate((xs.y, st.y[g_idx]))
    z, inside, info = sample_dem(dem, px, py, crs, vertical_unit=config.dem_vertical_unit)
    record["dem_info"] = info.as_dict()
    nx = xs.x.size
    zx, zg = z[:nx], z[nx:]
    in_x = inside[:nx]

    # cross-slopes: per lane per section, then robust mean per lane per curve
    ml = xs.max_lanes
    n_ls = xs.sec_curve.size * ml
    slope, cnt, ss = lane_section_slopes(xs.u, zx, xs.lane_sec, n_ls)
    ls_curve = np.repeat(xs.sec_curve, ml)
    ls_lane = np.tile(np.arange(ml), xs.sec_curve.size)
    cl = ls_curve * ml + ls_lane
    e_lane, se_lane, k_lane = robust_group_mean(slope, cl, n * ml, floor=0.002)
    e_lane, se_lane, k_lane = (v.reshape(n, ml) for v in (e_lane, se_lane, k_lane))
    lane_ok = np.arange(ml)[None, :] < lanes[:, None]
    enough = np.all(~lane_ok | (k_lane >= _MIN_SECTIONS), axis=1)
    e_mask = np.where(lane_ok, e_lane, np.inf)
    gov_lane = np.argmin(e_mask, axis=1)
    rows = np.arange(n)
    e_gov = np.where(enough, e_mask[rows, gov_lane], np.nan)
    e_gov_se = np.where(enough, se_lane[rows, gov_lane], np.nan)
    e_outer = np.where(enough, e_lane[:, 0], np.nan)
    e_inner = np.where(enough, e_lane[rows, lanes - 1], np.nan)
    fitted = np.isfinite(slope)
    dof = np.bincount(ls_curve[fitted], weights=cnt[fitted] - 2, minlength=n)
    ssum = np.bincount(ls_curve[fitted], weights=ss[fitted], minlength=n)
    with np.errstate(divide="ignore", invalid="ignore"):
        resid = np.sqrt(ssum / dof)
    pt_curve = xs.sec_curve[xs.lane_sec // ml]
    n_pts = np.bincount(pt_curve, minlength=n)
    n_in = np.bincount(pt_curve, weights=in_x, minlength=n)
    n_ok = np.bincount(pt_curve, weights=np.isfinite(zx), minlength=n)
    coverage = n_ok / np.maximum(n_pts, 1)
    sec_ok = np.bincount(xs.sec_curve, weights=np.all(
        np.isfinite(slope.reshape(-1, ml)) | (ls_lane.reshape(-1, ml) >= lanes[xs.sec_curve, None]),
        axis=1), minlength=n).astype(np.int64)

    lane_w = width / lanes
    coarse = info.cell_m * config.dem_min_cells_per_lane > lane_w
    # integer elevations in steps coarser than the residual allowed (whole metres) flatten
    # the cross-sections: a fit of the steps is "good" and near zero, but not measured
    stepped = info.value_step_m > config.dem_max_residual_m
    coarse = coarse | stepped
    quality = np.full(n, "good", dtype=object)
    quality[coverage < 0.95] = "partial"
    quality[~enough] = "nodata"
    quality[~enough & (n_in == 0)] = "outside"
    usable = enough & ~coarse
    quality[usable & (resid > config.dem_max_residual_m)] = "noisy"
    quality[usable & ~superelevation_accepted(e_gov)] = "implausible"  # as physics takes
    quality[enough & coarse] = "coarse"

    # grade along the centreline: robust fit over curve + approaches, and windowed grades
    s_g = st.s[g_idx]
    grade, grade_se, _ = robust_line_fit(s_g - s0[g_curve], zg, g_curve, n)
    span = a * 2 + (s1 - s0) + config.grade_window_m + 10.0
    off = np.concatenate(([0.0], np.cumsum(span)[:-1]))
    key = s_g - s0[g_curve] + a + off[g_curve]
    first = np.full(n, np.inf)
    last = np.full(n, -np.inf)
    np.minimum.at(first, g_curve, key)
    np.maximum.at(last, g_curve, key)
    wg = window_grades(key, zg, config.grade_window_m, first[g_curve], last[g_curve])
    sl = s_g
    fwd = np.where((sl <= s1[g_curve]) & np.isfinite(wg), -wg, -np.inf)
    rev = np.where((sl >= s0[g_curve]) & np.isfinite(wg), wg, -np.inf)
    down_f = np.full(n, -np.inf)
    down_r = np.full(n, -np.inf)
    np.maximum.at(down_f, g_curve, fwd)
    np.maximum.at(down_r, g_curve, rev)
    down = np.maximum(down_f, down_r)
    down_dir = np.where(down_f >= down_r, "digitised", "reverse").astype(object)
    down_dir[~np.isfinite(down)] = None

    bad_counts = {q: int((quality == q).sum()) for q in
                  ("outside", "nodata", "partial", "coarse", "noisy", "implausible")}
    if bad_counts["outside"] or bad_counts["nodata"]:
        warn_counted("DEM gives no usable cross-sections for {outside} curve(s) outside it and "
                     "{nodata} on nodata; superelevation assumed there (grade kept where the "
                     "centreline has samples)", DataQualityWarning,
                     {k: bad_counts[k] for k in ("outside", "nodata")}, stacklevel=3)
    if bad_counts["partial"]:
        warn_counted("DEM nodata holes or edges in the cross-sections of {partial} curve(s); "
                     "fitted from the remaining samples", DataQualityWarning,
                     {"partial": bad_counts["partial"]}, stacklevel=3)
    if bad_counts["coarse"] and stepped:
        warn_counted("DEM elevations stored in steps of {step} m (an integer band) cannot "
                     "resolve lane cross-slope (steps above --dem-max-residual-m {residual} m) "
                     "for {coarse} curve(s); superelevation assumed, grade from the DEM",
                     DataQualityWarning, {"coarse": bad_counts["coarse"]},
                     {"step": f"{info.value_step_m:g}", "residual": config.dem_max_residual_m},
                     stacklevel=3)
    elif bad_counts["coarse"]:
        warn_counted("DEM cells of {cell} m cannot resolve lane cross-slope (needs {cells} "
                     "cells per lane) for {coarse} curve(s); superelevation assumed, grade "
                     "from the DEM", DataQualityWarning, {"coarse": bad_counts["coarse"]},
                     {"cell": f"{info.cell_m:.2f}", "cells": f"{config.dem_min_cells_per_lane:g}"},
                     stacklevel=3)
    if bad_counts["noisy"] or bad_counts["implausible"]:
        warn_counted("DEM cross-sections too rough (residual > {residual} m) for {noisy} "
                     "curve(s) and implausible (e outside {accepted}) for {implausible}; "
                     "superelevation assumed there", DataQualityWarning,
                     {k: bad_counts[k] for k in ("noisy", "implausible")},
                     {"residual": config.dem_max_residual_m,
                      "accepted": SUPERELEVATION_RANGE_TEXT}, stacklevel=3)
    return {
        "quality": quality, "e_gov": e_gov, "e_gov_se": e_gov_se, "e_inner": e_inner,
        "e_outer": e_outer, "grade": grade, "grade_se": grade_se,
        "grade_max_down": np.where(np.isfinite(down), down, np.nan),
        "grade_max_down_direction": down_dir,
        "dem_cell_m": np.full(n, info.cell_m), "dem_residual_m": resid,
        "dem_sections": np.where(enough, sec_ok, 0).astype(np.int64),
        "dem_coverage": coverage,
    }


def run_record(result: pd.DataFrame) -> dict[str, Any]:
    """Return what the terrain stage used: DEM, CRS, cell size, reads, counts per source.

    Parameters
    ----------
    result : pandas.DataFrame
        The frame returned by :func:`evaluate`.

    Returns
    -------
    dict
        JSON-serialisable record.
    """
    rec = dict(result.attrs.get("terrain", {}))
    if "counts" not in rec:
        src = result.get("superelevation_source", pd.Series(dtype=object))
        rec["counts"] = {k: int((src == k).sum()) for k in ("attribute", "terrain", "assumed")}
    return rec
