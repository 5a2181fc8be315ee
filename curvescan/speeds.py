"""Posted speeds from attribute values: numbers, numbers with units, OSM ``maxspeed``.

Read forms (case-insensitive, surrounding blanks ignored):

=====================  ====================================================================
``50``, ``50.0``       a bare number, in the unit of ``speed_unit`` (km/h by default)
``50 km/h``, ``50kmh`` km/h (also ``kph``, ``km/hr``)
``30 mph``, ``30mph``  miles per hour (also ``mi/h``); 1 mph = 1.609344 km/h exactly
``20 knots``           knots (also ``kn``); 1 kn = 1.852 km/h exactly
``none``               OSM: no posted limit. Unknown unless ``speed_none_kmh`` is set
``signals``            OSM: variable limit shown by signs (also ``variable``). Unknown
``walk``               OSM: walking pace, through the ``[keywords]`` table
``DE:rural``           OSM: country-coded implicit limit, through the ``[speeds]`` table
``50;70``              OSM: several values; the highest is used (warned, counted)
=====================  ====================================================================

The implicit and keyword values live in a small editable table
(``curvescan/implicit_speeds.toml``); ``implicit_speeds_file`` adds or replaces entries.
Values that do not parse, and values that are negative, zero or above ``speed_max_kmh``
(e.g. ``999``), become NaN: they are counted and listed in the report, never guessed, and
no row is dropped.
"""

from __future__ import annotations

import tomllib
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from .errors import ConfigError, DataQualityWarning
from .recording import counted, warn_again, warn_counted

__all__ = ["parse_speeds", "load_speed_table", "MPH_TO_KMH", "KNOT_TO_KMH"]

#: Exact by definition of the international mile (1609.344 m).
MPH_TO_KMH = 1.609344
#: Exact by definition of the international nautical mile (1852 m).
KNOT_TO_KMH = 1.852

_TABLE_FILE = Path(__file__).with_name("implicit_speeds.toml")
_NUMBER_UNIT = (r"^(?P<num>[-+]?\d+(?:[.,]\d+)?)\s*"
                r"(?P<unit>km/h|kmh|kph|km/hr|mph|mi/h|knots|knot|kn)?$")
_UNIT_KIND = {"km/h": "kmh", "kmh": "kmh", "kph": "kmh", "km/hr": "kmh", "mph": "mph",
              "mi/h": "mph", "knots": "knots", "knot": "knots", "kn": "knots"}
_FACTOR = {"kmh": 1.0, "mph": MPH_TO_KMH, "knots": KNOT_TO_KMH}
_NO_LIMIT = ("none", "unlimited", "no")
_VARIABLE = ("signals", "variable")
_MAX_EXAMPLES = 50


@lru_cache(maxsize=8)
def load_speed_table(path: str | None = None) -> dict[str, dict[str, str]]:
    """Return the implicit-speed table: ``{"speeds": {...}, "keywords": {...}}``.

    Parameters
    ----------
    path : str, optional
        A TOML file with ``[speeds]`` and/or ``[keywords]`` tables of ``key = "value"``;
        its entries add to or replace the built-in ones.

    Raises
    ------
    ConfigError
        The file cannot be read or is not of that form.
    """
    def read(p: Path) -> dict[str, Any]:
        try:
            with open(p, "rb") as fh:
                return tomllib.loads(fh.read().decode("utf-8-sig"))  # a byte-order mark too
        except UnicodeDecodeError as exc:
            raise ConfigError(f"implicit speeds file {p}: not UTF-8 text (byte {exc.start}); "
                              "save it as UTF-8") from None
        except (OSError, tomllib.TOMLDecodeError) as exc:
            raise ConfigError(f"implicit speeds file {p}: {exc}") from None

    table: dict[str, dict[str, str]] = {"speeds": {}, "keywords": {}}
    for source in [_TABLE_FILE] + ([Path(path)] if path else []):
        data = read(source)
        unknown = set(data) - set(table)
        if unknown:
            raise ConfigError(f"implicit speeds file {source}: unknown table(s) "
                              f"{', '.join(sorted(unknown))}; use [speeds] and [keywords]")
        for part in table:
            if not isinstance(data.get(part, {}), dict):
                raise ConfigError(f"implicit speeds file {source}: '{part}' must be a table "
                                  f"([{part}] with key = \"value\" lines)")
            for key, value in data.get(part, {}).items():
                if not isinstance(value, (str, int, float)):
                    raise ConfigError(f"implicit speeds file {source}: {key} = {value!r} is "
                                      "not a speed")
                table[part][str(key).strip().lower()] = str(value)
    return table


