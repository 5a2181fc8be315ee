"""Declarations of parameters and algorithms.

Every tunable value of curvescan is declared exactly once, as a :class:`Param` in the
``PARAMETERS`` tuple of the stage module that uses it. The command line
(:mod:`curvescan.cli`) and any desktop-GIS plugin are generated from these declarations;
:class:`curvescan.config.ScanConfig` is built from them too. Adding a parameter therefore
means adding one ``Param`` in one place.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

from .errors import InputError

__all__ = ["Param", "Algorithm", "Port"]

#: Parameter kinds understood by the generators (CLI, GIS plugin).
KINDS = ("float", "int", "bool", "str", "choice", "crs", "field", "path")


@dataclass(frozen=True)
class Param:
    """One declared parameter.

    Parameters
    ----------
    name : str
        Python keyword name; the command-line flag is ``--`` + name with ``_`` as ``-``.
        Dimensional names carry their unit (``station_spacing_m``).
    kind : str
        One of ``float``, ``int``, ``bool``, ``str``, ``choice``, ``crs`` (anything
        ``pyproj.CRS.from_user_input`` accepts), ``field`` (a field name of the input
        layer) or ``path``.
    default : object
        Default value; ``None`` means "not set".
    help : str
        One sentence for help texts; state the unit.
    unit : str, optional
        Unit symbol shown in help (``m``, ``km/h``, ``fraction``).
    stage : str
        Pipeline stage that reads it (``read``, ``prepare``, ``geometry``, ...).
    choices : tuple of str, optional
        Allowed values for ``kind="choice"``.
    minimum, maximum : float, optional
        Inclusive bounds for numbers.
    short : str, optional
        A short flag such as ``-v`` (rarely needed).
    advanced : bool
        Hidden from short help listings and shown in an "advanced" group by GUIs.
    """

    name: str
    kind: str
    default: Any
    help: str
    unit: str | None = None
    stage: str = "scan"
    choices: tuple[str, ...] | None = None
    minimum: float | None = None
    maximum: float | None = None
    short: str | None = None
    advanced: bool = False

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"Param {self.name!r}: unknown kind {self.kind!r}")
        if self.kind == "choice" and not self.choices:
            raise ValueError(f"Param {self.name!r}: a choice needs choices")

    @property
    def flag(self) -> str:
        """Command-line spelling, e.g. ``--station-spacing-m``."""
        return "--" + self.name.replace("_", "-")

    def label(self) -> str:
        """Human label with unit, e.g. ``Station spacing (m)``."""
        text = self.name.replace("_", " ")
        for suffix in (" m", " kmh", " deg", " kpa"):
            if text.endswith(suffix):
                text = text[: -len(suffix)]
        text = text[:1].upper() + text[1:]
        return f"{text} ({self.unit})" if self.unit else text

    def validate(self, value: Any) -> Any:
        """Return ``value`` converted to the declared kind, or raise InputError."""
        if value is None:
            return None
        try:
            if self.kind == "float":
                value = float(value)
                if not math.isfinite(value):
                    raise ValueError("not finite")
            elif self.kind == "int":
                if isinstance(value, float) and not value.is_integer():
                    raise ValueError("not a whole number")
                value = int(value)
            elif self.kind == "bool":
                if isinstance(value, str):
                    low = value.strip().lower()
                    if low not in ("true", "false", "1", "0", "yes", "no"):
                        raise ValueError("not a yes/no value")
                    value = low in ("true", "1", "yes")
                else:
                    value = bool(value)
            elif self.kind == "choice":
                value = str(value).strip().lower()
                if value not in self.choices:
                    raise ValueError(f"choose one of {', '.join(self.choices)}")
            else:
                value = value if self.kind == "crs" and not isinstance(value, str) else str(value)
        except (TypeError, ValueError) as exc:
            raise InputError(f"{self.flag}: {value!r} is not valid ({exc})") from None
        if self.kind in ("float", "int"):
            if self.minimum is not None and value < self.minimum:
                raise InputError(f"{self.flag}: {value} is below the minimum {self.minimum}")
            if self.maximum is not None and value > self.maximum:
                raise InputError(f"{self.flag}: {value} is above the maximum {self.maximum}")
        return value


@dataclass(frozen=True)
class Port:
    """An input or output of an algorithm (a layer, raster or file)."""

    name: str
    kind: str  # "vector", "raster", "gpkg", "file"
    help: str
    optional: bool = False


@dataclass(frozen=True)
class Algorithm:
    """A declared algorithm: what it takes, what it gives, and the function that runs it.

    The command line and GIS plugin wrap ``run`` and build their forms from ``inputs``,
    ``parameters`` and ``outputs``.
    """

    name: str
    title: str
    help: str
    inputs: tuple[Port, ...]
    parameters: tuple[Param, ...]
    outputs: tuple[Port, ...]
    run: Callable[..., Any] = field(compare=False)

    def param(self, name: str) -> Param:
        """Return the declared parameter called ``name``."""
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)


def collect(*groups: Sequence[Param]) -> tuple[Param, ...]:
    """Concatenate parameter groups, refusing duplicate names."""
    seen: dict[str, Param] = {}
    for group in groups:
        for p in group:
            if p.name in seen:
                raise ValueError(f"parameter {p.name!r} is declared twice")
            seen[p.name] = p
    return tuple(seen.values())


def parameters_markdown(params: Sequence[Param]) -> str:
    """A Markdown table per stage of the declared parameters (for docs/parameters.md)."""
    lines = ["# Parameters", "",
             "Generated from the declarations (`python -m curvescan.paramdoc`); do not edit by",
             "hand. Every parameter is a `curvescan scan` option (`--name-with-dashes`) and a",
             "keyword of `curvescan.scan(...)`.", ""]
    stages: dict[str, list[Param]] = {}
    for p in params:
        stages.setdefault(p.stage, []).append(p)
    for stage, group in stages.items():
        lines += [f"## {stage}", "", "| option | kind | default | unit | meaning |",
                  "|---|---|---|---|---|"]
        for p in group:
            kind = p.kind if not p.choices else " / ".join(p.choices)
            default = "" if p.default is None else f"`{p.default}`"
            lines.append(f"| `{p.flag}` | {kind} | {default} | {p.unit or ''} | "
                         f"{p.help.replace('|', '/')} |")
        lines.append("")
    return "\n".join(lines)

