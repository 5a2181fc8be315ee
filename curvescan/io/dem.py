"""Elevations from a DEM raster, read by windows around the sample points.

This is the only module that opens DEMs (GeoTIFF, VRT, cloud-optimised GeoTIFF or anything
else GDAL reads). The raster is never resampled and never read whole: the sample points are
transformed into the DEM's CRS, grouped by raster tile, and each group is served by one
window read just large enough to hold its points' bilinear neighbourhoods. Memory therefore
depends on the tile size, not on the raster size.
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import rasterio
from pyproj import CRS, Transformer
from rasterio.enums import ColorInterp
from rasterio.errors import RasterioError
from rasterio.windows import Window

from ..errors import AssumptionWarning, CRSError, DataQualityWarning, DataSourceError, InputError
from ..recording import warn_counted

__all__ = ["DemInfo", "sample_dem", "write_dem", "VERTICAL_UNITS"]

#: Metres per vertical unit of the DEM values.
VERTICAL_UNITS: dict[str, float] = {"metre": 1.0, "foot": 0.3048}

#: Largest window edge read at once (pixels); bounds memory per read to ~4 MB of float64.
_MAX_TILE_PX = 2048
_MIN_TILE_PX = 256

#: Elevations (m) outside this range are no ground on Earth (the Dead Sea shore lies near
#: -430 m, Everest at 8849 m; common knowledge): cells holding them are read as gaps
#: (an undeclared nodata value such as -9999, or elevations in another unit).
PLAUSIBLE_ELEVATION_M = (-500.0, 9000.0)

#: Band colours of an image, not of an elevation model.
_IMAGE_COLOURS = (ColorInterp.red, ColorInterp.green, ColorInterp.blue, ColorInterp.palette)


@dataclass
class DemInfo:
    """What was read from a DEM, for the run record.

    Attributes
    ----------
    path : str
        DEM path as given.
    crs : str
        DEM CRS as WKT.
    width, height : int
        Raster size in pixels.
    cell_m : float
        Cell size measured in the working (metric) CRS at the sampled area, metres
        (geometric mean of the two pixel edges).
    dtype : str
        Band data type.
    nodata : float or None
        Declared nodata value.
    vertical_unit : str
        Unit of the stored elevations (``metre`` or ``foot``); values are returned in metres.
    windows_read : int
        Number of window reads.
    cells_read : int
        Total pixels read over all windows.
    points, points_inside, points_valid : int
        Sample points asked for, inside the raster extent, and with a valid value.
    value_step_m : float
        Smallest elevation step the stored values can express, metres (scale of an
        integer band times the vertical unit; 0 for floating-point bands).
    points_implausible : int
        Sample points whose interpolation touched a cell outside
        :data:`PLAUSIBLE_ELEVATION_M` (read as a gap).
    """

    path: str
    crs: str
    width: int
    height: int
    cell_m: float
    dtype: str
    nodata: float | None
    vertical_unit: str
    windows_read: int = 0
    cells_read: int = 0
    points: int = 0
    points_inside: int = 0
    points_valid: int = 0
    value_step_m: float = 0.0
    points_implausible: int = 0
    tile_px: tuple[int, int] = field(default=(0, 0))

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-serialisable dict (the CRS shortened to its name)."""
        d = asdict(self)
        d["crs"] = CRS.from_wkt(self.crs).name if self.crs else None
        d["tile_px"] = list(self.tile_px)
        return d


def _open(path: str) -> Any:
    try:
        return rasterio.open(path)
    except (RasterioError, OSError) as exc:
        raise DataSourceError(f"cannot open DEM {path}: {exc}") from None


def _tile_shape(src: Any) -> tuple[int, int]:
    bh, bw = src.block_shapes[0]
    th = int(min(max(bh, _MIN_TILE_PX), _MAX_TILE_PX))
    tw = int(min(max(bw, _MIN_TILE_PX), _MAX_TILE_PX))
    return th, tw


