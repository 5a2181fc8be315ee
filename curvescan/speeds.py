"""Posted speeds from attribute values: numbers, numbers with units, OSM ``maxspeed``.

Values that do not parse become NaN and are counted; nothing is guessed.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

__all__ = ["parse_speeds", "MPH_TO_KMH"]

#: Exact by definition of the international mile (1609.344 m).
MPH_TO_KMH = 1.609344

_NUMBER_UNIT = re.compile(r"^\s*(\d+(?:[.,]\d+)?)\s*(km/h|kmh|kph|mph|knots)?\s*$", re.IGNORECASE)


def parse_speeds(values: pd.Series | np.ndarray, unit: str = "kmh") -> tuple[np.ndarray, dict]:
    """Parse posted speeds to km/h.

    Parameters
    ----------
    values : array-like
        Raw field values: numbers or strings such as ``"50"``, ``"50 km/h"``, ``"30 mph"``.
    unit : {"kmh", "mph"}
        Unit of bare numbers.

    Returns
    -------
    speeds_kmh : ndarray of float
        NaN where unknown or unparsable.
    report : dict
        ``{"parsed": n, "missing": n, "unparsed": n, "unparsed_examples": [...]}``.
    """
    raw = pd.Series(np.asarray(values, dtype=object))
    missing = raw.isna() | (raw.astype(str).str.strip() == "")
    numeric = pd.to_numeric(raw.where(~missing), errors="coerce")
    out = numeric.to_numpy(dtype=float) * (MPH_TO_KMH if unit == "mph" else 1.0)
    todo = np.flatnonzero(np.isnan(out) & ~missing.to_numpy())
    text = raw.iloc[todo].astype(str).str.strip().str.lower()
    found = text.str.extract(_NUMBER_UNIT)
    number = pd.to_numeric(found[0].str.replace(",", ".", regex=False), errors="coerce")
    suffix = found[1].fillna("")
    factor = np.where(suffix == "mph", MPH_TO_KMH, np.where(suffix == "knots", 1.852,
                      np.where(suffix == "", MPH_TO_KMH if unit == "mph" else 1.0, 1.0)))
    out[todo] = number.to_numpy(dtype=float) * factor
    bad = todo[np.isnan(out[todo])]
    report = {
        "parsed": int(np.isfinite(out).sum()),
        "missing": int(missing.sum()),
        "unparsed": int(len(bad)),
        "unparsed_examples": sorted(set(raw.iloc[bad].astype(str)))[:10],
    }
    return out, report
