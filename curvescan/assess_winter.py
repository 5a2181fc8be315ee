"""Winter priority: where to treat first when snow and ice come.

Every curve gets six parts, each a fraction in [0, 1], reported as fields:

=================== ====================================================================
``winter_snow``     shortfall on packed snow: ``(V_ref - V_snow) / V_ref`` clipped to [0, 1]
``winter_ice``      the same on ice, with ``v_ice_limit_kmh``
``winter_bridge``   1 when the curve lies on a bridge or other structure (they freeze first:
                    common practice), else 0
``winter_downgrade`` steepest downgrade into the curve / ``winter_grade_ref`` clipped to [0, 1]
``winter_surprise`` how unexpected the curve is: speed drop from the approach /
                    ``winter_drop_ref_kmh`` clipped to [0, 1], times ``0.5 + 0.5 * t`` with
                    ``t`` the approach tangent / ``winter_isolated_tangent_m`` clipped to [0, 1]
                    (an isolated curve after a long tangent counts in full)
``winter_traffic``  exposure: ``log10(1 + AADT) / log10(1 + winter_aadt_ref)`` clipped to
                    [0, 1]; 0.5 (neutral) where no AADT is known
=================== ====================================================================

``V_ref`` is the posted speed, or the comfort speed where none is posted. The limits
``v_snow_limit_kmh`` / ``v_ice_limit_kmh`` are the lower of sliding and rollover for the
chosen vehicle. The score (0-100) is::

    condition = sum(w_k * part_k) / sum(w_k)          k = snow, ice, bridge, downgrade, surprise
    exposure  = (1 - s) + s * winter_traffic          s = winter_traffic_share
    winter_score = 100 * condition * exposure

``winter_rank`` is 1 for the highest score (ties broken by ``curve_id``), so rank is
monotone in score. The weights are declared parameters (``--winter-weight-snow`` ...).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .errors import DataQualityWarning
from .recording import warn_counted

__all__ = ["winter_priority", "parse_aadt", "parse_bridge", "PART_NAMES", "WEIGHT_PARAMS"]

PART_NAMES = ("snow", "ice", "bridge", "downgrade", "surprise")
WEIGHT_PARAMS = tuple(f"winter_weight_{p}" for p in PART_NAMES)

#: OSM ``bridge=*`` values meaning "not a bridge"; any other non-empty value is a bridge.
BRIDGE_NO = ("no", "false", "0", "n", "none")
#: OSM ``bridge=*`` values known to be structures (taginfo's common values).
BRIDGE_YES = ("yes", "true", "1", "y", "viaduct", "aqueduct", "boardwalk", "cantilever",
              "covered", "movable", "trestle", "suspension", "low_water_crossing",
              "simple_brunnel", "culvert", "abandoned")


def _warn(template: str, counts: dict, field_name: str, examples: Any = ()) -> None:
    """Warn (or, with nothing to warn about, only record) ``{bad} of {n}`` values."""
    warn_counted(template, DataQualityWarning, counts, {"field": repr(field_name)},
                 list(examples), when=[k for k in counts if k != "n"], stacklevel=4)


def parse_aadt(values: Any, field_name: str = "aadt") -> tuple[np.ndarray, dict]:
    """Read an AADT-like traffic field (vehicles per day) to floats.

    Numbers pass; texts like ``"12,000"``, ``"12 000 veh/day"`` or ``"~5000"`` are read
    by their leading number (thousands separators removed). Other texts, negative values
    and blanks become NaN, are counted and warned about; no row is dropped.

    Returns
    -------
    aadt : ndarray of float
    report : dict
        ``parsed``, ``missing``, ``text`` (unreadable texts) with examples, ``negative``.
    """
    raw = pd.Series(np.asarray(values, dtype=object))
    text = raw.astype(str).str.strip()
    missing = (raw.isna() | (text == "")).to_numpy()
    number = pd.to_numeric(raw.where(~missing), errors="coerce").to_numpy(dtype=float, copy=True)
    todo = np.isnan(number) & ~missing
    if todo.any():
        cleaned = text[todo].str.replace(r"(?<=\d)[ ,'_](?=\d{3}\b)", "", regex=True)
        found = cleaned.str.extract(r"^[~≈]?\s*(-?\d+(?:\.\d+)?)\s*"
                                    r"(?:veh(?:icles)?(?:/d(?:ay)?)?|/d|vpd|per day)?$",
                                    expand=False)
        number[todo] = pd.to_numeric(found, errors="coerce").to_numpy(dtype=float)
    unread = todo & np.isnan(number)
    negative = number < 0
    number[negative] = np.nan
    report = {
        "field": field_name,
        "parsed": int(np.isfinite(number).sum()),
        "missing": int(missing.sum()),
        "text": int(unread.sum()),
        "text_values": {str(k): int(v) for k, v in
                        raw[unread].astype(str).value_counts().head(20).items()},
        "negative": int(negative.sum()),
    }
    n = len(raw)
    _warn("{text} of {n} values of AADT field {field} are text that is not a number "
          "(e.g. {examples}); exposure taken as neutral there",
          {"text": report["text"], "n": n}, field_name, report["text_values"])
    _warn("{negative} of {n} values of AADT field {field} are negative; exposure taken "
          "as neutral there", {"negative": report["negative"], "n": n}, field_name)
    _warn("{missing} of {n} features have no value in AADT field {field}; exposure "
          "taken as neutral there", {"missing": report["missing"], "n": n}, field_name)
    return number, report


def parse_bridge(values: Any, field_name: str = "bridge") -> tuple[np.ndarray, dict]:
    """Read an OSM-style ``bridge`` field to 0/1 floats.

    ``no``/``false``/``0`` are 0; ``yes`` and OSM structure types (``viaduct``, ...) are 1;
    a blank is read as 0 (OSM convention: untagged is not a bridge), counted and warned
    about; other texts are read as 1 (any ``bridge=*`` but ``no`` is a structure), counted
    and warned about. Numbers other than 0 and 1 are read as 1.

    Returns
    -------
    on_bridge : ndarray of float (0.0 or 1.0)
    report : dict
        ``bridge``, ``not_bridge``, ``missing``, ``other`` (with examples).
    """
    raw = pd.Series(np.asarray(values, dtype=object))
    text = raw.astype(str).str.strip().str.lower()
    missing = (raw.isna() | (text == "") | (text == "nan")).to_numpy()
    number = pd.to_numeric(raw.where(~missing), errors="coerce").to_numpy(dtype=float, copy=True)
    text = text.where(~np.isfinite(number), np.where(number == 0, "0", "1"))
    no = text.isin(BRIDGE_NO).to_numpy() & ~missing
    yes = text.isin(BRIDGE_YES).to_numpy() & ~missing
    other = ~missing & ~no & ~yes
    out = np.where(yes | other, 1.0, 0.0)
    report = {
        "field": field_name,
        "bridge": int((yes | other).sum()),
        "not_bridge": int(no.sum()),
        "missing": int(missing.sum()),
        "other": int(other.sum()),
        "other_values": {str(k): int(v) for k, v in
                         raw[other].astype(str).value_counts().head(20).items()},
    }
    n = len(raw)
    _warn("{missing} of {n} features have no value in bridge field {field}; read as "
          "not a bridge (OSM convention)", {"missing": report["missing"], "n": n},
          field_name)
    _warn("{other} of {n} values of bridge field {field} are not a known bridge tag "
          "(e.g. {examples}); read as a structure", {"other": report["other"], "n": n},
          field_name, report["other_values"])
    return out, report


def _clip01(x: np.ndarray) -> np.ndarray:
    return np.clip(np.nan_to_num(np.asarray(x, dtype=float), nan=0.0), 0.0, 1.0)


def winter_priority(curves: pd.DataFrame, config: Any,
                    last: np.ndarray | None = None) -> pd.DataFrame:
    """Winter parts, score and rank for every curve.

    Parameters
    ----------
    curves : DataFrame
        ``curve_id``, ``posted_kmh``, ``v_comfort_kmh``, ``v_snow_limit_kmh``,
        ``v_ice_limit_kmh`` and, when known, ``grade_max_down``, ``speed_drop_kmh``,
        ``approach_tangent_m``, ``aadt``, ``on_bridge``.
    config : ScanConfig
        The ``winter_*`` parameters.
    last : ndarray of bool, optional
        Curves ranked after all others whatever their score (roundabouts and closed rings,
        left out of the winter layer).

    Returns
    -------
    DataFrame
        Same index: ``winter_speed_source``, ``winter_<part>`` for each part in the module
        docstring, ``winter_exposure``, ``winter_score`` (0-100) and ``winter_rank``.
    """
    n = len(curves)

    def col(name: str) -> np.ndarray:
        if name in curves.columns:
            return pd.to_numeric(curves[name], errors="coerce").to_numpy(dtype=float)
        return np.full(n, np.nan)

    posted = col("posted_kmh")
    ref = np.where(np.isfinite(posted), posted, col("v_comfort_kmh"))
    source = np.where(np.isfinite(posted), "posted", "comfort").astype(object)
    source[np.isnan(ref)] = None
    with np.errstate(invalid="ignore", divide="ignore"):
        parts = {
            "snow": _clip01((ref - col("v_snow_limit_kmh")) / ref),
            "ice": _clip01((ref - col("v_ice_limit_kmh")) / ref),
            "bridge": _clip01(col("on_bridge")),
            "downgrade": _clip01(col("grade_max_down") / config.winter_grade_ref),
            "surprise": _clip01(col("speed_drop_kmh") / config.winter_drop_ref_kmh)
            * (0.5 + 0.5 * _clip01(col("approach_tangent_m")
                                   / config.winter_isolated_tangent_m)),
        }
        aadt = col("aadt")
        traffic = np.log10(1.0 + np.maximum(aadt, 0.0)) / np.log10(1.0 + config.winter_aadt_ref)
    traffic = np.where(np.isfinite(traffic), np.clip(traffic, 0.0, 1.0), 0.5)
    weights = np.array([getattr(config, w) for w in WEIGHT_PARAMS], dtype=float)
    stacked = np.stack([parts[p] for p in PART_NAMES], axis=1) if n else np.zeros((0, 5))
    total = weights.sum()
    condition = stacked @ weights / total if total > 0 else np.zeros(n)
    share = float(config.winter_traffic_share)
    exposure = (1.0 - share) + share * traffic
    score = 100.0 * condition * exposure
    out = pd.DataFrame(index=curves.index)
    out["winter_speed_source"] = source
    for p in PART_NAMES:
        out[f"winter_{p}"] = parts[p]
    out["winter_traffic"] = traffic
    out["winter_exposure"] = exposure
    out["winter_score"] = score
    ids = curves["curve_id"].to_numpy() if "curve_id" in curves else np.arange(n)
    after = np.zeros(n, dtype=bool) if last is None else np.asarray(last, dtype=bool)
    order = np.lexsort((ids, -score, after))
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(1, n + 1)
    out["winter_rank"] = rank
    return out
