"""Benchmark of the terrain stage on synthetic DEMs with known superelevation and grade.

Accuracy: N roads (tangent, spiral, circular part, spiral, tangent), each in its own block of
one sparse tiled 1 m GeoTIFF, with 3 cm noise, a normal crown on the tangents,
superelevation 2-10 % on the circular parts (one road in ten keeps its crown), linear runoff
along the spirals, grades 0-8 % and natural terrain beyond the shoulders. The carriageway
width is 6.0-7.5 m but the stage is told nothing (default 2 x 3.5 m) unless ``--known-width``.

Region timing (``--region``): 10 000 curves on a 1 m DEM covering 50 km^2 (7072 x 7072
cells, tiled float32 GeoTIFF); the time of :func:`curvescan.terrain.evaluate` is printed.
The roads are not painted into this DEM (only the work done is measured, not accuracy).

Run::

    python benchmarks/terrain.py                  # accuracy, 200 curves
    python benchmarks/terrain.py --region         # plus the 50 km^2 / 10 000 curve timing
"""

from __future__ import annotations

import argparse
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine
from rasterio.windows import Window

from curvescan import terrain
from curvescan.config import make_config
from curvescan.synthetic_dem import make_road, render, stations_and_curves, terrain as relief

CRS = "EPSG:32633"
BLOCK = 768


def timed_evaluate(curves, st, path: Path):
    """Run the terrain stage with default settings; return the result and its seconds."""
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = terrain.evaluate(curves, st, make_config(), str(path))
    return out, time.perf_counter() - t0


def random_roads(n: int, rng: np.random.Generator) -> list:
    """Roads with random radius, spiral, arc, direction, superelevation and grade."""
    roads = []
    for _ in range(n):
        radius = float(np.exp(rng.uniform(np.log(60), np.log(700))))
        arc = float(min(rng.uniform(60, 250), radius * 1.75))
        # spiral between 1 and 2 x sqrt(24 * 0.2 m * R) (AASHTO minimum, from memory)
        spiral = float(np.sqrt(24 * 0.2 * radius) * rng.uniform(1.0, 2.0))
        crowned = rng.random() < 0.1
        roads.append(make_road(
            radius, spiral, arc, 80.0, int(rng.choice([-1, 1])), 0.0, 0.0,
            rng.uniform(0, 2 * np.pi), e=float(rng.uniform(0.02, 0.10)),
            grade=float(rng.uniform(0.0, 0.08) * rng.choice([-1, 1])), z0=100.0,
            crowned=crowned, width_m=float(rng.uniform(6.0, 7.5)),
        ))
    return roads


