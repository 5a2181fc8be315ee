"""Stage: assess. Posted speeds against the computed limits; consistency; winter priority.

:func:`evaluate` runs the whole stage on the curve table:

* road attributes carried onto curves (``road_name``, ``aadt``, ``on_bridge``);
* speed consistency along each chain (:mod:`curvescan.assess_consistency`, Lamm
  Criterion II);
* winter priority (:mod:`curvescan.assess_winter`);
* hazard flags (:func:`hazards`): a curve is a hazard when its posted speed exceeds the
  limit (lower of sliding and rollover, ``v_<cond>_limit_kmh``) of any evaluated surface
  condition or the vehicle's rollover limit ``v_rollover_kmh``.

Every curve also gets ``mildest_condition``: the highest-friction condition whose limit
the posted speed exceeds (null when none is), so ``hazards`` is exactly the curves where
it is set.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from .assess_consistency import CRITERION, consistency
from .assess_winter import PART_NAMES, parse_aadt, parse_bridge, winter_priority
from .attributes import first_value, reduce_rows, rows_on
from .declare import Param

__all__ = ["PARAMETERS", "evaluate", "hazards", "condition_order", "Assessment", "rerank",
           "WINTER_FIELDS", "DESCRIPTIONS"]

_W = "assess"
PARAMETERS: tuple[Param, ...] = (
    Param("speed_field", "field", "maxspeed",
          "Field holding the posted speed (numbers, '50 km/h', '30 mph', OSM maxspeed); "
          "the default is read where the layer has it.",
          stage="assess"),
    Param("speed_unit", "choice", "kmh", "Unit of bare numbers in the speed field.",
          choices=("kmh", "mph"), stage="assess"),
    Param("implicit_speeds_file", "path", None,
          "TOML file adding or replacing implicit OSM speeds ([speeds] 'DE:rural' = '100').",
          stage="assess", advanced=True),
    Param("speed_none_kmh", "float", None,
          "Speed (km/h) used for OSM maxspeed=none; unknown when not given.",
          unit="km/h", stage="assess", minimum=1.0, maximum=400.0, advanced=True),
    Param("speed_max_kmh", "float", 200.0,
          "Posted speeds above this (km/h) are absurd: kept as unknown and counted.",
          unit="km/h", stage="assess", minimum=10.0, maximum=400.0, advanced=True),
    Param("name_field", "field", "name",
          "Field holding the road name (carried to curves and segments where present).",
          stage="assess"),
    Param("aadt_field", "field", "aadt",
          "Field holding traffic volume (AADT, vehicles/day) for the winter exposure part.",
          stage="assess"),
    Param("bridge_field", "field", "bridge",
          "Field flagging bridges or other structures (OSM bridge=*) for the winter score.",
          stage="assess"),
    Param("flag_at", "choice", "estimate",
          "Which limit a posted speed is compared with. 'estimate': the estimated limit "
          "(lower of sliding and rollover). 'band': the low end of its uncertainty band "
          "(radius and superelevation two standard errors against the road, the low end "
          "of the condition's friction range, the rollover threshold's low end), so a "
          "curve is also flagged where it may be sharper or slipperier than estimated; "
          "such flags get band_position 'under_estimate'.",
          choices=("estimate", "band"), stage="assess"),
    Param("rings_in_hazards", "bool", False,
          "Keep curves on roundabouts and other closed rings (on_ring) in the hazard and "
          "winter layers; by default they stay in the curves layer only (a roundabout is a "
          "junction driven at its own speed, not a curve of the open road).",
          stage="assess"),
    Param("consistency_tangent_m", "float", 200.0,
          "Tangents shorter than this (m) carry the previous curve's comfort speed into the "
          "next curve's approach.", unit="m", stage="assess", minimum=0.0),
    Param("winter_weight_snow", "float", 3.0, "Winter score weight of the snow shortfall.",
          stage=_W, minimum=0.0),
    Param("winter_weight_ice", "float", 2.0, "Winter score weight of the ice shortfall.",
          stage=_W, minimum=0.0),
    Param("winter_weight_bridge", "float", 1.5,
          "Winter score weight of a bridge or other structure.", stage=_W, minimum=0.0),
    Param("winter_weight_downgrade", "float", 1.5,
          "Winter score weight of the steepest downgrade into the curve.", stage=_W,
          minimum=0.0),
    Param("winter_weight_surprise", "float", 1.0,
          "Winter score weight of how unexpected the curve is (speed drop, isolation).",
          stage=_W, minimum=0.0),
    Param("winter_traffic_share", "float", 0.5,
          "Share of the winter score scaled by traffic (0 ignores traffic, 1 is proportional).",
          unit="fraction", stage=_W, minimum=0.0, maximum=1.0),
    Param("winter_aadt_ref", "float", 20000.0,
          "AADT (vehicles/day) at which the traffic part reaches 1.", stage=_W, minimum=1.0,
          advanced=True),
    Param("winter_grade_ref", "float", 0.08,
          "Downgrade (fraction) at which the downgrade part reaches 1.", unit="fraction",
          stage=_W, minimum=0.005, maximum=0.5, advanced=True),
    Param("winter_drop_ref_kmh", "float", 20.0,
          "Speed drop (km/h) at which the surprise part reaches 1.", unit="km/h", stage=_W,
          minimum=1.0, advanced=True),
    Param("winter_isolated_tangent_m", "float", 500.0,
          "Approach tangent (m) after which a curve counts as fully isolated.", unit="m",
          stage=_W, minimum=1.0, advanced=True),
)

#: Fields of the ``winter`` layer, in order (geometry last).
WINTER_FIELDS = (
    "winter_rank", "winter_score", "curve_id", "road_name", "src_fids", "radius_m",
    "posted_kmh", "winter_speed_source", "v_snow_limit_kmh", "v_ice_limit_kmh",
    *(f"winter_{p}" for p in PART_NAMES), "winter_traffic", "winter_exposure", "aadt",
    "on_bridge", "grade_max_down", "speed_drop_kmh", "approach_tangent_m", "consistency",
    "reliability",
)

DESCRIPTIONS = {
    "winter": "Curves ranked by winter priority (snow and ice shortfall, traffic, bridges, "
              "downgrades, surprise); see docs/assess.md for the score.",
}


@dataclass
class Assessment:
    """Output of :func:`evaluate`."""

    curves: gpd.GeoDataFrame
    hazards: gpd.GeoDataFrame
    winter: gpd.GeoDataFrame
    summary: dict[str, Any] = field(default_factory=dict)


def condition_order(curves: pd.DataFrame, config: Any) -> list[str]:
    """Return the evaluated conditions with a limit column, mildest (highest friction) first."""
    from .physics import run_record

    conds = run_record(config)["conditions"]
    names = [c for c in conds if f"v_{c}_limit_kmh" in curves.columns]
    return sorted(names, key=lambda c: -float(conds[c]["friction"]))


def carry_attributes(curves: pd.DataFrame, frame: gpd.GeoDataFrame, chains: Any,
                     config: Any, curve_rows: tuple | None = None) -> dict[str, Any]:
    """Add ``road_name``, ``aadt`` and ``on_bridge`` to ``curves`` in place; return a report.

    Fields that are absent from the layer give null values (recorded, not warned).
    ``curve_rows`` are the curves' ``(curve, input row)`` pairs
    (:func:`curvescan.attributes.rows_on`) when the caller has them.
    """
    n = len(curves)
    groups, rows = curve_rows or rows_on(chains, curves["chain_id"].to_numpy(),
                                         curves["s_start_m"].to_numpy(),
                                         curves["s_end_m"].to_numpy())
    report: dict[str, Any] = {}
    name = config.name_field
    if name is not None and name in frame.columns:
        curves["road_name"] = first_value(groups, rows, frame[name].to_numpy(dtype=object), n)
    else:
        curves["road_name"] = None
    for key, col, fname, parser in (("aadt", "aadt", config.aadt_field, parse_aadt),
                                    ("bridge", "on_bridge", config.bridge_field, parse_bridge)):
        if fname is not None and fname in frame.columns:
            values, rep = parser(frame[fname], fname)
            curves[col] = reduce_rows(groups, rows, values, n, how="max")
            report[key] = rep
        else:
            curves[col] = np.nan
            report[key] = {"field": fname, "note": "field not in the layer; part neutral"}
    curves["on_bridge"] = pd.array(np.where(np.isnan(curves["on_bridge"].to_numpy(float)), None,
                                            curves["on_bridge"].to_numpy(float) > 0),
                                   dtype="boolean")
    return report


def segment_names(frame: gpd.GeoDataFrame, groups: np.ndarray, rows: np.ndarray, n: int,
                  config: Any) -> np.ndarray:
    """Road name per segment (object array, None where unknown)."""
    name = config.name_field
    if name is None or name not in frame.columns:
        return np.full(n, None, dtype=object)
    return first_value(groups, rows, frame[name].to_numpy(dtype=object), n)


def compared_limits(curves: pd.DataFrame, names: list[str],
                    flag_at: str = "estimate") -> tuple[np.ndarray, np.ndarray | None]:
    """The limits a posted speed is compared with: one column per condition (mildest
    first) and the rollover limit (``None`` without one).

    ``flag_at="estimate"``: the estimated limits ``v_<cond>_limit_kmh`` and
    ``v_rollover_kmh``. ``"band"``: the low ends of their bands, ``v_<cond>_low_kmh``
    (sliding) and ``v_rollover_low_kmh``, the lower of the two per condition.
    """
    band = flag_at == "band"
    limit = np.stack([curves[f"v_{c}_low_kmh" if band else f"v_{c}_limit_kmh"]
                      .to_numpy(dtype=float) for c in names], axis=1)
    if "v_rollover_kmh" not in curves:
        return limit, None
    roll = curves["v_rollover_low_kmh" if band else "v_rollover_kmh"].to_numpy(dtype=float)
    # the estimated limits include rollover already; the sliding band's low end does not
    return (np.fmin(limit, roll[:, None]) if band else limit), roll


def _mildest(curves: pd.DataFrame, names: list[str],
             flag_at: str = "estimate") -> tuple[np.ndarray, np.ndarray]:
    """Exceedance matrix (curves x conditions) and the mildest condition exceeded."""
    posted = curves["posted_kmh"].to_numpy(dtype=float)
    limit, roll = compared_limits(curves, names, flag_at)
    over = posted[:, None] > limit  # NaN compares False
    if roll is not None:
        over |= (posted > roll)[:, None]
    first = np.argmax(over, axis=1)
    mild = np.where(over.any(axis=1), np.asarray(names, dtype=object)[first], None)
    return over, mild


def hazards(curves: pd.DataFrame, config: Any) -> pd.DataFrame:
    """Curves whose posted speed exceeds an evaluated limit, ordered by severity.

    Parameters
    ----------
    curves : DataFrame
        The curve table after physics: ``posted_kmh``, ``v_<cond>_limit_kmh``,
        ``v_<cond>_low_kmh``/``_high_kmh``, ``mechanism_<cond>``,
        ``friction_margin_<cond>``, ``v_rollover_kmh`` (and its band).
    config : ScanConfig

    Returns
    -------
    DataFrame
        The flagged rows of ``curves`` plus ``mildest_condition``, ``exceeds_conditions``
        (comma list, mildest first), ``excess_<cond>_kmh`` (posted minus limit, 0 where not
        exceeded), ``max_excess_kmh``, ``limit_kmh`` / ``limit_low_kmh`` /
        ``limit_high_kmh`` (limit and uncertainty band in the mildest condition),
        ``band_position`` (``above_band``: exceeded even at the high end of the band;
        ``inside_band``: exceeded at the estimate only), ``friction_margin`` and
        ``governing_mechanism`` in the mildest condition, and ``severity_rank`` (1 = most
        severe: exceeded in the mildest condition, then by the largest excess there).
    """
    names = condition_order(curves, config)
    if not names:
        return curves.iloc[:0].copy()
    over, mild = _mildest(curves, names, config.flag_at)
    flagged = np.flatnonzero(over.any(axis=1))
    over = over[flagged]
    m = len(flagged)
    rows = np.arange(m)
    idx = np.argmax(over, axis=1)  # the mildest condition exceeded (first in ``names``)
    posted = curves["posted_kmh"].to_numpy(dtype=float)[flagged]
    excess = np.stack([posted - curves[f"v_{c}_limit_kmh"].to_numpy(dtype=float)[flagged]
                       for c in names], axis=1)
    mild_excess = excess[rows, idx]
    # the severity order first, so that the rows are taken (copied) once, in that order
    order = np.lexsort((curves["curve_id"].to_numpy()[flagged],
                        -np.nan_to_num(mild_excess, nan=0.0), idx))
    out = curves.iloc[flagged[order]].copy(deep=False)  # a new table, not a view to warn on
    over, idx, posted, excess = over[order], idx[order], posted[order], excess[order]
    label = np.full(m, "", dtype=object)
    for k, c in enumerate(names):
        label = np.where(over[:, k], label + ("," if k else "") + c, label)
    out["mildest_condition"] = mild[flagged[order]]
    out["exceeds_conditions"] = pd.Series(label, index=out.index).str.lstrip(",")
    for k, c in enumerate(names):
        out[f"excess_{c}_kmh"] = np.where(over[:, k], np.maximum(excess[:, k], 0.0), 0.0)
    if "v_rollover_kmh" in out:
        out["excess_rollover_kmh"] = np.maximum(posted - out["v_rollover_kmh"].to_numpy(float),
                                                0.0)
    out["max_excess_kmh"] = np.nanmax(np.where(over, excess, np.nan), axis=1)

    def pick(pattern: str) -> np.ndarray:
        table = np.stack([out[pattern.format(c)].to_numpy(dtype=object) for c in names], 1)
        return table[rows, idx]

    roll_lo = out.get("v_rollover_low_kmh", pd.Series(np.inf, index=out.index))
    roll_hi = out.get("v_rollover_high_kmh", pd.Series(np.inf, index=out.index))
    out["limit_kmh"] = pick("v_{}_limit_kmh").astype(float)
    out["limit_low_kmh"] = np.fmin(pick("v_{}_low_kmh").astype(float), roll_lo.to_numpy(float))
    out["limit_high_kmh"] = np.fmin(pick("v_{}_high_kmh").astype(float),
                                    roll_hi.to_numpy(float))
    out["band_position"] = np.where(
        posted > out["limit_high_kmh"].to_numpy(), "above_band",
        np.where(posted > out["limit_kmh"].to_numpy(), "inside_band", "under_estimate"))
    out["friction_margin"] = pick("friction_margin_{}").astype(float)
    out["governing_mechanism"] = pick("mechanism_{}")
    out["severity_rank"] = np.arange(1, m + 1, dtype=np.int64)
    return out


def rerank(hazards: pd.DataFrame, winter: pd.DataFrame,
           names: list[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Re-order and re-number ``severity_rank`` and ``winter_rank`` after merging parts.

    Parameters
    ----------
    hazards, winter : DataFrame
        Concatenated ``hazards`` / ``winter`` layers of several partitions.
    names : list of str
        Conditions, mildest first (:func:`condition_order`).
    """
    idx = hazards["mildest_condition"].map({c: k for k, c in enumerate(names)}).to_numpy()
    excess = (hazards["posted_kmh"] - hazards["limit_kmh"]).to_numpy(dtype=float)
    order = np.lexsort((hazards["curve_id"].to_numpy(), -np.nan_to_num(excess), idx))
    hazards = hazards.iloc[order].copy()
    hazards["severity_rank"] = np.arange(1, len(hazards) + 1, dtype=np.int64)
    order = np.lexsort((winter["curve_id"].to_numpy(), -winter["winter_score"].to_numpy()))
    winter = winter.iloc[order].copy()
    winter["winter_rank"] = np.arange(1, len(winter) + 1, dtype=np.int64)
    return hazards, winter


