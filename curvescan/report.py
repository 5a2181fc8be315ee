"""Plain-text summaries of a scan for the terminal and for reports."""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["summary_lines"]


def summary_lines(result: Any, worst: int = 10) -> list[str]:
    """Counts per condition and the ``worst`` curves by excess speed, as text lines."""
    curves, hazards = result.curves, result.hazards
    lines = [f"curves found: {len(curves)} on {result.run.get('chains', '?')} chains "
             f"from {result.run.get('input_features', '?')} input features"]
    skipped = result.run.get("skipped_features", 0)
    if skipped:
        lines.append(f"input features skipped (see run record): {skipped}")
    posted = curves["posted_kmh"].notna().sum() if "posted_kmh" in curves else 0
    lines.append(f"curves with a posted speed: {posted}")
    counts = []
    for col in [c for c in curves.columns if c.startswith("v_") and c.endswith("_kmh")
                and not c.endswith(("_low_kmh", "_high_kmh", "_limit_kmh"))]:
        over = int(np.sum(curves["posted_kmh"].to_numpy(float) > curves[col].to_numpy(float)))
        counts.append(f"{col[2:-4]} {over}")
    lines.append("posted speed above the limit: " + ", ".join(counts))
    lines.append(f"hazard curves: {len(hazards)}")
    if len(hazards):
        lines.append(f"worst {min(worst, len(hazards))} by excess speed:")
        lines.append(f"  {'curve':>6} {'radius m':>9} {'posted':>7} {'limit':>7} "
                     f"{'excess':>7}  condition  on features")
        top = hazards.sort_values("max_excess_kmh", ascending=False).head(worst)
        for _, row in top.iterrows():
            limit = row["posted_kmh"] - row["max_excess_kmh"]
            lines.append(
                f"  {int(row['curve_id']):>6} {row['radius_m']:>9.0f} {row['posted_kmh']:>7.0f} "
                f"{limit:>7.0f} {row['max_excess_kmh']:>7.0f}  "
                f"{str(row.get('mildest_condition', '')):<9}  {row['src_fids']}")
    return lines
