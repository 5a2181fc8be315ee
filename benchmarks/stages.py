"""Per-stage times of a single-process scan of the first N rows of the cached network.

Reads ``benchmarks/out/roads_100000.parquet`` (made by ``python benchmarks/scale.py
--sizes 100000``; ``--input`` names another GeoParquet file), takes its first ``--rows``
rows and runs :func:`curvescan.scan` on them ``--repeat`` times in this process (numba
kernels warmed by a first small scan), printing each run's ``timings_s`` and the median of
each stage. No output is written. ``--profile STAGE`` runs one scan under cProfile instead
and prints the top functions of ``prepare`` or ``assess`` (``pipeline._layers``).

Run::

    python benchmarks/stages.py --rows 100000 --repeat 3
    python benchmarks/stages.py --rows 100000 --profile assess
"""

from __future__ import annotations

import argparse
import os
import statistics
from pathlib import Path

OUT = Path(__file__).resolve().parent / "out"
STAGES = ("read", "prepare", "geometry", "terrain", "physics", "assess", "total")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--input", default=str(OUT / "roads_100000.parquet"))
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--profile", choices=("prepare", "assess", "all"), default=None)
    ap.add_argument("--top", type=int, default=30)
    args = ap.parse_args()

    import geopandas as gpd

    import curvescan
    from curvescan import pipeline, prepare

    frame = gpd.read_parquet(args.input).iloc[:args.rows]
    print(f"{curvescan.__file__}; {len(frame)} rows; load average "
          f"{' '.join(f'{v:.2f}' for v in os.getloadavg())}; "
          f"CURVESCAN_NUMBA={os.environ.get('CURVESCAN_NUMBA', '(unset)')}")
    pipeline.scan(frame.iloc[:200], speed_field="maxspeed")  # compile / warm up
    if args.profile:
        import cProfile
        import pstats

        prof = cProfile.Profile()
        if args.profile == "all":
            prof.enable()
            pipeline.scan(frame, speed_field="maxspeed")
            prof.disable()
        else:
            target = (prepare, "prepare") if args.profile == "prepare" else (pipeline, "_layers")
            module, name = target
            inner = getattr(module, name)

            def wrapped(*a, **k):
                prof.enable()
                try:
                    return inner(*a, **k)
                finally:
                    prof.disable()
            setattr(pipeline, name, wrapped)
            try:
                pipeline.scan(frame, speed_field="maxspeed")
            finally:
                setattr(pipeline, name, inner)
        stats = pstats.Stats(prof)
        stats.sort_stats("tottime").print_stats(args.top)
        stats.sort_stats("cumtime").print_stats(args.top)
        return
    runs = []
    for i in range(args.repeat):
        t = pipeline.scan(frame, speed_field="maxspeed").run["timings_s"]
        runs.append(t)
        print(f"run {i + 1}: " + ", ".join(f"{s} {t.get(s, float('nan')):.2f}" for s in STAGES)
              + f"  (load {os.getloadavg()[0]:.2f})")
    print("median: " + ", ".join(
        f"{s} {statistics.median(r.get(s, float('nan')) for r in runs):.2f}" for s in STAGES))


if __name__ == "__main__":
    main()