def evaluate(curves: gpd.GeoDataFrame, frame: gpd.GeoDataFrame, chains: Any,
             config: Any, curve_rows: tuple | None = None,
             chain_lengths: np.ndarray | None = None) -> Assessment:
    """Run the assess stage: attributes, consistency, winter priority and hazards.

    Parameters
    ----------
    curves : GeoDataFrame
        The curve table after physics, with curve geometries.
    frame : GeoDataFrame
        The input layer (for the name, AADT and bridge fields).
    chains : curvescan.prepare.Chains
        The chains the curves lie on.
    config : ScanConfig
    curve_rows : tuple of ndarray, optional
        The curves' ``(curve, input row)`` pairs (:func:`curvescan.attributes.rows_on`),
        computed here when not given.
    chain_lengths : ndarray, optional
        Length of each chain (m), read from ``chains`` when not given.

    Returns
    -------
    Assessment
        ``curves`` (with the added fields), ``hazards`` (ordered by severity), ``winter``
        (ordered by ``winter_rank``, curves with a score above zero) and a ``summary``
        for the run record.
    """
    curves = curves.copy(deep=False)  # new columns only: the caller's table is not changed
    inputs = carry_attributes(curves, frame, chains, config, curve_rows)
    lengths = chain_lengths
    if lengths is None:
        lengths = chains.measure[chains.offsets[1:] - 1] if chains.n_chains else np.zeros(0)
    curves = curves.join(consistency(curves, lengths, config))
    names = condition_order(curves, config)
    if names:
        curves["mildest_condition"] = _mildest(curves, names, config.flag_at)[1]
    else:
        curves["mildest_condition"] = None
    # curves on roundabouts and closed rings stay in the curves layer only, unless asked
    ring = np.zeros(len(curves), dtype=bool)
    if "on_ring" in curves and not config.rings_in_hazards:
        ring = curves["on_ring"].to_numpy(dtype=bool)
    curves = curves.join(winter_priority(curves, config, last=ring))
    hz = hazards(curves[~ring], config) if ring.any() else hazards(curves, config)
    cols = [c for c in WINTER_FIELDS if c in curves.columns] + ["geometry"]
    # the rows with a score, in rank order (ranks are unique), taken in one step
    take = np.flatnonzero((curves["winter_score"] > 0).to_numpy() & ~ring)
    take = take[np.argsort(curves["winter_rank"].to_numpy()[take], kind="stable")]
    winter = curves.iloc[take, curves.columns.get_indexer(cols)]
    summary = run_summary(curves, hz, names, inputs, config, left_out=ring)
    return Assessment(curves=curves, hazards=hz, winter=winter, summary=summary)