def accuracy(n: int, seed: int, known_width: bool, offset_m: float, tmp: Path) -> None:
    """Render, evaluate and print error statistics."""
    rng = np.random.default_rng(seed)
    roads = random_roads(n, rng)
    ncol = int(np.ceil(np.sqrt(n)))
    nrow = int(np.ceil(n / ncol))
    path = tmp / "accuracy.tif"
    t0 = time.perf_counter()
    profile = dict(driver="GTiff", width=ncol * BLOCK, height=nrow * BLOCK, count=1,
                   dtype="float32", crs=CRS, transform=Affine(1, 0, 0, 0, -1, nrow * BLOCK),
                   nodata=-9999.0, tiled=True, blockxsize=256, blockysize=256, sparse_ok=True)
    with rasterio.open(path, "w", **profile) as dst:
        for i, road in enumerate(roads):
            r, c = divmod(i, ncol)
            cx, cy = c * BLOCK + BLOCK / 2, (nrow - r) * BLOCK - BLOCK / 2
            road.x += cx - 0.5 * (road.x.min() + road.x.max())
            road.y += cy - 0.5 * (road.y.min() + road.y.max())
            road.z0 = float(relief(np.array([road.x[road.x.size // 2]]),
                                   np.array([road.y[road.y.size // 2]]), seed)[0])
            road.z0 -= road.grade * road.s[road.s.size // 2]
            z = render([road], c * BLOCK, (nrow - r) * BLOCK, 1.0, (BLOCK, BLOCK), seed=seed,
                       noise_m=0.03, rng=rng)
            dst.write(z.astype("float32"), 1, window=Window(c * BLOCK, r * BLOCK, BLOCK, BLOCK))
    t_render = time.perf_counter() - t0
    st, curves = stations_and_curves(roads, 5.0, CRS)
    if offset_m:
        st.x = st.x - offset_m * np.sin(st.heading)
        st.y = st.y + offset_m * np.cos(st.heading)
    if not known_width:
        curves = curves.drop(columns="attr_width_m")
    out, t_eval = timed_evaluate(curves, st, path)
    crowned = np.array([r.crowned for r in roads])
    e_true = np.where(crowned, -0.02, [r.e for r in roads])
    g_true = np.array([r.grade for r in roads])
    e = out["superelevation"].to_numpy()
    terr = (out["superelevation_source"] == "terrain").to_numpy()
    err = np.abs(e - e_true) * 100
    gerr = np.abs(out["grade"].to_numpy() - g_true) * 100
    derr = np.abs(out["grade_max_down"].to_numpy() - np.abs(g_true)) * 100
    se = out["superelevation_se"].to_numpy()
    cover = np.mean(np.abs(e - e_true)[terr] <= 2 * se[terr])
    print(f"accuracy: {n} curves, seed {seed}, width {'known' if known_width else 'default 7 m'}"
          f", centreline offset {offset_m} m; render {t_render:.1f} s, evaluate {t_eval:.2f} s")
    quality = out["dem_quality"].value_counts().to_dict()
    print(f"  terrain source for {terr.sum()} / {n}; quality {quality}")
    for label, sel in (("all", terr), ("banked", terr & ~crowned), ("crowned", terr & crowned)):
        if sel.any():
            q = np.percentile(err[sel], [50, 90, 100])
            print(f"  superelevation |error| pp ({label:7s} n={sel.sum():4d}): median {q[0]:.3f}"
                  f"  p90 {q[1]:.3f}  max {q[2]:.3f}")
    print(f"  adverse flagged on crowned {out['superelevation_adverse'][crowned].mean():.2f}, "
          f"on banked {out['superelevation_adverse'][~crowned].mean():.2f}")
    print(f"  |error| within 2 SE: {cover:.2f}")
    q = np.nanpercentile(gerr, [50, 90, 100])
    print(f"  grade |error| pp: median {q[0]:.3f}  p90 {q[1]:.3f}  max {q[2]:.3f}")
    q = np.nanpercentile(derr, [50, 90, 100])
    print(f"  grade_max_down vs |grade| pp: median {q[0]:.3f}  p90 {q[1]:.3f}  max {q[2]:.3f}")


def region(n: int, seed: int, tmp: Path) -> None:
    """Time evaluate() for ``n`` curves on a 50 km^2, 1 m DEM."""
    side = 7072
    path = tmp / "region.tif"
    t0 = time.perf_counter()
    profile = dict(driver="GTiff", width=side, height=side, count=1, dtype="float32", crs=CRS,
                   transform=Affine(1, 0, 0, 0, -1, side), tiled=True, blockxsize=256,
                   blockysize=256)
    rng = np.random.default_rng(seed)
    with rasterio.open(path, "w", **profile) as dst:
        for r0 in range(0, side, 512):
            h = min(512, side - r0)
            yy, xx = np.mgrid[r0:r0 + h, 0:side]
            z = relief(xx + 0.5, side - (yy + 0.5), seed) + rng.normal(0, 0.03, xx.shape)
            dst.write(z.astype("float32"), 1, window=Window(0, r0, side, h))
    t_dem = time.perf_counter() - t0
    roads = random_roads(n, rng)
    for road in roads:
        road.x += rng.uniform(800, side - 800)
        road.y += rng.uniform(800, side - 800)
    st, curves = stations_and_curves(roads, 5.0, CRS)
    curves = curves.drop(columns="attr_width_m")
    out, t_eval = timed_evaluate(curves, st, path)
    info = out.attrs["terrain"]["dem_info"]
    print(f"region: {n} curves, DEM {side} x {side} cells of 1 m ({side * side / 1e6:.1f} km^2,"
          f" written in {t_dem:.0f} s); evaluate {t_eval:.1f} s; {info['points']:,} samples, "
          f"{info['windows_read']} windows, {info['cells_read'] / 1e6:.0f} M cells read")


def main() -> None:
    """Command-line entry."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--curves", type=int, default=200)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--known-width", action="store_true")
    ap.add_argument("--offset-m", type=float, default=0.0,
                    help="lateral error of the centreline (m)")
    ap.add_argument("--region", action="store_true", help="also time 10 000 curves on 50 km^2")
    ap.add_argument("--region-curves", type=int, default=10_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        accuracy(args.curves, args.seed, args.known_width, args.offset_m, Path(d))
        if args.region:
            region(args.region_curves, args.seed, Path(d))


if __name__ == "__main__":
    main()
