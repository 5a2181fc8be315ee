"""DEM sampler: agreement with rasterio's own ``sample()`` at cell centres, bilinear
interpolation, nodata, integer types, windowed reads of a raster far larger than memory,
VRT input, and refusal of a DEM without CRS.
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.windows import Window

from curvescan.errors import CRSError, DataSourceError
from curvescan.io.dem import sample_dem, write_dem

CRS = "EPSG:32633"


@pytest.mark.parametrize("dtype", ["float32", "int16", "uint16"])
def test_cell_centres_match_rasterio_sample(tmp_path, dtype):
    """rasterio's DatasetReader.sample() (nearest cell) is the outside reference."""
    rng = np.random.default_rng(1)
    z = rng.uniform(10, 900, (300, 400))
    tr = Affine(2.0, 0, 500000.0, 0, -2.0, 6000000.0)
    path = write_dem(str(tmp_path / f"r_{dtype}.tif"), z, tr, CRS, dtype=dtype, blocksize=64)
    rows = rng.integers(0, 300, 500)
    cols = rng.integers(0, 400, 500)
    xs = tr.c + (cols + 0.5) * tr.a
    ys = tr.f + (rows + 0.5) * tr.e
    with rasterio.open(path) as src:
        ref = np.array([v[0] for v in src.sample(zip(xs, ys))], dtype=float)
    got, inside, info = sample_dem(path, xs, ys, CRS, tile_px=(64, 64))
    assert inside.all()
    np.testing.assert_array_equal(got, ref)
    assert info.windows_read > 1  # grouped into several tile windows


def test_bilinear_between_centres(tmp_path):
    z = np.array([[0.0, 10.0], [20.0, 30.0]])
    path = write_dem(str(tmp_path / "b.tif"), z, Affine(1, 0, 0, 0, -1, 2), CRS, blocksize=16)
    # centre of the four cells, quarter points, and a point in the outer half-cell (clamped)
    x = np.array([1.0, 0.75, 0.5, 0.1, 3.0])
    y = np.array([1.0, 1.25, 1.5, 1.5, 1.0])
    got, inside, _ = sample_dem(path, x, y, CRS)
    # (0.75, 1.25) is a quarter cell from centre (0,0) toward each neighbour:
    # 0.5625*0 + 0.1875*10 + 0.1875*20 + 0.0625*30 = 7.5
    np.testing.assert_allclose(got[:4], [15.0, 7.5, 0.0, 0.0])
    assert not inside[4] and np.isnan(got[4])


def test_nodata_neighbour_gives_nan_only_when_weighted(tmp_path):
    z = np.array([[1.0, 2.0], [np.nan, 4.0]])
    path = write_dem(str(tmp_path / "n.tif"), z, Affine(1, 0, 0, 0, -1, 2), CRS,
                     nodata=-9999.0, blocksize=16)
    got, _, info = sample_dem(path, np.array([0.5, 1.0, 1.5]), np.array([1.5, 1.0, 0.5]), CRS)
    assert got[0] == 1.0  # exactly on a valid centre: the nodata cell has weight 0
    assert np.isnan(got[1]) and got[2] == 4.0
    assert info.points_valid == 2


def test_dem_without_crs(tmp_path):
    path = write_dem(str(tmp_path / "nocrs.tif"), np.zeros((20, 20)), Affine(1, 0, 0, 0, -1, 20),
                     None, blocksize=16)
    with pytest.raises(CRSError, match="has no coordinate reference system"):
        sample_dem(path, np.array([1.0]), np.array([1.0]), CRS)


def test_missing_file_is_a_data_source_error(tmp_path):
    with pytest.raises(DataSourceError, match="cannot open DEM"):
        sample_dem(str(tmp_path / "none.tif"), np.array([1.0]), np.array([1.0]), CRS)


def _vrt(path_vrt, src_path, width, height, transform, nodata):
    gt = ", ".join(repr(v) for v in transform.to_gdal())
    with rasterio.open(src_path) as src:
        wkt = src.crs.to_wkt()
    path_vrt.write_text(f"""<VRTDataset rasterXSize="{width}" rasterYSize="{height}">
  <SRS>{wkt.replace('"', '&quot;')}</SRS>
  <GeoTransform>{gt}</GeoTransform>
  <VRTRasterBand dataType="Float32" band="1">
    <NoDataValue>{nodata}</NoDataValue>
    <SimpleSource>
      <SourceFilename relativeToVRT="1">{src_path.name}</SourceFilename>
      <SourceBand>1</SourceBand>
      <SrcRect xOff="0" yOff="0" xSize="{width}" ySize="{height}"/>
      <DstRect xOff="0" yOff="0" xSize="{width}" ySize="{height}"/>
    </SimpleSource>
  </VRTRasterBand>
</VRTDataset>
""")
    return str(path_vrt)


def test_raster_far_larger_than_memory_is_read_by_windows(tmp_path):
    """A 100 000 x 100 000 float32 raster (40 GB of cells, sparse on disk) and a VRT over it:
    only windows around the points are read."""
    side = 100_000
    tr = Affine(1.0, 0, 400000.0, 0, -1.0, 6100000.0)
    path = tmp_path / "huge.tif"
    profile = dict(driver="GTiff", width=side, height=side, count=1, dtype="float32", crs=CRS,
                   transform=tr, nodata=-9999.0, tiled=True, blockxsize=256, blockysize=256,
                   sparse_ok=True)
    patch = np.arange(512 * 512, dtype="float32").reshape(512, 512) / 70.0  # 0..3745 m
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(patch, 1, window=Window(70_000, 30_000, 512, 512))
    assert path.stat().st_size < 50e6
    rows = np.array([30_000, 30_100, 30_511, 80_000])
    cols = np.array([70_000, 70_300, 70_511, 10_000])
    xs = tr.c + cols + 0.5
    ys = tr.f - rows - 0.5
    expect = [patch[0, 0], patch[100, 300], patch[511, 511], np.nan]
    vrt = _vrt(tmp_path / "huge.vrt", path, side, side, tr, -9999.0)
    for p in (str(path), vrt):
        got, inside, info = sample_dem(p, xs, ys, CRS)
        np.testing.assert_allclose(got, expect)
        assert inside.all()
        assert info.cells_read < 2_000_000  # vs 1e10 cells in the raster
        assert info.windows_read <= 4
