"""Stage: assess. Posted speeds against the computed limits: hazard flags.

First version: a curve is a hazard when its posted speed exceeds the sliding limit of any
evaluated surface condition or the rollover limit of the chosen vehicle.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .declare import Param

__all__ = ["PARAMETERS", "hazards"]

PARAMETERS: tuple[Param, ...] = (
    Param("speed_field", "field", None,
          "Field holding the posted speed (numbers, '50 km/h', '30 mph', OSM maxspeed).",
          stage="assess"),
    Param("speed_unit", "choice", "kmh", "Unit of bare numbers in the speed field.",
          choices=("kmh", "mph"), stage="assess"),
)


def limit_columns(curves: pd.DataFrame) -> list[str]:
    """Sliding-limit columns per condition, mildest (highest friction) first."""
    cols = [c for c in curves.columns
            if c.startswith("v_") and c.endswith("_kmh")
            and not c.endswith(("_low_kmh", "_high_kmh", "_limit_kmh"))
            and c not in ("v_comfort_kmh", "v_rollover_kmh")]
    return cols


def hazards(curves: pd.DataFrame, config: Any) -> pd.DataFrame:
    """Rows of ``curves`` whose posted speed exceeds a limit, with the excess per condition.

    Adds ``exceeds_conditions`` (comma list), ``mildest_condition`` (the highest-friction
    condition whose limit is exceeded), ``excess_<cond>_kmh`` and ``max_excess_kmh``;
    ordered by ``max_excess_kmh`` descending.
    """
    posted = curves["posted_kmh"].to_numpy(dtype=float)
    cols = limit_columns(curves) + ["v_rollover_kmh"]
    excess = {c: posted - curves[c].to_numpy(dtype=float) for c in cols if c in curves}
    table = pd.DataFrame(excess, index=curves.index)
    flagged = (table > 0).any(axis=1).to_numpy()
    out = curves.loc[flagged].copy()
    names = [c[2:-4] for c in table.columns]
    over = table.loc[flagged].to_numpy() > 0
    out["exceeds_conditions"] = [",".join(n for n, o in zip(names, row) if o) for row in over]
    for c, name in zip(table.columns, names):
        out[f"excess_{name}_kmh"] = np.maximum(table.loc[flagged, c].to_numpy(), 0.0)
    out["max_excess_kmh"] = table.loc[flagged].max(axis=1).to_numpy()
    cond_order = [n for n in names if n != "rollover"]
    mild = []
    for row in over:
        hit = [n for n, o in zip(names, row) if o and n in cond_order]
        # mildest = highest-friction condition exceeded = the last in wet-to-ice order?
        mild.append(hit[0] if hit else "rollover")
    out["mildest_condition"] = mild
    return out.sort_values("max_excess_kmh", ascending=False)
