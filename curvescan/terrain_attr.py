"""Terrain helpers: superelevation, lane and width attributes, and the stated assumptions.

Pure functions over arrays; used by :mod:`curvescan.terrain`.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np

from .errors import AssumptionWarning, DataQualityWarning
from .physics.limits import SUPERELEVATION_RANGE_TEXT, superelevation_accepted
from .recording import warn_counted

__all__ = [
    "MAX_PLAUSIBLE_SUPERELEVATION",
    "parse_superelevation",
    "largest_bare_magnitude",
    "auto_bare_percent",
    "parse_number",
    "design_superelevation",
    "assume_superelevation",
    "AASHTO_FMAX_KMH",
]

#: Largest superelevation magnitude accepted as real (fraction). Design maxima stop at about
#: 0.12 (AASHTO e_max tables go up to 12 %, REFERENCES.md 1c/1e); 0.20 leaves room for
#: steep local roads. It is also the percent/fraction boundary of the ``auto`` rule.
MAX_PLAUSIBLE_SUPERELEVATION = 0.20

#: Maximum side friction for design by design speed (km/h -> f_max), AASHTO Green Book
#: 2011 (6th ed.) Table 3-7, metric row as given in REFERENCES.md 1b (20/40/60/80/100/120
#: km/h are V-2nd, the other columns from memory).
AASHTO_FMAX_KMH = (
    np.array([15, 20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130], dtype=float),
    np.array([0.40, 0.35, 0.28, 0.23, 0.19, 0.17, 0.15, 0.14, 0.13, 0.12, 0.11, 0.09, 0.08]),
)

_NUMBER = re.compile(r"[-+]?\d+(?:[.,]\d+)?|[-+]?[.,]\d+")
_EMPTY = {"", "nan", "none", "null", "na", "n/a", "-"}


def _text(v: Any) -> str | None:
    if v is None:
        return None
    if isinstance(v, float) and np.isnan(v):
        return None
    s = str(v).strip()
    return None if s.lower() in _EMPTY else s


def parse_number(values: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read the first number of each value (``"7,5 m"`` gives 7.5; ``"2;3"`` gives 2).

    Returns
    -------
    number : ndarray of float
        NaN where missing or unreadable.
    percent : ndarray of bool
        The value carried a ``%`` sign.
    bad : ndarray of bool
        A non-empty value without a number.
    """
    vals = list(values)
    number = np.full(len(vals), np.nan)
    percent = np.zeros(len(vals), dtype=bool)
    bad = np.zeros(len(vals), dtype=bool)
    for i, v in enumerate(vals):  # attribute text: one pass over raw strings, not a hot path
        if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
            number[i] = float(v)
            continue
        s = _text(v)
        if s is None:
            continue
        m = _NUMBER.search(s)
        if m is None:
            bad[i] = True
            continue
        number[i] = float(m.group(0).replace(",", "."))
        percent[i] = "%" in s
    return number, percent, bad


def largest_bare_magnitude(values: Any) -> float:
    """Largest magnitude of the bare numbers (written without ``%``) among ``values``.

    Returns
    -------
    float
        0.0 when no value is a readable bare number.
    """
    number, percent, _ = parse_number(values)
    mags = np.abs(number[np.isfinite(number) & ~percent])
    return float(mags.max()) if mags.size else 0.0


def auto_bare_percent(largest_bare: float | None) -> bool | None:
    """Decide the ``auto`` unit: bare numbers are percent if ``largest_bare`` exceeds 0.20.

    ``largest_bare`` is the largest bare magnitude of the whole field
    (:func:`largest_bare_magnitude`); the boundary is :data:`MAX_PLAUSIBLE_SUPERELEVATION`.
    None (no field) gives None.
    """
    return None if largest_bare is None else bool(largest_bare > MAX_PLAUSIBLE_SUPERELEVATION)