def _parse_text(text: pd.Series, unit: str, table: Mapping[str, Mapping[str, str]],
                depth: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Parse lower-cased, stripped texts; return km/h (NaN if none) and a kind per text."""
    n = len(text)
    kmh = np.full(n, np.nan)
    kind = np.full(n, "unparsed", dtype=object)
    if n == 0:
        return kmh, kind
    found = text.str.extract(_NUMBER_UNIT)
    number = pd.to_numeric(found["num"].str.replace(",", ".", regex=False),
                           errors="coerce").to_numpy(dtype=float)
    unit_kind = found["unit"].map(_UNIT_KIND).to_numpy(dtype=object)
    has_num = np.isfinite(number)
    bare = has_num & pd.isna(unit_kind)
    kind[bare] = "bare"
    kmh[bare] = number[bare] * _FACTOR[unit]
    for name, factor in _FACTOR.items():
        sel = has_num & (unit_kind == name)
        kind[sel] = name
        kmh[sel] = number[sel] * factor
    values = text.to_numpy(dtype=object)
    kind[np.isin(values, _NO_LIMIT)] = "no_limit"
    kind[np.isin(values, _VARIABLE)] = "variable"
    if depth == 0:
        for part, label in (("keywords", "keyword"), ("speeds", "implicit")):
            entries = table.get(part, {})
            hit = np.isin(values, list(entries)) & (kind == "unparsed")
            if hit.any():
                mapped = pd.Series(values[hit]).map(entries).str.strip().str.lower()
                sub_kmh, sub_kind = _parse_text(mapped, unit="kmh", table=table,
                                                depth=depth + 1)
                kmh[hit] = sub_kmh
                kind[hit] = np.where(np.isin(sub_kind, ("no_limit", "variable")), sub_kind,
                                     np.where(np.isfinite(sub_kmh), label, "unparsed"))
        multi = (kind == "unparsed") & text.str.contains(";", regex=False).to_numpy()
        if multi.any():
            parts = text[multi].str.split(";").explode().str.strip()
            sub_kmh, sub_kind = _parse_text(parts, unit, table, depth=depth + 1)
            ok = pd.Series(np.isfinite(sub_kmh), index=parts.index).groupby(level=0).all()
            best = pd.Series(sub_kmh, index=parts.index).groupby(level=0).max()
            pos = np.flatnonzero(multi)
            good = ok.to_numpy()
            kmh[pos[good]] = best.to_numpy()[good]
            kind[pos[good]] = "multiple"
    return kmh, kind


def _examples(raw: pd.Series, mask: np.ndarray) -> dict[str, int]:
    counts = raw[mask].astype(str).value_counts()
    return {str(k): int(v) for k, v in counts.head(_MAX_EXAMPLES).items()}


def parse_speeds(values: pd.Series | np.ndarray, unit: str = "kmh", *, config: Any = None,
                 table_file: str | None = None, none_kmh: float | None = None,
                 max_kmh: float = 200.0) -> tuple[np.ndarray, dict]:
    """Parse posted speeds to km/h.

    Parameters
    ----------
    values : array-like
        Raw field values: numbers or strings such as ``"50"``, ``"50 km/h"``, ``"30 mph"``,
        ``"none"``, ``"DE:rural"``.
    unit : {"kmh", "mph"}
        Unit of bare numbers.
    config : ScanConfig, optional
        When given, ``implicit_speeds_file``, ``speed_none_kmh`` and ``speed_max_kmh`` are
        taken from it (they override the keyword arguments).
    table_file : str, optional
        Extra implicit-speed table (see :func:`load_speed_table`).
    none_kmh : float, optional
        Speed (km/h) used for ``none`` (no posted limit); unknown (NaN) when not given.
    max_kmh : float
        Values above this (km/h) are absurd: kept as unknown and counted.

    Returns
    -------
    speeds_kmh : ndarray of float
        One value per input row; NaN where unknown, unparsable or absurd.
    report : dict
        Counts per outcome (``parsed``, ``missing``, ``unparsed``, ``absurd``,
        ``no_limit``, ``variable``, ``implicit``, ``keyword``, ``multiple``), the
        unparsable and absurd values with their counts, units seen and ``mixed_units``.

    Warns
    -----
    DataQualityWarning
        Absurd values, several values in one field, mixed units. (Unparsable values are
        reported; the pipeline warns about them.)

    Examples
    --------
    >>> speeds, report = parse_speeds(["50", "30 mph", "DE:rural", "fast"])
    >>> [round(float(s), 3) for s in speeds[:3]], report["unparsed"]
    ([50.0, 48.28, 100.0], 1)
    """
    if config is not None:
        table_file = getattr(config, "implicit_speeds_file", table_file)
        none_kmh = getattr(config, "speed_none_kmh", none_kmh)
        max_kmh = getattr(config, "speed_max_kmh", max_kmh) or max_kmh
    if unit not in _FACTOR or unit == "knots":
        raise ValueError(f"speed unit must be 'kmh' or 'mph', not {unit!r}")
    table = load_speed_table(None if table_file is None else str(table_file))
    raw = pd.Series(np.asarray(values, dtype=object))
    text_all = raw.astype(str).str.strip()
    missing = (raw.isna() | (text_all == "")).to_numpy()
    codes, uniques = pd.factorize(text_all.str.lower().where(~missing))
    u_kmh, u_kind = _parse_text(pd.Series(uniques, dtype=object), unit, table)
    known = codes >= 0
    out = np.full(len(raw), np.nan)
    kind = np.full(len(raw), "missing", dtype=object)
    out[known] = u_kmh[codes[known]]
    kind[known] = u_kind[codes[known]]
    if none_kmh is not None:
        out[kind == "no_limit"] = float(none_kmh)
    absurd = np.isfinite(out) & ((out <= 0) | (out > max_kmh))
    out[absurd] = np.nan
    kind[absurd] = "absurd"
    unparsed = kind == "unparsed"
    units = {k: int(np.sum(kind == k)) for k in ("bare", "kmh", "mph", "knots")}
    mixed = mixes_units(units, unit)
    report: dict[str, Any] = {
        "parsed": int(np.isfinite(out).sum()),
        "missing": int(missing.sum()),
        "unparsed": int(unparsed.sum()),
        "unparsed_examples": sorted(set(raw[unparsed].astype(str)))[:10],
        "unparsed_values": _examples(raw, unparsed),
        "absurd": int(absurd.sum()),
        "absurd_values": _examples(raw, absurd),
        "max_kmh": float(max_kmh),
        "no_limit": int(np.sum(kind == "no_limit")),
        "no_limit_kmh": None if none_kmh is None else float(none_kmh),
        "variable": int(np.sum(kind == "variable")),
        "implicit": int(np.sum(kind == "implicit")),
        "keyword": int(np.sum(kind == "keyword")),
        "multiple": int(np.sum(kind == "multiple")),
        "units": units,
        "bare_unit": unit,
        "mixed_units": mixed,
        "implicit_table": str(table_file) if table_file else "built-in",
    }
    _warn_report(report)
    return out, report


#: the warning for a field that mixes units; a partitioned scan words it once for the layer
MIXED_UNITS = ("posted-speed field mixes units: {kmh} in km/h, {mph} in mph, {knots} in "
               "knots, {bare} bare numbers read as {bare_unit}; check --speed-unit")


def mixes_units(units: Mapping[str, int], bare_unit: str) -> bool:
    """Whether counts of values by unit (``bare``, ``kmh``, ``mph``, ``knots``) mix units.

    Bare numbers mix with values given explicitly in another unit than ``bare_unit``.
    """
    explicit_other = units["mph"] if bare_unit == "kmh" else units["kmh"]
    return bool((units["bare"] and explicit_other) or (units["kmh"] and units["mph"])
                or (units["knots"] and sum(units.values()) > units["knots"]))


def mixed_units_warning(report: Mapping[str, Any]):
    """The mixed-units warning of a parse report, as :class:`~curvescan.recording.Recorded`,
    or None when the report's units do not mix."""
    if not mixes_units(report["units"], report["bare_unit"]):
        return None
    u = report["units"]
    return counted(MIXED_UNITS, DataQualityWarning,
                   {k: u[k] for k in ("kmh", "mph", "knots", "bare")},
                   {"bare_unit": report["bare_unit"]})


def _warn_report(report: Mapping[str, Any]) -> None:
    """Emit one DataQualityWarning per problem kind found in a parse report."""
    if report["absurd"]:
        warn_counted("{absurd} posted-speed values are zero, negative or above {max_kmh} "
                     "km/h (e.g. {examples}); kept as unknown", DataQualityWarning,
                     {"absurd": report["absurd"]}, {"max_kmh": f"{report['max_kmh']:.0f}"},
                     list(report["absurd_values"]), stacklevel=3)
    mixed = mixed_units_warning(report)
    if mixed is not None:
        warn_again([mixed], stacklevel=3)
    if report["multiple"]:
        warn_counted("{multiple} posted-speed values list several speeds (a;b); the highest "
                     "is used", DataQualityWarning, {"multiple": report["multiple"]},
                     stacklevel=3)
