"""Terrain stage: tilted-plane DEMs with analytically known superelevation and grade,
and every bad DEM input the terrain issue names (coverage, nodata, integer, feet, coarse).

The plane checks are analytic: on ``z = z0 + gx x + gy y`` the fall toward the centre at
heading ``h`` is ``gx sin h - gy cos h`` (left curve); averaged over headings spread evenly
in ``[-a, a]`` it is ``-gy sin(a)/a``. The grade of the symmetric arc is ``gx (1 - O(a^2))``.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from affine import Affine

from curvescan import terrain
from curvescan.config import make_config
from curvescan.errors import AssumptionWarning, CRSError, DataQualityWarning, InputError
from curvescan.io.dem import write_dem
from curvescan.synthetic_dem import plane_arcs, plane_grid

GX, GY = 0.05, -0.04
R, HALF = 2000.0, 0.06
A = (2 * R * HALF - 80) / (2 * R)  # half heading range of the sections (rad)
E_LEFT = -GY * math.sin(A) / A  # +0.03999: falls toward the centre (+y)
E_RIGHT = GY * math.sin(A) / A  # -0.03999: centre at -y, surface rises toward it
X_LEFT, Y_TOP, SHAPE = -200.0, 150.0, (300, 1500)


def _plane(tmp_path, name="plane.tif", cell=1.0, crs="EPSG:32633", **kw):
    shape = (int(SHAPE[0] / cell), int(SHAPE[1] / cell))
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, cell, shape)
    return z, write_dem(str(tmp_path / name), z, Affine(cell, 0, X_LEFT, 0, -cell, Y_TOP),
                        crs, **kw)


def _run(dem, **cfg):
    st, curves = plane_arcs(R, HALF)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = terrain.evaluate(curves, st, make_config(**cfg), dem)
    return out, caught


def test_tilted_plane_superelevation_and_grade(tmp_path):
    _, dem = _plane(tmp_path)
    out, _ = _run(dem)
    assert list(out["superelevation_source"]) == ["terrain", "terrain"]
    np.testing.assert_allclose(out["superelevation"], [E_LEFT, E_RIGHT], atol=2e-4)
    np.testing.assert_allclose(out["superelevation_inner"], [E_LEFT, E_RIGHT], atol=2e-4)
    np.testing.assert_allclose(out["superelevation_outer"], [E_LEFT, E_RIGHT], atol=2e-4)
    assert list(out["superelevation_adverse"]) == [False, True]
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=2e-4)
    # steepest downgrade: against the digitised direction; local dz/ds = gx cos h + gy sin h
    # (left) or gx cos h - gy sin h (right); 30 m windows centred from s = 40 m (curve
    # start) to 225 m (last full window), i.e. h = -0.04 .. +0.0525 rad
    h_lo, h_hi = -HALF + 40 / R, -HALF + 225 / R
    down_left = GX * math.cos(h_lo) + GY * math.sin(h_lo)
    down_right = GX * math.cos(h_hi) - GY * math.sin(h_hi)
    np.testing.assert_allclose(out["grade_max_down"], [down_left, down_right], atol=2e-4)
    assert list(out["grade_max_down_direction"]) == ["reverse", "reverse"]
    assert list(out["dem_quality"]) == ["good", "good"]
    assert (out["dem_cell_m"] == 1.0).all()
    assert (out["dem_residual_m"] < 1e-3).all()
    rec = terrain.run_record(out)
    assert rec["counts"] == {"attribute": 0, "terrain": 2, "assumed": 0}
    assert rec["dem_info"]["cell_m"] == 1.0


def test_dem_in_another_crs_is_sampled_by_transforming_points(tmp_path):
    # same transverse Mercator as UTM 33N but false easting 0: a pure shift of 500 km
    shifted = "+proj=tmerc +lat_0=0 +lon_0=15 +k=0.9996 +x_0=0 +y_0=0 +ellps=WGS84 +units=m"
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE)  # the same ground (elevations on Earth)
    dem = write_dem(str(tmp_path / "tm.tif"), z, Affine(1, 0, X_LEFT - 500000, 0, -1, Y_TOP),
                    shifted)
    out, _ = _run(dem)
    np.testing.assert_allclose(out["superelevation"], [E_LEFT, E_RIGHT], atol=3e-4)
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=3e-4)


def test_without_dem_assumes_crown_and_leaves_grade_null():
    out, caught = _run(None)
    assert list(out["superelevation_source"]) == ["assumed", "assumed"]
    # normal crown 2 %: TxDOT Roadway Design Manual section 4.10.4 (REFERENCES.md 10, V)
    np.testing.assert_allclose(out["superelevation"], [-0.02, -0.02])
    np.testing.assert_allclose(out["superelevation_inner"], [0.02, 0.02])
    assert out["superelevation_adverse"].all()
    assert out["grade"].isna().all()
    assert list(out["dem_quality"]) == ["no-dem", "no-dem"]
    assert any(issubclass(w.category, AssumptionWarning) and "2 of 2" in str(w.message)
               for w in caught)


def test_attribute_wins_over_terrain(tmp_path):
    _, dem = _plane(tmp_path)
    st, curves = plane_arcs(R, HALF)
    curves["attr_superelevation"] = ["6%", None]
    out = terrain.evaluate(curves, st, make_config(), dem)
    assert list(out["superelevation_source"]) == ["attribute", "terrain"]
    assert out["superelevation"].iloc[0] == pytest.approx(0.06)
    assert out["superelevation_se"].iloc[0] == 0.0
    assert out["superelevation_dem"].iloc[0] == pytest.approx(E_LEFT, abs=2e-4)


def test_coarse_dem_falls_back_for_superelevation_but_keeps_grade(tmp_path):
    _, dem = _plane(tmp_path, cell=30.0)
    out, caught = _run(dem)
    assert list(out["dem_quality"]) == ["coarse", "coarse"]
    assert list(out["superelevation_source"]) == ["assumed", "assumed"]
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=5e-4)
    assert any(issubclass(w.category, DataQualityWarning) and "2 curve(s)" in str(w.message)
               for w in caught)


def test_partial_coverage_falls_back_per_curve_with_counted_warning(tmp_path):
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, (300, 600))  # x -200..400: only the left chain
    dem = write_dem(str(tmp_path / "part.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                    "EPSG:32633")
    out, caught = _run(dem)
    assert list(out["dem_quality"]) == ["good", "outside"]
    assert list(out["superelevation_source"]) == ["terrain", "assumed"]
    assert out["grade"].notna().iloc[0] and out["grade"].isna().iloc[1]
    assert any(issubclass(w.category, DataQualityWarning) and "1 curve(s) outside" in
               str(w.message) for w in caught)


def test_nodata_holes_are_skipped_and_counted(tmp_path):
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE)
    z[:, 200:230] = np.nan  # a 30 m gap across the left curve (x 0-30 m)
    dem = write_dem(str(tmp_path / "holes.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                    "EPSG:32633", nodata=-9999.0)
    out, caught = _run(dem)
    assert out["dem_quality"].iloc[0] == "partial"
    assert out["superelevation_source"].iloc[0] == "terrain"
    assert out["superelevation"].iloc[0] == pytest.approx(E_LEFT, abs=2e-4)
    assert out["grade"].iloc[0] == pytest.approx(GX, abs=2e-4)
    assert out["dem_coverage"].iloc[0] < 0.95
    assert any("nodata holes" in str(w.message) for w in caught)


def test_all_nodata_gives_assumption(tmp_path):
    z = np.full(SHAPE, np.nan)
    dem = write_dem(str(tmp_path / "empty.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                    "EPSG:32633", nodata=-9999.0)
    out, _ = _run(dem)
    assert list(out["dem_quality"]) == ["nodata", "nodata"]
    assert out["grade"].isna().all()
    assert (out["superelevation_source"] == "assumed").all()


def test_integer_dem_with_scale_factor(tmp_path):
    # centimetres stored as int32 with GDAL scale 0.01
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE) * 100
    path = str(tmp_path / "cm.tif")
    write_dem(path, z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP), "EPSG:32633", dtype="int32")
    import rasterio

    with rasterio.open(path, "r+") as ds:
        ds.scales = (0.01,)
    out, _ = _run(path)
    np.testing.assert_allclose(out["superelevation"], [E_LEFT, E_RIGHT], atol=5e-4)
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=2e-4)


def test_dem_in_feet(tmp_path):
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE) / 0.3048  # international foot
    dem = write_dem(str(tmp_path / "ft.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                    "EPSG:32633")
    out, _ = _run(dem, dem_vertical_unit="foot")
    np.testing.assert_allclose(out["superelevation"], [E_LEFT, E_RIGHT], atol=2e-4)
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=2e-4)
    wrong, _ = _run(dem)  # read as metres: grade 3.28 times too steep
    assert wrong["grade"].iloc[0] == pytest.approx(GX / 0.3048, rel=1e-2)


def test_dem_without_crs_is_refused_in_one_line(tmp_path):
    _, dem = _plane(tmp_path, crs=None)
    with pytest.raises(CRSError, match="no coordinate reference system") as exc:
        _run(dem)
    assert "\n" not in str(exc.value)


def test_curves_without_crs_are_refused(tmp_path):
    _, dem = _plane(tmp_path)
    st, curves = plane_arcs(R, HALF)
    curves.attrs.clear()
    with pytest.raises(CRSError, match="working CRS"):
        terrain.evaluate(curves, st, make_config(), dem)


def test_lanes_and_width_attributes(tmp_path):
    _, dem = _plane(tmp_path)
    st, curves = plane_arcs(R, HALF)
    curves["attr_lanes"] = ["1", "lots"]
    curves["attr_width_m"] = ["4 m", None]
    with pytest.warns(DataQualityWarning, match="lanes field: 1"):
        out = terrain.evaluate(curves, st, make_config(), dem)
    np.testing.assert_allclose(out["superelevation"], [E_LEFT, E_RIGHT], atol=2e-4)


def test_value_assumption_needs_a_value():
    st, curves = plane_arcs(R, HALF)
    with pytest.raises(InputError, match="superelevation-assumed"):
        terrain.evaluate(curves, st, make_config(superelevation_assumption="value"), None)


def test_empty_table_keeps_schema():
    st, curves = plane_arcs(R, HALF)
    out = terrain.evaluate(curves.iloc[:0], st, make_config(), None)
    assert list(out.columns) == list(terrain.OUTPUT_COLUMNS)
    assert len(out) == 0


def test_index_is_kept_and_parameters_are_declared():
    st, curves = plane_arcs(R, HALF)
    curves.index = [17, 4]
    out = terrain.evaluate(curves, st, make_config(), None)
    assert list(out.index) == [17, 4]
    names = {p.name for p in terrain.PARAMETERS}
    assert {"superelevation_field", "dem_vertical_unit", "lane_width_m", "lanes",
            "superelevation_assumption"} <= names
    assert next(p for p in terrain.PARAMETERS
                if p.name == "superelevation_field").flag == "--superelevation-field"


def test_scan_decides_the_unit_on_every_feature_not_only_curves(curve_layer):
    # the straight road holds no curve, but its bare 6 makes the layer's field percent
    import geopandas as gpd
    import pandas as pd

    from curvescan import scan

    from .conftest import frame_from_lines

    straight = frame_from_lines([[[0.0, 3000.0], [600.0, 3000.0]]], maxspeed=["100"])
    layer = gpd.GeoDataFrame(pd.concat([curve_layer, straight], ignore_index=True),
                             crs=curve_layer.crs)
    layer["se"] = ["0.05", "6"]
    with pytest.warns(AssumptionWarning, match="1 bare value"):
        res = scan(layer, superelevation_field="se")
    assert len(res.curves) == 1
    assert res.curves["superelevation"].iloc[0] == pytest.approx(0.0005)
    assert res.curves["superelevation_source"].iloc[0] == "attribute"
    # the run record says how the field's bare numbers were read
    assert res.run["terrain"]["superelevation_field_unit"] == "percent"


def test_integer_dem_in_whole_metres_cannot_give_superelevation(tmp_path):
    # whole metres (int16, no scale): the cross-sections are flat steps, their fit "good"
    # and near zero; the DEM is coarse for superelevation, grade still comes from it
    _, dem = _plane(tmp_path, name="m.tif", dtype="int16")
    out, caught = _run(dem)
    assert list(out["dem_quality"]) == ["coarse", "coarse"]
    assert list(out["superelevation_source"]) == ["assumed", "assumed"]
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=2e-3)
    assert terrain.run_record(out)["dem_info"]["value_step_m"] == 1.0
    assert any(issubclass(w.category, DataQualityWarning) and "steps of 1 m" in
               str(w.message) for w in caught)


def test_integer_dem_in_centimetres_is_not_coarse(tmp_path):
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE) * 100
    path = write_dem(str(tmp_path / "cm.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                     "EPSG:32633", dtype="int32")
    import rasterio

    with rasterio.open(path, "r+") as ds:
        ds.scales = (0.01,)
    out, _ = _run(path)
    assert list(out["dem_quality"]) == ["good", "good"]
    assert terrain.run_record(out)["dem_info"]["value_step_m"] == pytest.approx(0.01)


def test_undeclared_nodata_value_is_read_as_a_gap(tmp_path):
    # -9999 in a strip, but no nodata value declared: read as elevations it made the
    # grade and cross-slopes absurd; now a gap, with a counted warning
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE)
    z[:, 200:230] = -9999.0
    dem = write_dem(str(tmp_path / "undeclared.tif"), z, Affine(1, 0, X_LEFT, 0, -1, Y_TOP),
                    "EPSG:32633")
    out, caught = _run(dem)
    assert out["dem_quality"].iloc[0] == "partial"
    assert out["superelevation"].iloc[0] == pytest.approx(E_LEFT, abs=2e-4)
    assert out["grade"].iloc[0] == pytest.approx(GX, abs=2e-4)
    assert terrain.run_record(out)["dem_info"]["points_implausible"] > 0
    assert any(issubclass(w.category, DataQualityWarning) and "outside -500..9000 m" in
               str(w.message) for w in caught)


def test_colour_image_is_refused_as_a_dem(tmp_path):
    import rasterio

    path = str(tmp_path / "rgb.tif")
    with rasterio.open(path, "w", driver="GTiff", width=300, height=200, count=3,
                       dtype="uint8", crs="EPSG:32633", photometric="RGB",
                       transform=Affine(1, 0, X_LEFT, 0, -1, Y_TOP)) as ds:
        ds.write(np.full((3, 200, 300), 120, dtype="uint8"))
    with pytest.raises(InputError, match="is an image") as exc:
        _run(path)
    assert "\n" not in str(exc.value)


def test_dem_of_one_cell_is_refused(tmp_path):
    # bilinear sampling of one cell gives the same value everywhere: a grade of 0 for
    # every curve, reported as measured
    dem = write_dem(str(tmp_path / "one.tif"), np.array([[100.0]]),
                    Affine(2000, 0, X_LEFT, 0, -2000, Y_TOP), "EPSG:32633", blocksize=16,
                    tiled=False)
    with pytest.raises(InputError, match="1 x 1 cell"):
        _run(dem)


def test_dem_in_a_feet_crs_without_a_vertical_unit_warns(tmp_path):
    ft = 0.3048
    utm_ft = "+proj=utm +zone=33 +datum=WGS84 +units=ft +no_defs"
    z = plane_grid(GX, GY, X_LEFT, Y_TOP, 1.0, SHAPE)  # metres, on a grid in feet
    t = Affine(1 / ft, 0, X_LEFT / ft, 0, -1 / ft, Y_TOP / ft)
    dem = write_dem(str(tmp_path / "ft_crs.tif"), z, t, utm_ft)
    out, caught = _run(dem)
    np.testing.assert_allclose(out["grade"], [GX, GX], atol=2e-4)
    assert any(issubclass(w.category, AssumptionWarning) and "measured in feet" in
               str(w.message) for w in caught)
    _, caught = _run(write_dem(str(tmp_path / "ft_ft.tif"), z / ft, t, utm_ft),
                     dem_vertical_unit="foot")
    assert not any("measured in feet" in str(w.message) for w in caught)
