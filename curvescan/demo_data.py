"""The bundled demo: the road network of Harrow Vale, an invented hilly rural district.

Everything here is invented: the place, the road names, the speeds and the terrain. It is
demo data only and never a check value. :func:`build` writes

* ``harrow_vale_roads.gpkg``: about 50 roads in WGS 84 (as GPS or OSM data would come),
  with ``name``, ``ref``, ``maxspeed`` (some messy values), ``lanes``, ``bridge``, ``aadt``;
  several roads are split into features mid-curve and some are digitised backwards;
* ``harrow_vale_dem.tif``: a 1.25 m elevation model (centimetres) (UTM zone 32N) with hills and the road
  surfaces built in: a normal crown on tangents, superelevation on curves with linear
  runoff along the transitions, some village curves left on an adverse crown.

Deterministic for a given seed. Run ``python data_demo/make_demo.py`` to rebuild.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from affine import Affine
from scipy.ndimage import gaussian_filter
from scipy.spatial import cKDTree

from .synthetic import random_alignment, split_features

__all__ = ["build", "ROADS_FILE", "DEM_FILE", "DEM_CRS"]

ROADS_FILE = "harrow_vale_roads.gpkg"
DEM_FILE = "harrow_vale_dem.tif"
DEM_CRS = "EPSG:32632"
_ORIGIN = (612_000.0, 5_118_000.0)  # lower-left corner of the district (UTM 32N)
_SIZE = (2400.0, 2000.0)
_CELL = 1.25
_HALF_WIDTH = 3.5  # lane width; two lanes
_CROWN = 0.02

_FIRST = ["Alder", "Kestrel", "Bramble", "Fenwick", "Harrow", "Mossbank", "Tarn", "Whinfell",
          "Coldbeck", "Rowan", "Larkhill", "Stonegill", "Ashby", "Ferny", "Gorse", "Heron"]
_LAST = ["Lane", "Rise", "Road", "Brow", "Way", "Hollow", "Bank", "Edge"]


def _terrain(rng: np.random.Generator, shape: tuple[int, int]) -> np.ndarray:
    """Smooth hills around 550 m, grades mostly under 8 %."""
    z = np.zeros(shape)
    for sigma, amp in ((300, 22.0), (80, 4.0), (20, 0.6)):
        field = gaussian_filter(rng.normal(size=shape), sigma)
        z += amp * field / (field.std() + 1e-12)
    return 550.0 + z


def _road_classes(rng: np.random.Generator, n: int) -> pd.DataFrame:
    kinds = rng.choice(["main", "link", "lane"], size=n, p=[0.25, 0.35, 0.40])
    spec = {
        "main": ((120.0, 1200.0), ["100", "80", "90"], (2500, 9000)),
        "link": ((60.0, 600.0), ["80", "70", "60", "60 km/h"], (600, 3000)),
        "lane": ((25.0, 300.0), ["60", "50", "40", "30 mph"], (50, 800)),
    }
    rows = []
    for i, k in enumerate(kinds):
        radii, speeds, aadt = spec[k]
        rows.append({"kind": k, "radii": radii, "maxspeed": str(rng.choice(speeds)),
                     "aadt": int(rng.integers(*aadt)),
                     "name": f"{_FIRST[i % len(_FIRST)]} {_LAST[(i * 7 + i // 16) % len(_LAST)]}",
                     "ref": f"HV{i + 1:02d}"})
    return pd.DataFrame(rows)


def _superelevation(kappa: np.ndarray, speed_kmh: float, village: bool) -> np.ndarray:
    """Cross-slope toward the curve centre: a design-like rule, crown on flat curvature."""
    radius = 1.0 / np.maximum(np.abs(kappa), 1e-9)
    e = np.clip(0.6 * speed_kmh ** 2 / (127.0 * radius), _CROWN, 0.08)
    if village:
        return np.full_like(kappa, -_CROWN)
    ramp = np.clip(np.abs(kappa) * 400.0, 0.0, 1.0)  # fade to crown on gentle curvature
    return -_CROWN + (e + _CROWN) * ramp


def build(folder: str | Path, seed: int = 7, n_roads: int = 50) -> dict[str, Path]:
    """Write the demo roads and DEM into ``folder``; return their paths."""
    from .io.dem import write_dem

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    cols, rows = int(_SIZE[0] / _CELL), int(_SIZE[1] / _CELL)
    ground = _terrain(rng, (rows, cols))
    classes = _road_classes(rng, n_roads)
    box = shapely.box(_ORIGIN[0], _ORIGIN[1], _ORIGIN[0] + _SIZE[0], _ORIGIN[1] + _SIZE[1])
    inner = box.buffer(-30.0)
    records, dense = [], []
    for i, cls in classes.iterrows():
        al = random_alignment(rng, int(rng.integers(3, 8)), radius_range_m=cls["radii"],
                              deflection_range_deg=(12.0, 110.0), tangent_range_m=(60.0, 300.0))
        start = (rng.uniform(_ORIGIN[0] + 200, _ORIGIN[0] + _SIZE[0] - 200),
                 rng.uniform(_ORIGIN[1] + 200, _ORIGIN[1] + _SIZE[1] - 200))
        s = np.arange(0.0, al.length_m, 0.5)
        xy = al.points(s) - al.points(np.array([al.length_m / 2]))[0] + start
        inside = shapely.contains_xy(inner, xy[:, 0], xy[:, 1])
        if inside.sum() < 200:
            continue
        run = _longest_run(inside)
        s, xy = s[run], xy[run]
        kappa = al.curvature(s)
        speed = float(str(cls["maxspeed"]).split()[0])
        village = bool(rng.random() < 0.15)
        e = _superelevation(kappa, speed, village)
        heading = np.unwrap(np.arctan2(*np.gradient(xy, axis=0)[:, ::-1].T))
        dense.append(pd.DataFrame({"road": i, "x": xy[:, 0], "y": xy[:, 1], "s": s,
                                   "kappa": kappa, "e": e, "heading": heading}))
        verts = xy[:: int(rng.integers(10, 30))]
        verts = np.vstack([verts, xy[-1:]]) if not np.allclose(verts[-1], xy[-1]) else verts
        verts = verts + rng.normal(0.0, 0.15, verts.shape)
        pieces = split_features(verts, rng, int(rng.integers(1, 4)), reverse_share=0.3)
        for piece in pieces:
            records.append({"name": cls["name"], "ref": cls["ref"], "maxspeed": cls["maxspeed"],
                            "lanes": 2, "bridge": "yes" if rng.random() < 0.06 else "no",
                            "aadt": cls["aadt"], "road_class": cls["kind"],
                            "geometry": shapely.LineString(piece)})
    roads = gpd.GeoDataFrame(records, geometry="geometry", crs=DEM_CRS)
    messy = rng.choice(len(roads), size=4, replace=False)
    roads.loc[messy[:2], "maxspeed"] = ["national", ""]
    roads.loc[messy[2:3], "aadt"] = -1
    roads["aadt"] = roads["aadt"].astype("Int64")
    roads.loc[messy[2:3], "aadt"] = pd.NA
    dem = _carve(ground, pd.concat(dense, ignore_index=True))
    out = {"roads": folder / ROADS_FILE, "dem": folder / DEM_FILE}
    from .io.vector import write_layers

    write_layers(out["roads"], {"roads": roads.to_crs("EPSG:4326")}, overwrite=True)
    transform = Affine(_CELL, 0, _ORIGIN[0], 0, -_CELL, _ORIGIN[1] + _SIZE[1])
    # stored as whole centimetres (int32, scale 0.01) to keep the file small
    write_dem(str(out["dem"]), np.round(dem * 100.0), transform, DEM_CRS, dtype="int32",
              compress="deflate", predictor=2, zlevel=9)
    import rasterio  # the band's scale turns centimetres into metres for every reader

    with rasterio.open(out["dem"], "r+") as dst:
        dst.scales = (0.01,)
        dst.units = ("metre",)
    return out


def _longest_run(mask: np.ndarray) -> slice:
    padded = np.r_[False, mask, False].astype(int)
    edges = np.flatnonzero(np.diff(padded))
    starts, ends = edges[0::2], edges[1::2]
    k = int(np.argmax(ends - starts))
    return slice(starts[k], ends[k])


def _carve(ground: np.ndarray, dense: pd.DataFrame) -> np.ndarray:
    """Build the road surfaces into the ground model."""
    rows, cols = ground.shape
    xs = _ORIGIN[0] + (np.arange(cols) + 0.5) * _CELL
    ys = _ORIGIN[1] + _SIZE[1] - (np.arange(rows) + 0.5) * _CELL
    # centreline elevation: ground under the road, smoothed along each road (cut and fill)
    ci = np.clip(((dense["x"] - _ORIGIN[0]) / _CELL).astype(int), 0, cols - 1)
    ri = np.clip(((_ORIGIN[1] + _SIZE[1] - dense["y"]) / _CELL).astype(int), 0, rows - 1)
    zc = ground[ri, ci]
    zc = dense.assign(z=zc).groupby("road")["z"].transform(
        lambda v: v.rolling(301, center=True, min_periods=1).mean()).to_numpy()
    tree = cKDTree(dense[["x", "y"]].to_numpy())
    gx, gy = np.meshgrid(xs, ys)
    dist, idx = tree.query(np.column_stack([gx.ravel(), gy.ravel()]),
                           distance_upper_bound=_HALF_WIDTH + 6.0)
    near = np.isfinite(dist)
    k = idx[near]
    px, py = gx.ravel()[near], gy.ravel()[near]
    h = dense["heading"].to_numpy()[k]
    # signed lateral offset, positive to the left of the direction of travel
    off = -(px - dense["x"].to_numpy()[k]) * np.sin(h) + (py - dense["y"].to_numpy()[k]) * np.cos(h)
    kap = dense["kappa"].to_numpy()[k]
    e = dense["e"].to_numpy()[k]
    toward_centre = np.where(kap >= 0, off, -off)  # positive on the inside of the curve
    crowned = np.abs(kap) * 400.0 < 1e-3
    slope_z = np.where(crowned | (e <= -_CROWN + 1e-9), -_CROWN * np.abs(off), -e * toward_centre)
    surface = zc[k] + slope_z
    w = np.clip((dist[near] - _HALF_WIDTH) / 6.0, 0.0, 1.0)  # blend shoulders into ground
    z = ground.ravel().copy()
    z[near] = (1 - w) * surface + w * z[near]
    return z.reshape(rows, cols)
