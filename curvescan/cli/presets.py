"""``curvescan vehicles`` and ``curvescan conditions``: list presets with values and sources."""

from __future__ import annotations

import json
from typing import Any

import click

from ..errors import CurvescanError
from ..physics import limits
from ..physics.presets import Presets, load_presets

__all__ = ["vehicles_command", "conditions_command"]

_presets_file_opt = click.option(
    "--presets-file",
    type=click.Path(exists=True, dir_okay=False),
    default=None,
    help="TOML file of extra or replacement presets ([vehicles.NAME], [conditions.NAME]).",
)
_json_opt = click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")


def _load(path: str | None, kind: str, as_json: bool) -> tuple[Presets, list[Any]] | None:
    """Load presets and return them with the ``kind`` entries, or print JSON and return None."""
    try:
        presets = load_presets(path)
    except CurvescanError as exc:
        raise click.ClickException(str(exc)) from None
    items = list(getattr(presets, kind).values())
    if as_json:
        click.echo(json.dumps({item.name: item.as_record() for item in items}, indent=2))
        return None
    return presets, items


def _table(headers: list[str], rows: list[list[str]], sources: list[str]) -> str:
    """Plain aligned table; each row is followed by its indented source line."""
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(headers)]
    fmt = "  ".join(f"{{:<{w}}}" for w in widths)
    lines = [fmt.format(*headers).rstrip(), fmt.format(*("-" * w for w in widths))]
    for row, source in zip(rows, sources):
        lines.append(fmt.format(*row).rstrip())
        lines.append(f"    source: {source}")
    return "\n".join(lines)


@click.command("vehicles")
@_presets_file_opt
@_json_opt
def vehicles_command(presets_file: str | None, as_json: bool) -> None:
    """List vehicle profiles: static rollover threshold (g), tyre pressure and sources."""
    loaded = _load(presets_file, "vehicles", as_json)
    if loaded is None:
        return
    presets, vehicles = loaded
    rows = [
        [
            v.name,
            f"{v.rollover_threshold_g:.2f}",
            f"{v.threshold_low_g:.2f}-{v.threshold_high_g:.2f}",
            f"{v.tyre_pressure_kpa:.0f}",
            f"{float(limits.hydroplaning_speed_kmh(v.tyre_pressure_kpa)):.0f}",
            f"{v.downforce_coefficient:g}",
            v.status,
        ]
        for v in vehicles
    ]
    headers = ["vehicle", "rollover_g", "range_g", "tyre_kpa", "hydroplane_kmh", "C_L", "status"]
    click.echo(_table(headers, rows, [v.source for v in vehicles]))
    click.echo(f"\npresets: {presets.origin}; status V = verified, V-2nd = secondary source,"
               " M = from memory, D = derived")


def _speed_text(c: Any) -> str:
    if not c.speed_dependent:
        return "constant"
    return f"PNG {c.speed_gradient_png:g} %/(km/h) from {c.reference_speed_kmh:g} km/h"


@click.command("conditions")
@_presets_file_opt
@_json_opt
def conditions_command(presets_file: str | None, as_json: bool) -> None:
    """List surface conditions: friction, its range, speed dependence and sources."""
    loaded = _load(presets_file, "conditions", as_json)
    if loaded is None:
        return
    presets, conditions = loaded
    rows = [
        [c.name, f"{c.friction:.2f}", f"{c.friction_low:.2f}-{c.friction_high:.2f}",
         _speed_text(c), c.status]
        for c in conditions
    ]
    sources = [c.source + (f"; speed: {c.speed_source}" if c.speed_source else "")
               for c in conditions]
    click.echo(_table(["condition", "friction", "range", "speed dependence", "status"],
                      rows, sources))
    click.echo(f"\npresets: {presets.origin}; status V = verified, V-2nd = secondary source,"
               " M = from memory, D = derived")
