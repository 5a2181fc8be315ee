"""A demo scan written to a GeoPackage, shared by the assess/winter/styles/maps tests."""

from __future__ import annotations

import pytest

from tests.conftest import DEMO


def scan_demo(tmp_path_factory):
    """Scan the demo district (invented data) with its DEM; return (result, gpkg path)."""
    roads, dem = DEMO / "harrow_vale_roads.gpkg", DEMO / "harrow_vale_dem.tif"
    if not roads.exists():
        pytest.skip("demo data missing")
    from curvescan import scan
    from curvescan.cli.demo import DEMO_PARAMETERS

    result = scan(str(roads), dem=str(dem), **DEMO_PARAMETERS)
    out = tmp_path_factory.mktemp("demo") / "demo.gpkg"
    result.to_gpkg(out)
    return result, out