def _counts(values: Any) -> dict[str, int]:
    s = pd.Series(values, dtype=object).dropna()
    return {str(k): int(v) for k, v in s.value_counts().items()}


def run_summary(curves: pd.DataFrame, hz: pd.DataFrame, names: list[str],
                inputs: dict[str, Any], config: Any, worst: int = 10,
                left_out: np.ndarray | None = None) -> dict[str, Any]:
    """Build the assessment part of the run record (JSON-serialisable).

    ``left_out`` marks the curves kept out of the hazard and winter layers (rings)."""
    posted = curves["posted_kmh"].to_numpy(dtype=float)
    exceeded: dict[str, int] = {}
    if names:
        limit, roll = compared_limits(curves, names, config.flag_at)
        exceeded = {c: int(np.sum(posted > limit[:, k])) for k, c in enumerate(names)}
        if roll is not None:
            exceeded["rollover"] = int(np.sum(posted > roll))
    mech = {c: _counts(hz.loc[hz["mildest_condition"] == c, "governing_mechanism"])
            for c in names} if len(hz) else {}
    cols = ["curve_id", "road_name", "src_fids", "radius_m", "posted_kmh", "limit_kmh",
            "mildest_condition", "max_excess_kmh", "governing_mechanism", "band_position"]
    worst_rows = hz.head(worst)[[c for c in cols if c in hz.columns]]
    ranked = curves if left_out is None or not left_out.any() else curves[~left_out]
    top_w = ranked.loc[ranked["winter_rank"].sort_values().index[:worst]]
    return {
        "conditions_mildest_first": names,
        "curves_with_posted_speed": int(np.isfinite(posted).sum()),
        "exceeded_per_condition": exceeded,
        "hazards_per_mildest_condition": _counts(hz.get("mildest_condition", [])),
        "hazards_per_mechanism": _counts(hz.get("governing_mechanism", [])),
        "mechanism_per_condition": mech,
        "hazards_above_band": int(np.sum(hz.get("band_position", pd.Series([])) == "above_band")),
        "flag_at": config.flag_at,
        "hazards_under_estimate": int(np.sum(hz.get("band_position", pd.Series([]))
                                             == "under_estimate")),
        "worst_curves": worst_rows.to_dict(orient="records"),
        "consistency_criterion": CRITERION,
        "consistency_counts": _counts(curves["consistency"]),
        "winter_formula": "100 * sum(w_k part_k)/sum(w_k) * ((1-s) + s*traffic)",
        "winter_weights": {p: float(getattr(config, f"winter_weight_{p}")) for p in PART_NAMES},
        "winter_traffic_share": float(config.winter_traffic_share),
        "winter_top": top_w[["winter_rank", "curve_id", "road_name", "winter_score"]]
        .to_dict(orient="records"),
        "ring_curves": int(curves["on_ring"].sum()) if "on_ring" in curves else 0,
        "ring_curves_in_hazards": bool(config.rings_in_hazards),
        "inputs": inputs,
    }
