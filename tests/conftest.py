"""Shared fixtures: small analytic road layers built in code, the demo data, a CLI runner."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from curvescan.synthetic import Element, build, curve_elements

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data_demo"
UTM = "EPSG:32632"
ORIGIN = np.array([600_000.0, 5_100_000.0])


def pytest_report_header(config):
    import pyogrio
    import pyproj

    return (f"GDAL {pyogrio.__gdal_version_string__}, GEOS {shapely.geos_version_string}, "
            f"PROJ {pyproj.proj_version_str}")


def simple_curve(radius_m=200.0, deflection_deg=60.0, spiral_m=0.0, tangent_m=200.0,
                 left=True):
    """Tangent, (transition,) arc, (transition,) tangent as an exact alignment."""
    spiral_defl = spiral_m / radius_m  # two half-transitions: L/(2R) each
    arc = radius_m * np.radians(deflection_deg) - spiral_defl * radius_m
    els = [Element("tangent", tangent_m, 0.0, 0.0)]
    els += curve_elements(radius_m, arc, spiral_m, spiral_m, left, 1)
    els += [Element("tangent", tangent_m, 0.0, 0.0)]
    return build(els)


def frame_from_lines(lines, crs=UTM, **columns):
    """GeoDataFrame of LineStrings (arrays of xy) shifted to a UTM origin."""
    geoms = [shapely.LineString(np.asarray(xy) + ORIGIN) for xy in lines]
    data = {k: list(v) for k, v in columns.items()}
    return gpd.GeoDataFrame(data, geometry=geoms, crs=crs)


@pytest.fixture
def runner():
    return CliRunner()


@pytest.fixture
def curve_layer():
    """One road: R 200 m, 60 degrees, vertices every 10 m, posted 100 km/h."""
    al = simple_curve()
    s = np.append(np.arange(0, al.length_m, 10.0), al.length_m)
    return frame_from_lines([al.points(s)], maxspeed=["100"])


@pytest.fixture
def demo_roads():
    path = DEMO / "harrow_vale_roads.gpkg"
    if not path.exists():
        pytest.skip("demo data missing")
    return path


@pytest.fixture(autouse=True)
def _no_user_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    yield


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
