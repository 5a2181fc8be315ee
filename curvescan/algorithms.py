"""Declared algorithms: what each job takes, gives and which function runs it.

The command line (:mod:`curvescan.cli`) and the desktop-GIS plugin build their forms
from these declarations; neither keeps a list of parameters of its own.
"""

from __future__ import annotations

from typing import Any

from .config import SCAN_PARAMETERS
from .declare import Algorithm, Port

__all__ = ["SCAN", "ALGORITHMS", "run_scan"]


def run_scan(source: Any, output: Any = None, *, dem: Any = None, overwrite: bool = False,
             progress: Any = None, **parameters: Any):
    """Run a scan and, when ``output`` is given, write the GeoPackage. Returns the result."""
    from .pipeline import scan

    if output is not None:
        from .io.vector import check_output_path

        check_output_path(output, overwrite, suffix=".gpkg")  # fail before the work
        from .config import make_config
        from .parallel import scan_to_gpkg, wants_partitions

        if wants_partitions(source, make_config(**parameters)):  # streamed, bounded memory
            return scan_to_gpkg(source, output, dem=dem, overwrite=overwrite,
                                progress=progress, **parameters)
    result = scan(source, dem=dem, progress=progress, **parameters)
    if output is not None:
        result.to_gpkg(output, overwrite=overwrite)
    return result


SCAN = Algorithm(
    name="scan",
    title="Scan road curves",
    help=("Find every horizontal curve of a road centreline layer, measure radius, "
          "superelevation and grade, compute sliding, comfort and rollover speed limits "
          "per surface condition, and flag curves whose posted speed exceeds them."),
    inputs=(
        Port("input", "vector", "Road centreline layer (lines)."),
        Port("dem", "raster", "Elevation model for superelevation and grade.", optional=True),
    ),
    parameters=SCAN_PARAMETERS,
    outputs=(Port("output", "gpkg", "GeoPackage with curves, segments, hazards and run."),),
    run=run_scan,
)

#: Every declared algorithm, by name.
ALGORITHMS: dict[str, Algorithm] = {SCAN.name: SCAN}
