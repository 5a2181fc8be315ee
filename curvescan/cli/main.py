"""The ``curvescan`` command line.

Exit codes: 0 success, 1 failure, 2 bad usage. Errors are one line; ``-v`` shows the
traceback. The scan command's options are generated from the declared parameters.
"""

from __future__ import annotations

import logging
import sys
import textwrap
from typing import Any

import click

from .._version import __version__
from ..algorithms import SCAN
from ..cautions import CAUTION
from ..errors import CurvescanError, CurvescanWarning
from ..recording import record_warnings
from .options import given, output_opt, overwrite_opt, param_options

EPILOG = "CAUTION: " + CAUTION

__all__ = ["main"]


def _show_versions(ctx: click.Context, _param: Any, value: bool) -> None:
    if not value or ctx.resilient_parsing:
        return
    import geopandas
    import numpy
    import pyogrio
    import pyproj
    import rasterio
    import shapely

    click.echo(f"curvescan {__version__}")
    click.echo(f"python    {sys.version.split()[0]}")
    for mod in (numpy, shapely, geopandas, pyogrio, pyproj, rasterio):
        click.echo(f"{mod.__name__:<10}{mod.__version__}")
    click.echo(f"GDAL      {pyogrio.__gdal_version_string__}")
    click.echo(f"GEOS      {shapely.geos_version_string}")
    click.echo(f"PROJ      {pyproj.proj_version_str}")
    ctx.exit()


@click.group(epilog=EPILOG, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("-v", "--verbose", count=True, help="More output; -v also shows tracebacks.")
@click.option("-q", "--quiet", count=True, help="Less output (no progress bar, no summary).")
@click.version_option(__version__, "--version", prog_name="curvescan")
@click.option("--show-versions", is_flag=True, expose_value=False, is_eager=True,
              callback=_show_versions, help="Show versions of curvescan and its libraries.")
@click.pass_context
def main(ctx: click.Context, verbose: int, quiet: int) -> None:
    """Find horizontal curves in road layers and screen them for safe speeds."""
    level = logging.WARNING - 10 * (verbose - quiet)
    level = max(level, logging.DEBUG)
    logging.basicConfig(level=level, format="%(levelname)s: %(message)s", stream=sys.stderr)
    # libraries (dask) set their own loggers to INFO; filter at the handler too
    for handler in logging.getLogger().handlers:
        handler.setLevel(level)
    ctx.obj = {"verbose": verbose, "quiet": quiet}


def run_guarded(ctx: click.Context, fn, *args: Any, **kwargs: Any) -> Any:
    """Run ``fn``; turn curvescan errors into one-line click errors (exit 1).

    curvescan's warnings are printed as one line each (``warning: ...``) unless ``-q``;
    other libraries' warnings only with ``-v``.
    """
    verbose = ctx.obj.get("verbose", 0) if ctx.obj else 0
    quiet = ctx.obj.get("quiet", 0) if ctx.obj else 0
    with record_warnings() as caught:
        try:
            result = fn(*args, **kwargs)
        except CurvescanError as exc:
            if verbose:
                raise
            raise click.ClickException(str(exc).splitlines()[0]) from None
        except MemoryError:
            raise click.ClickException("out of memory; scan the data in parts") from None
        finally:
            if not quiet:
                seen = set()
                for w in caught:
                    ours = issubclass(w.category, CurvescanWarning)
                    if (ours or verbose) and w.shown and w.text not in seen:
                        seen.add(w.text)
                        click.echo(f"warning: {w.text}" if ours else
                                   f"warning ({w.category.__name__}): {w.text}", err=True)
    return result


class _Progress:
    """A progress bar on stderr fed by stage fractions."""

    def __init__(self, enabled: bool) -> None:
        self.bar = click.progressbar(length=100, label="scanning", file=sys.stderr,
                                     show_eta=False) if enabled else None
        self.done = 0
        if self.bar is not None:
            self.bar.__enter__()

    def __call__(self, stage: str, fraction: float) -> None:
        if self.bar is None:
            return
        step = int(round(fraction * 100)) - self.done
        self.bar.label = stage
        if step > 0:
            self.bar.update(step)
            self.done += step

    def close(self) -> None:
        if self.bar is not None:
            self(self.bar.label, 1.0)
            self.bar.__exit__(None, None, None)


@main.command("scan", epilog=EPILOG, short_help="Scan a road layer for curves and hazards.")
@click.argument("input", metavar="INPUT")
@output_opt
@overwrite_opt
@click.option("--dem", type=click.Path(exists=True, dir_okay=False),
              help="Elevation model (GeoTIFF, VRT, COG) for superelevation and grade.")
@param_options(SCAN.parameters)
@click.pass_context
def scan_command(ctx: click.Context, input: str, output: str | None, overwrite: bool,
                 dem: str | None, **values: Any) -> None:
    """Find every horizontal curve of INPUT and flag curves whose posted speed exceeds
    what they can carry.

    INPUT is any line layer GDAL reads (GeoPackage, GeoParquet, Shapefile, GeoJSON,
    FlatGeobuf, GPX). The result is one GeoPackage with the layers curves, segments,
    hazards and run.
    """
    if output is None:
        raise click.UsageError("an output GeoPackage is needed: -o OUT.gpkg")
    quiet = ctx.obj.get("quiet", 0)
    progress = _Progress(enabled=not quiet and sys.stderr.isatty())
    try:
        result = run_guarded(ctx, SCAN.run, input, output, dem=dem, overwrite=overwrite,
                             progress=progress, **given(values, SCAN.parameters))
    finally:
        progress.close()
    if not quiet:
        click.echo(summary_text(result, output))


def summary_text(result: Any, output: str | None, worst: int = 10) -> str:
    """A short terminal summary of a scan result."""
    from ..report import summary_lines

    lines = summary_lines(result, worst=worst)
    if output:
        lines.append(f"written: {output}")
    lines.append("")
    lines.extend(textwrap.wrap("CAUTION: " + CAUTION, 88))
    return "\n".join(lines)


def _register() -> None:
    from .demo import demo_command
    from .report_cmds import hazards_command, map_command, profile_command
    main.add_command(demo_command)
    for command in (map_command, profile_command, hazards_command):
        main.add_command(command)
    try:
        from .presets import conditions_command, vehicles_command
    except ImportError:  # pragma: no cover - presets module is optional while built
        return
    main.add_command(vehicles_command)
    main.add_command(conditions_command)


_register()

if __name__ == "__main__":  # pragma: no cover
    main()
