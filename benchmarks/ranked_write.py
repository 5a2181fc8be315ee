"""Where the partitioned scan's serial tail goes: the ranked write and the file's close.

A partitioned scan (``--workers N``) writes ``curves`` and ``segments`` as partitions come
in, but ``hazards`` and ``winter`` only once every partition is in, in rank order
(:meth:`curvescan.parallel._Streamer.write_ranked`), and then closes the GeoPackage
(spatial indexes). Both run on the client alone, after the workers are done, so they
bound how much faster more workers can make a scan. With worker processes (N > 1), a
worker builds the spatial indexes of ``curves`` and ``segments`` while the client writes
the ranked layers (and that of ``hazards`` while it writes ``winter``), and the close
copies those trees in.

This script runs :func:`curvescan.parallel.scan_to_gpkg` on INPUT with N workers and
prints, in seconds: the whole ranked write, the part of it spent reading rows back from
the spill in rank order (``take``), the part spent appending rows to the GeoPackage
(``append``), the wait for the workers' index builds after it (``wait``), the close, and
the whole scan.

    python benchmarks/ranked_write.py benchmarks/out/roads_100000.gpkg --workers 2
    python benchmarks/ranked_write.py benchmarks/out/roads_100000.gpkg --indexes-at-close

(``benchmarks/scale.py`` generates the input.)
"""

from __future__ import annotations

import argparse
import tempfile
import time
import warnings
from pathlib import Path

import curvescan.parallel as parallel
from curvescan.io import partitions

TIMES = {"write_ranked": 0.0, "take": 0.0, "append": 0.0, "wait": 0.0, "close": 0.0}
_IN_RANKED = [False]


def _timed(name: str, fn, only_in_ranked: bool = False):
    def wrapper(*args, **kwargs):
        t = time.perf_counter()
        try:
            return fn(*args, **kwargs)
        finally:
            if not only_in_ranked or _IN_RANKED[0]:
                TIMES[name] += time.perf_counter() - t
    return wrapper


def _ranked(fn):
    def wrapper(*args, **kwargs):
        _IN_RANKED[0] = True
        try:
            return _timed("write_ranked", fn)(*args, **kwargs)
        finally:
            _IN_RANKED[0] = False
    return wrapper


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("input", type=Path)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--speed-field", default="maxspeed")
    ap.add_argument("--indexes-at-close", action="store_true",
                    help="no index builds on the workers: the close builds every index "
                         "(the behaviour before they did, for comparison)")
    args = ap.parse_args(argv)
    if args.indexes_at_close:
        parallel._prebuild_indexes = lambda sink, client, layers=None: None
    partitions.ArrowSpill.take = _timed("take", partitions.ArrowSpill.take)
    partitions.GpkgAppender.append = _timed("append", partitions.GpkgAppender.append,
                                            only_in_ranked=True)
    partitions.GpkgAppender.close = _timed("close", partitions.GpkgAppender.close)
    parallel._Streamer.write_ranked = _ranked(parallel._Streamer.write_ranked)
    parallel._adopt_indexes = _timed("wait", parallel._adopt_indexes)
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            parallel.scan_to_gpkg(args.input, Path(tmp) / "out.gpkg", overwrite=True,
                                  workers=args.workers, speed_field=args.speed_field)
        total = time.perf_counter() - t0
    print(f"ranked write {TIMES['write_ranked']:.2f} s (take {TIMES['take']:.2f} s, append "
          f"{TIMES['append']:.2f} s); wait for index builds {TIMES['wait']:.2f} s; "
          f"close {TIMES['close']:.2f} s; scan {total:.1f} s "
          f"with {args.workers} workers")


if __name__ == "__main__":
    main()
