"""Plain-text summaries of a scan for the terminal and for reports."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pandas as pd

__all__ = ["summary_lines"]


def _pairs(counts: Mapping[str, Any]) -> str:
    return ", ".join(f"{k} {v}" for k, v in counts.items()) or "none"


def _speed_lines(report: Mapping[str, Any]) -> list[str]:
    lines = []
    if not report or report.get("field") is None:
        wanted = (report or {}).get("looked_for")
        if wanted:
            return [f"posted speed: the layer has no field {wanted!r} (name the posted-speed "
                    "field with --speed-field); nothing can be flagged"]
        return ["posted speed: no speed field given (--speed-field); nothing can be flagged"]
    bits = [f"{report.get('parsed', 0)} read"]
    for key, label in (("missing", "blank"), ("unparsed", "unparsable"),
                       ("absurd", "absurd"), ("no_limit", "no limit"),
                       ("variable", "variable"), ("implicit", "implicit (country code)"),
                       ("multiple", "several values")):
        if report.get(key):
            bits.append(f"{report[key]} {label}")
    lines.append(f"posted speed field {report['field']!r}: " + ", ".join(bits))
    for key, label in (("unparsed_values", "unparsable"), ("absurd_values", "absurd")):
        values = report.get(key) or {}
        if values:
            lines.append(f"  {label} values: " + ", ".join(f"{k!r} x{v}"
                                                       for k, v in list(values.items())[:10]))
    return lines


def _fmt(value: Any, spec: str = ">7.0f") -> str:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return f"{'-':>7}"
    return f"{'-':>7}" if not np.isfinite(v) else format(v, spec)


def summary_lines(result: Any, worst: int = 10) -> list[str]:
    """Summarise a result: counts per condition and mechanism, worst curves, winter top.

    Parameters
    ----------
    result : ScanResult
        A scan result (its ``run`` record holds the assessment summary).
    worst : int
        How many hazard and winter rows to list.
    """
    # the fields only: decoding the layers' geometries is not needed for a summary
    fields = getattr(result, "attributes", None)
    curves = fields("curves") if fields else result.curves
    hazards = fields("hazards") if fields else result.hazards
    run = result.run
    lines = [f"curves found: {len(curves)} on {run.get('chains', '?')} chains "
             f"from {run.get('input_features', '?')} input features"]
    skipped = run.get("skipped_features", 0)
    if skipped:
        lines.append(f"input features skipped (see run record): {skipped}")
    lines.extend(_speed_lines(run.get("posted_speed") or {}))
    summary = run.get("assessment") or {}
    posted = curves["posted_kmh"].notna().sum() if "posted_kmh" in curves else 0
    lines.append(f"curves with a posted speed: {posted}")
    if summary:
        lines.append("posted speed above the limit: "
                     + _pairs(summary.get("exceeded_per_condition", {})))
        lines.append("hazards by mildest condition exceeded: "
                     + _pairs(summary.get("hazards_per_mildest_condition", {})))
        lines.append("hazards by governing mechanism: "
                     + _pairs(summary.get("hazards_per_mechanism", {})))
        lines.append("speed consistency (Lamm II, from memory): "
                     + _pairs(summary.get("consistency_counts", {})))
    # a streamed result keeps only the top hazards; the run record has the count
    lines.append(f"hazard curves: {run.get('hazards', len(hazards))}")
    if summary.get("flag_at") == "band":
        lines.append("  flagged against the low end of each limit's uncertainty band "
                     f"(--flag-at band); in {summary.get('hazards_under_estimate', 0)} of them "
                     "the posted speed is under the estimated limit of the mildest condition "
                     "flagged (band_position under_estimate)")
    shaped = run.get("roundabout_features_by_shape", 0)
    if shaped:
        lines.append(f"features recognised as roundabout pieces by their shape: {shaped} "
                     "(--ring-max-diameter-m; 0 turns it off)")
    rings = summary.get("ring_curves", 0) if summary else 0
    if rings and not summary.get("ring_curves_in_hazards"):
        lines.append(f"curves on roundabouts or closed rings: {rings} (curves layer only, "
                     "field on_ring; --rings-in-hazards ranks them too)")
    if len(hazards):
        top = hazards.sort_values("severity_rank").head(worst) \
            if "severity_rank" in hazards else hazards.head(worst)
        lines.append(f"worst {len(top)} by severity (mildest condition, then excess):")
        lines.append(f"  {'curve':>6} {'radius m':>9} {'posted':>7} {'limit':>7} {'excess':>7}"
                     f"  {'condition':<9} {'mech':<5} {'band':<14} road")
        for row in top.itertuples(index=False):
            r = row._asdict()
            limit = r.get("limit_kmh", np.nan)
            lines.append(
                f"  {int(r['curve_id']):>6} {_fmt(r['radius_m'], '>9.0f')} "
                f"{_fmt(r['posted_kmh'])} {_fmt(limit)} {_fmt(r['posted_kmh'] - limit)}  "
                f"{str(r.get('mildest_condition') or ''):<9} "
                f"{str(r.get('governing_mechanism') or ''):<5} "
                f"{str(r.get('band_position') or ''):<14} "
                f"{_road(r)}")
    try:
        winter = fields("winter") if fields else getattr(result, "extra", {}).get("winter")
    except KeyError:  # no winter layer
        winter = None
    if winter is not None and len(winter):
        lines.append(f"winter priority, top {min(worst, len(winter))} (layer 'winter'):")
        for row in winter.head(worst).itertuples(index=False):
            r = row._asdict()
            why = ", ".join(f"{p} {r[f'winter_{p}']:.2f}" for p in
                            ("snow", "ice", "bridge", "downgrade", "surprise", "traffic")
                            if f"winter_{p}" in r and r[f"winter_{p}"] > 0)
            lines.append(f"  {int(r['winter_rank']):>3}. curve {int(r['curve_id']):>5} "
                         f"score {r['winter_score']:5.1f}  {_road(r)}  ({why})")
    return lines


def _road(r: Mapping[str, Any]) -> str:
    name = r.get("road_name")
    name = "" if name is None or (isinstance(name, float) and np.isnan(name)) \
        or pd.isna(name) else str(name)
    fids = r.get("src_fids", "")
    return f"{name} [{fids}]" if name else f"[{fids}]"
