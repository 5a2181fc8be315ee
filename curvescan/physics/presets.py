"""Preset catalogue: built-in conditions and vehicles plus a user's TOML file.

A user file has ``[conditions.NAME]`` and ``[vehicles.NAME]`` tables::

    [conditions.slush]
    friction = 0.30
    friction_low = 0.20
    friction_high = 0.40
    source = "district skid trailer survey, winter 2024"

    [vehicles.gritter]
    rollover_threshold_g = 0.42
    source = "manufacturer tilt-table test"

A user entry with a built-in name replaces the built-in one.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from ..errors import ConfigError, InputError
from .conditions import BUILTIN_CONDITIONS, STANDARD_CONDITION_NAMES, Condition
from .vehicles import BUILTIN_VEHICLES, Vehicle

__all__ = ["Presets", "load_presets"]

# Keys a user may leave out, with the default (a string names the key whose value to copy).
_CONDITION_DEFAULTS: dict[str, Any] = {
    "label": None, "friction_low": "friction", "friction_high": "friction",
    "status": "user", "speed_gradient_png": 0.0, "reference_speed_kmh": 0.0,
    "speed_source": "",
}
_VEHICLE_DEFAULTS: dict[str, Any] = {
    "label": None, "threshold_low_g": "rollover_threshold_g",
    "threshold_high_g": "rollover_threshold_g", "status": "user",
    "tyre_pressure_kpa": 220.0, "pressure_source": "user", "mass_kg": 1500.0,
    "frontal_area_m2": 2.2, "downforce_coefficient": 0.0,
}


def _from_table(cls: type, kind: str, name: str, table: Any, origin: str,
                defaults: dict[str, Any]) -> Any:
    """Build a preset of ``cls`` from one TOML table, with clear errors."""
    where = f"{origin}: [{kind}.{name}]"
    if not isinstance(table, dict):
        raise ConfigError(f"{where} must be a table of keys")
    allowed = [f.name for f in fields(cls) if f.name != "name"]
    required = [k for k in allowed if k not in defaults]
    missing = [k for k in required if k not in table]
    if missing:
        raise ConfigError(f"{where} is missing {', '.join(missing)}")
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise ConfigError(
            f"{where} has unknown key(s) {', '.join(unknown)}; allowed: {', '.join(allowed)}"
        )
    values: dict[str, Any] = {}
    for key in allowed:
        if key in table:
            values[key] = table[key]
        elif defaults[key] is None:
            values[key] = name
        elif isinstance(defaults[key], str) and defaults[key] in table:
            values[key] = table[defaults[key]]
        else:
            values[key] = defaults[key]
    for key in ("label", "source", "status", "speed_source", "pressure_source"):
        if key in values and not isinstance(values[key], str):
            raise ConfigError(f"{where}: {key} must be text")
    try:
        return cls(name=name, **values)
    except ConfigError as exc:
        raise ConfigError(f"{origin}: {exc}") from None
    except (TypeError, ValueError) as exc:  # pragma: no cover - dataclass checks first
        raise ConfigError(f"{where}: {exc}") from None


@dataclass(frozen=True)
class Presets:
    """Conditions and vehicles available to a run."""

    conditions: dict[str, Condition]
    vehicles: dict[str, Vehicle]
    origin: str = "built-in"

    def vehicle(self, name: str) -> Vehicle:
        """Return the vehicle called ``name`` or raise InputError listing the known ones."""
        key = str(name).strip().lower()
        if key not in self.vehicles:
            raise InputError(
                f"unknown vehicle {name!r}; known: {', '.join(sorted(self.vehicles))}"
            )
        return self.vehicles[key]

    def select_conditions(self, names: str | list[str] | tuple[str, ...]) -> list[Condition]:
        """Resolve a comma list of condition names.

        The four standard conditions (dry, wet, snow, ice) are always included first;
        duplicates are dropped. Unknown names raise InputError listing the known ones.
        """
        items = names.split(",") if isinstance(names, str) else list(names)
        wanted = [str(n).strip().lower() for n in items if str(n).strip()]
        unknown = [n for n in wanted if n not in self.conditions]
        if unknown:
            raise InputError(
                f"unknown condition(s) {', '.join(unknown)};"
                f" known: {', '.join(sorted(self.conditions))}"
            )
        ordered = dict.fromkeys(list(STANDARD_CONDITION_NAMES) + wanted)
        return [self.conditions[n] for n in ordered]


def load_presets(path: str | Path | None = None) -> Presets:
    """Return the built-in presets, extended or overridden by a user TOML file.

    Parameters
    ----------
    path : str or Path, optional
        A TOML file with ``[conditions.NAME]`` and/or ``[vehicles.NAME]`` tables.

    Returns
    -------
    Presets

    Raises
    ------
    ConfigError
        The file cannot be read, is not valid TOML, or an entry is malformed.
    """
    conditions = dict(BUILTIN_CONDITIONS)
    vehicles = dict(BUILTIN_VEHICLES)
    if path is None or str(path) == "":
        return Presets(conditions, vehicles)
    origin = str(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise ConfigError(f"{origin}: cannot read preset file ({exc.strerror or exc})") from None
    try:
        doc = tomllib.loads(raw.decode("utf-8-sig"))  # a byte-order mark some editors write
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{origin}: not UTF-8 text (byte {exc.start}); save it as UTF-8"
                          ) from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{origin}: not valid TOML ({exc})") from None
    unknown = sorted(set(doc) - {"conditions", "vehicles"})
    if unknown:
        raise ConfigError(
            f"{origin}: unknown top-level table(s) {', '.join(unknown)};"
            " expected [conditions.NAME] and [vehicles.NAME]"
        )
    for kind, target, cls, defaults in (
        ("conditions", conditions, Condition, _CONDITION_DEFAULTS),
        ("vehicles", vehicles, Vehicle, _VEHICLE_DEFAULTS),
    ):
        section = doc.get(kind, {})
        if not isinstance(section, dict):
            raise ConfigError(f"{origin}: '{kind}' must be a table of [{kind}.NAME] tables")
        seen: dict[str, str] = {}
        for name, table in section.items():
            if name.lower() in seen:  # names are case-blind: the second would replace the first
                raise ConfigError(f"{origin}: [{kind}.{seen[name.lower()]}] and [{kind}.{name}]"
                                  " name the same preset (names are not case-sensitive)")
            seen[name.lower()] = name
            target[name.lower()] = _from_table(cls, kind, name.lower(), table, origin, defaults)
    return Presets(conditions, vehicles, origin=f"built-in + {origin}")