def _check_elevation_band(src: Any, path: str) -> None:
    """Refuse rasters that cannot hold elevations: an image, or fewer than 2 x 2 cells."""
    colour = src.colorinterp[0] if src.colorinterp else None
    if colour in _IMAGE_COLOURS:
        raise InputError(
            f"DEM {path} is an image (band 1 holds {colour.name} values, {src.count} "
            "band(s)), not an elevation model; give a single-band raster of elevations"
        )
    if src.width < 2 or src.height < 2:
        raise InputError(
            f"DEM {path} has {src.width} x {src.height} cell(s); at least 2 x 2 are needed "
            "to interpolate elevations"
        )


def _feet(crs: CRS) -> bool:
    """Whether the CRS's horizontal axes are measured in feet."""
    units = [(a.unit_name or "").lower() for a in crs.axis_info
             if a.direction not in ("up", "down")]
    return any("foot" in u or "feet" in u for u in units)


def _declared_vertical_unit(crs: CRS) -> str | None:
    for axis in crs.axis_info:
        if axis.direction in ("up", "down"):
            name = (axis.unit_name or "").lower()
            if "foot" in name or "feet" in name:
                return "foot"
            if "metre" in name or "meter" in name:
                return "metre"
    return None


def sample_dem(
    path: str,
    x: np.ndarray,
    y: np.ndarray,
    crs: Any,
    *,
    vertical_unit: str = "metre",
    tile_px: tuple[int, int] | None = None,
) -> tuple[np.ndarray, np.ndarray, DemInfo]:
    """Sample a DEM bilinearly at points given in another CRS.

    Parameters
    ----------
    path : str
        Raster path (GeoTIFF, VRT, COG, any GDAL-readable raster); band 1 is used.
    x, y : ndarray of float
        Point coordinates in ``crs``.
    crs : object
        CRS of the points, anything ``pyproj.CRS.from_user_input`` accepts.
    vertical_unit : {"metre", "foot"}
        Unit of the stored elevations; results are converted to metres.
    tile_px : (int, int), optional
        Override the tile shape (rows, cols) used to group points into window reads.

    Returns
    -------
    z : ndarray of float64
        Elevation in metres; NaN outside the raster, on nodata/masked cells and where any
        neighbour with non-zero bilinear weight is nodata. At a cell centre the value equals
        that cell's value (times scale, plus offset, in metres).
    inside : ndarray of bool
        Point lies within the raster extent.
    info : DemInfo
        What was read.

    Raises
    ------
    DataSourceError
        The raster cannot be opened or read.
    CRSError
        The raster has no CRS, or the points' CRS is unknown.
    InputError
        ``vertical_unit`` is not one of :data:`VERTICAL_UNITS`; the raster is an image
        (band 1 red, green, blue or a palette) or has fewer than 2 x 2 cells.
    """
    if vertical_unit not in VERTICAL_UNITS:
        raise InputError(
            f"DEM vertical unit {vertical_unit!r} unknown; use one of {', '.join(VERTICAL_UNITS)}"
        )
    x = np.asarray(x, dtype="float64")
    y = np.asarray(y, dtype="float64")
    try:
        work_crs = CRS.from_user_input(crs)
    except Exception as exc:  # pyproj raises its own CRSError
        raise CRSError(f"working CRS {crs!r} is not usable: {exc}") from None
    with _open(path) as src:
        if src.crs is None or not src.crs.to_wkt():
            raise CRSError(
                f"DEM {path} has no coordinate reference system; assign one "
                "(for example gdal_edit.py -a_srs EPSG:XXXX) and run again"
            )
        _check_elevation_band(src, path)
        dem_crs = CRS.from_wkt(src.crs.to_wkt())
        declared = _declared_vertical_unit(dem_crs)
        if declared is not None and declared != vertical_unit:
            warnings.warn(
                f"DEM {path} declares vertical unit {declared} but {vertical_unit} was "
                "requested; using the requested unit",
                DataQualityWarning,
                stacklevel=3,
            )
        elif declared is None and vertical_unit == "metre" and _feet(dem_crs):
            warnings.warn(
                f"DEM {path} is in a CRS measured in feet and declares no vertical unit; "
                "its elevations are read as metres (give --dem-vertical-unit foot if they "
                "are feet)",
                AssumptionWarning,
                stacklevel=3,
            )
        if dem_crs == work_crs:
            fwd = back = None
            xd, yd = x, y
        else:
            fwd = Transformer.from_crs(work_crs, dem_crs, always_xy=True)
            back = Transformer.from_crs(dem_crs, work_crs, always_xy=True)
            xd, yd = fwd.transform(x, y)
            xd = np.where(np.isfinite(xd), xd, np.nan)
            yd = np.where(np.isfinite(yd), yd, np.nan)
        th, tw = tile_px or _tile_shape(src)
        info = DemInfo(
            path=str(path),
            crs=dem_crs.to_wkt(),
            width=src.width,
            height=src.height,
            cell_m=float("nan"),
            dtype=src.dtypes[0],
            nodata=None if src.nodata is None else float(src.nodata),
            vertical_unit=vertical_unit,
            points=int(x.size),
            tile_px=(th, tw),
        )
        scale = src.scales[0] if src.scales else 1.0
        offset = src.offsets[0] if src.offsets else 0.0
        metres = VERTICAL_UNITS[vertical_unit]
        if np.issubdtype(np.dtype(src.dtypes[0]), np.integer):
            info.value_step_m = abs(scale) * metres
        inv = ~src.transform
        colf = inv.a * xd + inv.b * yd + inv.c
        rowf = inv.d * xd + inv.e * yd + inv.f
        inside = (colf >= 0) & (colf <= src.width) & (rowf >= 0) & (rowf <= src.height)
        z = np.full(x.shape, np.nan)
        idx = np.flatnonzero(inside)
        info.points_inside = int(idx.size)
        if idx.size:
            # the plausible range in stored values (a negative scale swaps its ends)
            lo, hi = sorted((m / metres - offset) / scale if scale else m
                            for m in PLAUSIBLE_ELEVATION_M)
            z[idx] = _bilinear_by_tiles(src, colf[idx], rowf[idx], (th, tw), info, (lo, hi))
            z = (z * scale + offset) * metres
        info.points_valid = int(np.isfinite(z).sum())
        warn_counted("{implausible} DEM sample(s) fell on cells with elevations outside "
                     "{lo}..{hi} m (an undeclared nodata value such as -9999, or "
                     "elevations in another unit: --dem-vertical-unit); those cells were "
                     "read as gaps", DataQualityWarning,
                     {"implausible": info.points_implausible},
                     {"lo": f"{PLAUSIBLE_ELEVATION_M[0]:g}",
                      "hi": f"{PLAUSIBLE_ELEVATION_M[1]:g}"},
                     when=["implausible"], stacklevel=3)
        info.cell_m = _cell_size_m(src.transform, xd, yd, inside, back)
    return z, inside, info


