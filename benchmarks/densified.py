"""Curves of the benchmark's lines against the same lines with collinear points added.

    python benchmarks/densified.py SCENARIO ROADS SHARE [MODE]

mode ``segmentize`` (default): every segment cut into pieces of at most SHARE metres (a
densifying step); mode ``insert``: one point inside a SHARE of the segments (split or
junction nodes). Run from the repository root (it imports benchmarks/accuracy.py).
"""
import sys
import warnings

import numpy as np
import shapely

sys.path.insert(0, "benchmarks")
import accuracy as A  # noqa: E402

import curvescan  # noqa: E402

KEYS = ("recall", "precision", "radius_rel_err_median_pct", "radius_rel_err_p90_pct",
        "kcr_ratio_median", "se_within_2_pct", "curve_ends_err_median_m")


def main(scen: str, n: int, share: float, mode: str = "segmentize") -> None:
    frame, truth, refs = A.make_roads(n, scen, 1)
    rng = np.random.default_rng(5)

    def densify(g):
        if mode == "segmentize":
            return shapely.segmentize(g, share)
        c = shapely.get_coordinates(g)
        out = [c[0]]
        for a, b in zip(c[:-1], c[1:]):
            if rng.random() < share:
                out.append(a + rng.uniform(0.2, 0.8) * (b - a))
            out.append(b)
        return shapely.LineString(np.array(out))

    f2 = frame.copy()
    f2["geometry"] = [densify(g) for g in frame.geometry]
    for name, f in (("as digitised", frame), ("densified", f2)):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = curvescan.scan(f, crs=A.CRS)
        try:
            stats, _ = A.score(res, truth, refs, f)
        except KeyError:  # the scorer needs at least one match
            print(scen, mode, share, name, "no detected curve matches a true arc")
            continue
        print(scen, mode, share, name, {k: round(v, 3) for k, v in stats.items() if k in KEYS})


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]), float(sys.argv[3]),
         sys.argv[4] if len(sys.argv) > 4 else "segmentize")
