"""Commands that read a scan result: ``map``, ``profile`` and ``hazards`` (CSV/GeoJSON)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click

from ..cautions import CAUTION
from ..errors import InputError

__all__ = ["map_command", "profile_command", "hazards_command", "export_table"]

EPILOG = "CAUTION: " + CAUTION

#: Fields of the compact hazards table (those present), after ``lon``/``lat``.
COMPACT_FIELDS = (
    "severity_rank", "winter_rank", "winter_score", "curve_id", "road_name", "src_fids",
    "lon", "lat", "radius_m", "posted_kmh", "mildest_condition", "exceeds_conditions",
    "limit_kmh", "limit_low_kmh", "limit_high_kmh", "band_position", "max_excess_kmh",
    "excess_dry_kmh", "excess_wet_kmh", "excess_snow_kmh", "excess_ice_kmh",
    "excess_rollover_kmh", "friction_margin", "governing_mechanism", "v_comfort_kmh",
    "speed_drop_kmh", "consistency", "winter_snow", "winter_ice", "winter_bridge",
    "winter_downgrade", "winter_surprise", "winter_traffic", "superelevation",
    "superelevation_source", "grade", "reliability",
)


def _read(path: str, layer: str):
    from ..io.vector import read_layer

    frame = read_layer(path, layer=layer)
    return frame.drop(columns=["src_fid"], errors="ignore")


def _output(path: str, overwrite: bool) -> Path:
    from ..io.vector import check_output_path

    return check_output_path(path, overwrite)


def _guard(ctx: click.Context, fn, *args: Any, **kwargs: Any) -> Any:
    from .main import run_guarded

    return run_guarded(ctx, fn, *args, **kwargs)


def _use_agg() -> None:
    import matplotlib

    matplotlib.use("Agg", force=True)


def _check_image_name(output: str) -> None:
    """Refuse (usage error) an image name whose extension matplotlib cannot write."""
    from matplotlib.backend_bases import FigureCanvasBase

    suffix = Path(output).suffix.lower()
    formats = FigureCanvasBase.get_supported_filetypes()
    if suffix[1:] not in formats:
        raise click.UsageError(f"cannot write an image as {suffix or 'no extension'!r}; "
                               f"name the output .png (or {', '.join(sorted(formats))})")


@click.command("map", epilog=EPILOG, short_help="Draw an overview map PNG of a result.")
@click.argument("result", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Output PNG.")
@click.option("--overwrite", is_flag=True, help="Replace the output if it exists.")
@click.option("--colour-by", "colour_by", type=click.Choice(["condition", "winter"]),
              default="condition", show_default=True,
              help="Colour curves by the mildest condition exceeded or by winter priority.")
@click.option("--labels", type=click.IntRange(0, 500), default=10, show_default=True,
              help="Label this many worst curves with their curve_id.")
@click.option("--dpi", type=click.IntRange(30, 600), default=150, show_default=True)
@click.pass_context
def map_command(ctx: click.Context, result: str, output: str, overwrite: bool,
                colour_by: str, labels: int, dpi: int) -> None:
    """Draw the curves of RESULT (a curvescan GeoPackage) on its road network as a PNG."""
    from ..maps import overview_map

    _check_image_name(output)

    def run() -> Path:
        _output(output, overwrite)
        _use_agg()
        curves = _read(result, "curves")
        segments = _read(result, "segments")
        winter = _read(result, "winter") if colour_by == "winter" else None
        return overview_map(curves, segments, output, colour_by=colour_by, winter=winter,
                            labels=labels, dpi=dpi)

    written = _guard(ctx, run)
    if not ctx.obj.get("quiet", 0):
        click.echo(f"written: {written}")


@click.command("profile", epilog=EPILOG,
               short_help="Plot curvature and speeds along one road of a result.")
@click.argument("result", type=click.Path(exists=True, dir_okay=False))
@click.option("--road", default=None, help="Road name (the road_name field).")
@click.option("--chain", type=int, default=None, help="Chain id instead of a road name.")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Output PNG.")
@click.option("--overwrite", is_flag=True, help="Replace the output if it exists.")
@click.option("--dpi", type=click.IntRange(30, 600), default=150, show_default=True)
@click.pass_context
def profile_command(ctx: click.Context, result: str, road: str | None, chain: int | None,
                    output: str, overwrite: bool, dpi: int) -> None:
    """Plot curvature and speeds along one road of RESULT.

    The curvature diagram and the posted, comfort and limit speeds per curve; choose the
    road with --road NAME or --chain ID.
    """
    if (road is None) == (chain is None):
        raise click.UsageError("choose one road: --road NAME or --chain ID")
    from ..maps import profile_plot

    _check_image_name(output)

    def run() -> Path:
        _output(output, overwrite)
        _use_agg()
        return profile_plot(_read(result, "curves"), _read(result, "segments"), output,
                            road=road, chain=chain, dpi=dpi)

    written = _guard(ctx, run)
    if not ctx.obj.get("quiet", 0):
        click.echo(f"written: {written}")


def export_table(frame: Any, path: str | Path, fmt: str, all_fields: bool = False) -> Path:
    """Write a result layer as CSV (midpoint lon/lat, WGS 84) or GeoJSON (RFC 7946).

    The CSV starts with one ``# CAUTION`` line (read it with ``comment="#"``); the GeoJSON
    carries the caution as a top-level ``caution`` member.
    """
    import shapely

    path = Path(path)
    if frame.crs is None:
        raise InputError("the layer has no CRS; cannot give WGS 84 coordinates")
    wgs = frame.to_crs(4326)
    if fmt == "geojson":
        keep = list(wgs.columns) if all_fields else \
            [c for c in COMPACT_FIELDS if c in wgs.columns] + ["geometry"]
        doc = json.loads(wgs[[c for c in keep if c not in ("lon", "lat")]].to_json(
            na="null", drop_id=True))
        doc["caution"] = CAUTION
        path.write_text(json.dumps(doc), encoding="utf-8")
        return path
    mid = shapely.get_coordinates(shapely.line_interpolate_point(
        wgs.geometry.to_numpy(), 0.5, normalized=True))
    table = wgs.drop(columns="geometry")
    table["lon"] = mid[:, 0].round(7) if len(mid) else []
    table["lat"] = mid[:, 1].round(7) if len(mid) else []
    if not all_fields:
        table = table[[c for c in COMPACT_FIELDS if c in table.columns]]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write("# CAUTION: " + CAUTION + "\n")
        table.to_csv(fh, index=False, float_format="%.6g")
    return path


@click.command("hazards", epilog=EPILOG,
               short_help="Export the hazards (or winter) layer as CSV or GeoJSON.")
@click.argument("result", type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Output .csv or .geojson.")
@click.option("-f", "--format", "fmt", type=click.Choice(["csv", "geojson"]), default=None,
              help="Output format [default: from the output's extension].")
@click.option("--layer", type=click.Choice(["hazards", "winter", "curves"]), default="hazards",
              show_default=True, help="Layer to export.")
@click.option("--all-fields", is_flag=True, help="Every field, not the compact set.")
@click.option("--overwrite", is_flag=True, help="Replace the output if it exists.")
@click.pass_context
def hazards_command(ctx: click.Context, result: str, output: str, fmt: str | None,
                    layer: str, all_fields: bool, overwrite: bool) -> None:
    """Write the hazards of RESULT as a table for people without a GIS.

    CSV with the midpoint longitude/latitude of each curve (WGS 84), or GeoJSON.
    """
    if fmt is None:
        suffix = Path(output).suffix.lower()
        fmt = {".csv": "csv", ".geojson": "geojson", ".json": "geojson"}.get(suffix)
        if fmt is None:
            raise click.UsageError(f"cannot tell the format from {suffix or 'no extension'!r};"
                                   " use -f csv or -f geojson")

    def run() -> tuple[Path, int]:
        _output(output, overwrite)
        frame = _read(result, layer)
        return export_table(frame, output, fmt, all_fields), len(frame)

    written, n = _guard(ctx, run)
    if not ctx.obj.get("quiet", 0):
        click.echo(f"written: {written} ({n} rows, {fmt})")