def _bilinear_by_tiles(
    src: Any, colf: np.ndarray, rowf: np.ndarray, tile: tuple[int, int], info: DemInfo,
    plausible: tuple[float, float] = (-np.inf, np.inf),
) -> np.ndarray:
    """Bilinear values at fractional pixel positions, one window read per tile group.

    Stored values outside ``plausible`` count as gaps (NaN); the points that touch one
    are counted in ``info.points_implausible``.
    """
    h, w = src.height, src.width
    cx = colf - 0.5
    cy = rowf - 0.5
    c0 = np.floor(cx)
    r0 = np.floor(cy)
    tx = cx - c0
    ty = cy - r0
    c0 = c0.astype(np.int64)
    r0 = r0.astype(np.int64)
    c1 = np.clip(c0 + 1, 0, w - 1)
    r1 = np.clip(r0 + 1, 0, h - 1)
    c0 = np.clip(c0, 0, w - 1)
    r0 = np.clip(r0, 0, h - 1)
    th, tw = tile
    ntc = (w + tw - 1) // tw
    tile_id = (r0 // th) * ntc + (c0 // tw)
    order = np.argsort(tile_id, kind="stable")
    bounds = np.flatnonzero(np.diff(tile_id[order])) + 1
    starts = np.concatenate(([0], bounds))
    ends = np.concatenate((bounds, [order.size]))
    out = np.empty(colf.shape)
    for a, b in zip(starts, ends):  # one iteration per raster tile touched, not per point
        sel = order[a:b]
        rmin, rmax = int(r0[sel].min()), int(r1[sel].max())
        cmin, cmax = int(c0[sel].min()), int(c1[sel].max())
        win = Window(cmin, rmin, cmax - cmin + 1, rmax - rmin + 1)
        try:
            block = src.read(1, window=win, masked=True)
        except RasterioError as exc:
            raise DataSourceError(f"cannot read DEM {src.name} window {win}: {exc}") from None
        arr = np.ma.filled(block.astype("float64"), np.nan)
        odd = (arr < plausible[0]) | (arr > plausible[1])
        arr[odd] = np.nan
        info.windows_read += 1
        info.cells_read += int(arr.size)
        rr0, rr1 = r0[sel] - rmin, r1[sel] - rmin
        cc0, cc1 = c0[sel] - cmin, c1[sel] - cmin
        wx, wy = tx[sel], ty[sel]
        acc = np.zeros(sel.size)
        touched = np.zeros(sel.size, dtype=bool)
        for rr, cc, wt in (
            (rr0, cc0, (1 - wx) * (1 - wy)),
            (rr0, cc1, wx * (1 - wy)),
            (rr1, cc0, (1 - wx) * wy),
            (rr1, cc1, wx * wy),
        ):
            acc += np.where(wt > 0, wt * arr[rr, cc], 0.0)
            touched |= (wt > 0) & odd[rr, cc]
        info.points_implausible += int(touched.sum())
        out[sel] = acc
    return out


def _cell_size_m(
    transform: Any, xd: np.ndarray, yd: np.ndarray, inside: np.ndarray, back: Transformer | None
) -> float:
    """Pixel size in working-CRS metres at the median sampled position."""
    if inside.any():
        px, py = float(np.median(xd[inside])), float(np.median(yd[inside]))
    else:
        px, py = transform.c + 0.5 * (transform.a + transform.b), transform.f + 0.5 * (
            transform.d + transform.e
        )
    pts_x = np.array([px, px + transform.a, px + transform.b])
    pts_y = np.array([py, py + transform.d, py + transform.e])
    if back is not None:
        pts_x, pts_y = back.transform(pts_x, pts_y)
    dcol = np.hypot(pts_x[1] - pts_x[0], pts_y[1] - pts_y[0])
    drow = np.hypot(pts_x[2] - pts_x[0], pts_y[2] - pts_y[0])
    return float(np.sqrt(dcol * drow))


def write_dem(
    path: str,
    z: np.ndarray,
    transform: Any,
    crs: Any,
    *,
    nodata: float | None = None,
    dtype: str | None = None,
    blocksize: int = 256,
    **creation: Any,
) -> str:
    """Write a single-band tiled GeoTIFF (used for synthetic DEMs in tests and benchmarks).

    Parameters
    ----------
    path : str
        Output path.
    z : ndarray, shape (rows, cols)
        Elevations; NaN is written as ``nodata`` when given.
    transform : affine.Affine
        Pixel-to-CRS transform.
    crs : object or None
        CRS (``None`` writes a raster without CRS, for testing that refusal).
    nodata : float, optional
        Nodata value.
    dtype : str, optional
        Band type (default: ``z.dtype``); integer types are rounded.
    blocksize : int
        Tile edge in pixels.
    **creation
        Further GDAL creation options.

    Returns
    -------
    str
        ``path``.
    """
    dtype = dtype or str(z.dtype)
    data = np.asarray(z, dtype="float64")
    if nodata is not None:
        data = np.where(np.isfinite(data), data, nodata)
    if np.issubdtype(np.dtype(dtype), np.integer):
        data = np.rint(data)
    profile = dict(
        driver="GTiff",
        width=z.shape[1],
        height=z.shape[0],
        count=1,
        dtype=dtype,
        transform=transform,
        crs=None if crs is None else CRS.from_user_input(crs).to_wkt(),
        nodata=nodata,
        tiled=True,
        blockxsize=blocksize,
        blockysize=blocksize,
    )
    profile.update(creation)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data.astype(dtype), 1)
    return str(path)
