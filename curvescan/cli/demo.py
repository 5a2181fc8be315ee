"""``curvescan demo``: scan the bundled Harrow Vale demo data (an invented district)."""

from __future__ import annotations

import os
from pathlib import Path

import click

from ..cautions import CAUTION

__all__ = ["demo_command", "demo_inputs"]

DEMO_PARAMETERS = {"speed_field": "maxspeed", "join_field": "ref"}


def demo_inputs(folder: str | None = None) -> tuple[Path, Path]:
    """Paths of the demo roads and DEM: from ``folder``, the repository's ``data_demo/``,
    or rebuilt (deterministically) into a cache folder."""
    from ..demo_data import DEM_FILE, ROADS_FILE, build

    candidates = [Path(folder)] if folder else []
    candidates += [Path.cwd() / "data_demo", Path(__file__).resolve().parents[2] / "data_demo"]
    for c in candidates:
        if (c / ROADS_FILE).exists() and (c / DEM_FILE).exists():
            return c / ROADS_FILE, c / DEM_FILE
    cache = Path(os.environ.get("XDG_CACHE_HOME", Path.home() / ".cache")) / "curvescan" / "demo"
    paths = build(cache)
    return paths["roads"], paths["dem"]


@click.command("demo", epilog="CAUTION: " + CAUTION,
               short_help="Scan the bundled demo district and print a summary.")
@click.option("-o", "--output", type=click.Path(dir_okay=False), default="curvescan_demo.gpkg",
              show_default=True, help="Output GeoPackage (replaced if it exists).")
@click.option("--data-dir", type=click.Path(file_okay=False), default=None,
              help="Folder with the demo data (default: data_demo/).")
@click.option("--vehicle", default=None, help="Vehicle preset (see `curvescan vehicles`).")
@click.pass_context
def demo_command(ctx: click.Context, output: str, data_dir: str | None,
                 vehicle: str | None) -> None:
    """Scan the demo road network of Harrow Vale (an invented hilly district) with its
    elevation model, write OUTPUT and print what was found."""
    import time

    from ..algorithms import SCAN
    from .main import run_guarded, summary_text

    roads, dem = demo_inputs(data_dir)
    params = dict(DEMO_PARAMETERS)
    if vehicle:
        params["vehicle"] = vehicle
    t0 = time.perf_counter()
    result = run_guarded(ctx, SCAN.run, str(roads), output, dem=str(dem), overwrite=True,
                         **params)
    if not ctx.obj.get("quiet", 0):
        click.echo(f"demo: Harrow Vale (invented district), roads {roads.name}, DEM {dem.name}")
        click.echo(summary_text(result, output))
        click.echo(f"time: {time.perf_counter() - t0:.1f} s")
