"""CRS handling checked against pyproj: geographic and distorted input keep true radii."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely

import curvescan


def _geodesic_circle_road(lon0, lat0, radius_m, deflection_deg=90.0, n=40, tangent_m=300.0):
    """A road in lon/lat whose curve is a circle of known radius, built with pyproj.Geod.

    Points on the curve are at geodesic distance ``radius_m`` from the centre; the two
    tangents leave the curve ends perpendicular to the radius.
    """
    geod = pyproj.Geod(ellps="WGS84")
    az = np.linspace(180.0, 180.0 + deflection_deg, n)
    lon, lat, _ = geod.fwd(np.full(n, lon0), np.full(n, lat0), az, np.full(n, radius_m))
    # tangents: from each curve end, walk along the local tangent direction
    # azimuth grows clockwise, so travel is azimuth-from-centre + 90 degrees
    _, back0, _ = geod.inv(lon0, lat0, lon[0], lat[0])  # back azimuth: point -> centre
    lon_a, lat_a, _ = geod.fwd(lon[0], lat[0], back0 + 90, tangent_m)
    _, back1, _ = geod.inv(lon0, lat0, lon[-1], lat[-1])
    lon_b, lat_b, _ = geod.fwd(lon[-1], lat[-1], back1 - 90, tangent_m)
    xs = np.r_[lon_a, lon, lon_b]
    ys = np.r_[lat_a, lat, lat_b]
    return gpd.GeoDataFrame(geometry=[shapely.LineString(np.c_[xs, ys])], crs="EPSG:4326")


@pytest.mark.parametrize("lon0,lat0", [(10.3, 46.2), (-120.5, 64.0), (151.0, -33.8)])
@pytest.mark.parametrize("radius", [150.0, 600.0])
def test_geodesic_circle_radius_within_half_percent(lon0, lat0, radius):
    """Issue check: a circle of known radius built with pyproj.Geod in lon/lat comes back
    with that radius within 0.5 %."""
    roads = _geodesic_circle_road(lon0, lat0, radius)
    result = curvescan.scan(roads)
    assert len(result.curves) == 1
    assert result.curves["radius_m"].iloc[0] == pytest.approx(radius, rel=0.005)
    assert result.curves.crs.to_epsg() == 4326  # output in the input CRS by default


def test_web_mercator_input_is_reprojected_for_true_radius():
    """Web Mercator stretches lengths by 1/cos(lat) (about 1.44 at 46 N); radii must not."""
    roads = _geodesic_circle_road(10.3, 46.2, 300.0).to_crs("EPSG:3857")
    result = curvescan.scan(roads)
    assert result.curves["radius_m"].iloc[0] == pytest.approx(300.0, rel=0.005)
    assert "scale error" in " ".join(result.run["notes"])


def test_kept_utm_input_gives_ground_radius():
    """A curve drawn in UTM far from the central meridian: the map radius is the ground
    radius times the point scale factor (pyproj's get_factors), and the reported radius is
    the ground radius."""
    from curvescan.prepare import point_scale
    from curvescan.synthetic import Element, build, curve_elements

    els = [Element("tangent", 200.0, 0, 0)] + curve_elements(300.0, 250.0) + [
        Element("tangent", 200.0, 0, 0)]
    al = build(els)
    s = np.append(np.arange(0, al.length_m, 5.0), al.length_m)
    xy = al.points(s) + [750_000.0, 5_100_000.0]  # 250 km east of 9 E in zone 32N
    roads = gpd.GeoDataFrame(geometry=[shapely.LineString(xy)], crs="EPSG:32632")
    result = curvescan.scan(roads)
    k = point_scale(pyproj.CRS("EPSG:32632"), np.array([xy[:, 0].mean()]),
                    np.array([xy[:, 1].mean()]))[0]
    assert k == pytest.approx(1.00037, abs=2e-5)
    assert result.curves["radius_m"].iloc[0] == pytest.approx(300.0 / k, rel=2e-5)
    assert "input CRS" in " ".join(result.run["notes"])


def test_chord_tolerance_default_follows_the_input_units():
    """Points on a chord are left out within 1 mm on projected input, within 6 mm on input
    in degrees (stored rounded: OpenStreetMap keeps 1e-7 degree); a given value stays. The
    run record gives the value used."""
    import warnings

    from curvescan.config import make_config
    from curvescan.geometry import chord_tolerance_for
    th = np.radians(np.linspace(0.0, 60.0, 13))
    xy = np.c_[500000.0 + 300.0 * np.sin(th), 5200000.0 + 300.0 * (1.0 - np.cos(th))]
    projected = gpd.GeoDataFrame(geometry=[shapely.LineString(xy)], crs="EPSG:32632")
    degrees = projected.to_crs("EPSG:4326")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = curvescan.scan(projected).run["parameters"]["chord_vertex_tolerance_m"]
        b = curvescan.scan(degrees).run["parameters"]["chord_vertex_tolerance_m"]
        c = curvescan.scan(degrees, chord_vertex_tolerance_m=0.002)
    assert (a, b) == (0.001, 0.006)
    assert c.run["parameters"]["chord_vertex_tolerance_m"] == 0.002
    assert chord_tolerance_for(make_config(), None).chord_vertex_tolerance_m == 0.001