def parse_superelevation(values: Any, unit: str = "auto",
                         bare_percent: bool | None = None) -> np.ndarray:
    """Convert raw superelevation attribute values to fractions.

    Rule: a value written with ``%`` is a percentage. Bare numbers follow ``unit``:
    ``percent`` or ``fraction`` as told; ``auto`` decides once for the whole field: if any
    bare magnitude of the field exceeds :data:`MAX_PLAUSIBLE_SUPERELEVATION` (0.20) the
    field is in percent, otherwise in fractions (:func:`auto_bare_percent`). The field is
    the input layer's: a scan decides from all its features
    (:func:`curvescan.terrain.field_largest_bare`, over all partitions of a partitioned
    scan) and passes the decision as ``bare_percent``; without it the decision is made on
    ``values`` alone. An :class:`AssumptionWarning` is raised when ``auto`` reads the field
    as percent but ``values`` also hold bare non-zero values below 1 (which would mean
    less than 1 %, and look like fractions mixed in); its count adds up over partitions.
    Values outside [-0.15, 0.20] after conversion (what the physics stage accepts,
    :data:`curvescan.physics.limits.SUPERELEVATION_RANGE`), and unreadable text, become
    NaN with a counted :class:`DataQualityWarning`.

    Parameters
    ----------
    values : sequence
        Raw values (numbers, strings such as ``"6%"``, ``"0.06"``, ``"6"``, or None).
    unit : {"auto", "percent", "fraction"}
        How bare numbers are read.
    bare_percent : bool, optional
        With ``auto``: whether bare numbers are percent, decided on the whole field
        (:func:`auto_bare_percent`); None decides on ``values``. Ignored with another
        ``unit``.

    Returns
    -------
    ndarray of float
        Superelevation as fractions, positive toward the curve centre; NaN where unknown.
    """
    number, percent, bad = parse_number(values)
    bare = np.isfinite(number) & ~percent
    if unit == "percent":
        bare_pct = True
    elif unit == "fraction":
        bare_pct = False
    else:
        mags = np.abs(number[bare])
        bare_pct = bare_percent
        if bare_pct is None:
            bare_pct = auto_bare_percent(float(mags.max()) if mags.size else 0.0)
        small = int(((mags > 0) & (mags < 1)).sum()) if bare_pct else 0
        if small:
            warn_counted(
                "superelevation field read as percent (values above {limit}), but {small} bare "
                "value(s) below 1 look like fractions; they were read as percent too. Set the "
                "superelevation unit explicitly or write values with '%'",
                AssumptionWarning, {"small": small}, {"limit": MAX_PLAUSIBLE_SUPERELEVATION},
                stacklevel=3,
            )
    e = np.where(percent | (bare & bare_pct), number / 100.0, number)
    # what the physics stage accepts: steeper adverse slopes are not roads
    implausible = np.isfinite(e) & ~superelevation_accepted(e)
    if implausible.any() or bad.any():
        warn_counted(
            "superelevation field: {bad} unreadable value(s) and {implausible} value(s) outside "
            "{accepted} were ignored (terrain or the assumption used there instead)",
            DataQualityWarning, {"bad": int(bad.sum()), "implausible": int(implausible.sum())},
            {"accepted": SUPERELEVATION_RANGE_TEXT}, stacklevel=3,
        )
    return np.where(implausible, np.nan, e)


def design_superelevation(
    radius_m: np.ndarray, speed_kmh: np.ndarray, e_max: float
) -> np.ndarray:
    """Design superelevation from speed and radius, AASHTO distribution method 1.

    Method 1 of the AASHTO Green Book (2011, 6th ed., section 3.3.6; from memory) makes
    superelevation proportional to curvature: ``e = e_max * R_min / R``, capped at
    ``e_max``, with ``R_min = V^2 / (127 (e_max + f_max))`` and ``f_max`` from Table 3-7
    (:data:`AASHTO_FMAX_KMH`, interpolated, clamped to the table's speed range). Method 1
    gives less superelevation on mid-range curves than the tabulated method 5, so it errs
    toward lower limit speeds. The posted speed stands in for the design speed.

    Parameters
    ----------
    radius_m : ndarray
        Radius of the circular part (m).
    speed_kmh : ndarray
        Speed (km/h); NaN gives NaN.
    e_max : float
        Maximum superelevation rate (fraction).

    Returns
    -------
    ndarray of float
        Design superelevation (fraction).
    """
    v = np.asarray(speed_kmh, dtype=float)
    f_max = np.interp(v, *AASHTO_FMAX_KMH)
    r_min = v**2 / (127.0 * (e_max + f_max))
    with np.errstate(divide="ignore", invalid="ignore"):
        e = e_max * r_min / np.asarray(radius_m, dtype=float)
    return np.minimum(e, e_max)


def assume_superelevation(
    mode: str,
    radius_m: np.ndarray,
    posted_kmh: np.ndarray,
    *,
    crown: float,
    e_max: float,
    value: float | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-lane superelevation under a stated assumption.

    Parameters
    ----------
    mode : {"crown", "design", "zero", "value"}
        ``crown``: normal crown kept through the curve, inner lane ``+crown``, outer lane
        ``-crown`` (adverse); ``design``: :func:`design_superelevation` from posted speed and
        radius (a design value below the crown keeps the crown; unknown posted speed falls
        back to ``crown`` with a counted warning); ``zero``: flat; ``value``: ``value`` on
        both lanes.
    radius_m, posted_kmh : ndarray
        Per curve.
    crown : float
        Normal crown slope (fraction, positive).
    e_max : float
        Maximum superelevation for ``design``.
    value : float or None
        Superelevation for ``value``.

    Returns
    -------
    inner, outer : ndarray of float
        Lane slopes (fraction, positive toward the centre).
    applied : ndarray of str
        Mode applied per curve.
    """
    n = len(radius_m)
    inner = np.full(n, crown)
    outer = np.full(n, -crown)
    applied = np.full(n, "crown", dtype=object)
    if mode == "zero":
        inner[:] = outer[:] = 0.0
        applied[:] = "zero"
    elif mode == "value":
        inner[:] = outer[:] = float(value if value is not None else 0.0)
        applied[:] = "value"
    elif mode == "design":
        e_d = design_superelevation(radius_m, posted_kmh, e_max)
        known = np.isfinite(e_d)
        banked = known & (e_d >= crown)
        inner[banked] = outer[banked] = e_d[banked]
        applied[known] = "design"
        warn_counted(
            "design superelevation needs the posted speed: unknown for {unknown} of {n} "
            "curve(s), normal crown assumed there", AssumptionWarning,
            {"unknown": int((~known).sum()), "n": n}, when=["unknown"], stacklevel=3,
        )
    return inner, outer, applied
