"""Partitioned, parallel and distributed scans with dask.

The same core stages run once per partition of the input, on a dask distributed cluster:
a local one with ``--workers N`` (worker processes on this machine) or an existing one
with ``--scheduler ADDRESS``. A folder of GeoParquet files is always read partition by
partition; ``--partition-features`` also splits a single file, to bound the memory of a
one-worker run.

The result equals a single-process scan (ids aside) because chains are never cut:

1. *survey* (one task per partition): read the partition, project it to the working CRS
   (chosen once from the total bounds), clean its parts exactly as
   :func:`curvescan.prepare.prepare` does, and return only the two ends of every part
   (and the largest bare magnitude in the superelevation field, for its ``auto`` unit);
2. *join* (client): :func:`curvescan.prepare.chain_order` over all part ends at once
   gives every chain, its parts in order and their directions; each chain gets a home
   partition (the partition of its first part); the superelevation unit is decided for
   the layer;
3. *hand-over* (one task per partition with parts of foreign chains): the input rows
   other partitions need;
4. *scan* (one task per partition): own rows plus handed-over rows, chains assembled in
   the global order (:func:`curvescan.prepare.assemble`), then
   :func:`curvescan.pipeline.scan_chains`.

Only part ends (32 bytes a part) and results travel to the client; every worker reads
its own partition. Memory on a worker is bounded by the partition size; on the client by
the part-end arrays, plus the output when an in-memory result is asked for. The command
line streams every layer into the GeoPackage instead (:func:`scan_to_gpkg`): results come
as Arrow tables with their rows' envelopes (in Arrow IPC files the client maps, from the
worker processes of a local cluster), and the ranked layers wait on disk until they can be
ranked from their ranking columns alone (:class:`_Streamer`), so the client keeps about
80 bytes a curve and does little more than hand rows to GDAL.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from .declare import Param
from .recording import Recorded, describe, merge, record_warnings, warn_again

__all__ = ["PARAMETERS", "wants_partitions", "scan_partitioned", "scan_to_gpkg"]

PARAMETERS: tuple[Param, ...] = (
    Param("workers", "int", 1,
          "Partitions scanned in parallel on this machine (a local dask cluster of this many "
          "worker processes).", stage="parallel", minimum=1, maximum=1024),
    Param("scheduler", "str", None,
          "Address of a running dask distributed scheduler (e.g. tcp://10.0.0.5:8786); "
          "partitions are scanned on its workers, which must reach the input path.",
          stage="parallel"),
    Param("partition_features", "int", None,
          "Features per partition when splitting one file (default 50000); giving it "
          "partitions even a one-worker run, to bound memory.", stage="parallel",
          minimum=10, advanced=True),
)

#: Partition size used when ``partition_features`` is not given.
DEFAULT_PARTITION_FEATURES = 50_000

Progress = Callable[[str, float], None]


def wants_partitions(source: Any, config: Any) -> bool:
    """Whether a scan of ``source`` goes through the partitioned path."""
    if config.workers > 1 or config.scheduler or config.partition_features:
        return True
    return isinstance(source, (str, os.PathLike)) and os.path.isdir(source) and any(
        str(p).endswith(".parquet") for p in os.listdir(source))


# ----------------------------------------------------------------------------- tasks

@dataclass
class _Survey:
    n_rows: int
    local_fid: bool             # src_fid counted from 0 in this partition (no stored ids)
    part_row: np.ndarray        # (k,) local row of each part
    ordinal: np.ndarray         # (k,) index of the part among its row's kept parts
    group: np.ndarray | None    # (k,) join-field value of each part
    summary: Any                # prepare.PartSummary of the parts (src_fid local where
                                # local_fid)
    skipped: list
    messages: list
    largest_bare: float | None = None  # of the superelevation field (terrain.field_largest_bare)


def _load_partition(src: Any, i: int, payload: Any, config: Any,
                    offset: int | None = None):
    """Partition ``i`` as :func:`curvescan.read.load` would give it (``src_fid`` set)."""
    import pandas as pd

    from .read import load

    frame = src.read(i, payload)
    if "src_fid" not in frame.columns:
        if offset is None:
            raise RuntimeError("row offset needed for a source without src_fid")
        frame.insert(0, "src_fid", pd.array(np.arange(len(frame)) + offset, dtype="int64"))
    if len(frame) == 0:
        return frame
    # the source applied ``where`` already (and refuses it where it cannot)
    return load(frame, config if config.where is None else config.replace(where=None))


def _cleaned(frame: Any, config: Any, crs: Any):
    from .prepare import _clean_parts

    geoms = frame.geometry.values
    if frame.crs != crs:
        geoms = frame.geometry.to_crs(crs).values
    (xy, pid), part_row, skipped = _clean_parts(np.asarray(geoms, dtype=object), frame, config)
    first = np.r_[True, part_row[1:] != part_row[:-1]] if len(part_row) else np.zeros(0, bool)
    start = np.maximum.accumulate(np.where(first, np.arange(len(part_row)), 0))
    ordinal = np.arange(len(part_row)) - start
    return (xy, pid), part_row, ordinal, skipped


@dataclass
class _Given:
    """A partition already read, in the shape of a partition source."""

    frame: Any

    def read(self, i: int, payload: Any = None) -> Any:
        return self.frame


def survey_task(src: Any, i: int, payload: Any, config: Any, crs: Any) -> _Survey:
    """Read partition ``i``, clean its parts, return their ends (first pass).

    The survey also holds the partition's largest bare superelevation magnitude, for the
    layer's ``auto`` unit (:func:`curvescan.terrain.field_largest_bare`).
    """
    from .pipeline import _check_fields
    from .prepare import PartSummary, join_groups
    from .terrain import field_largest_bare

    with record_warnings() as caught:
        raw = src.read(i, payload)
        local_fid = "src_fid" not in raw.columns
        frame = _load_partition(_Given(raw), 0, None, config, offset=0)
        if len(frame) == 0:
            return _Survey(0, local_fid, np.zeros(0, np.int64), np.zeros(0, np.int64),
                           None, PartSummary.empty(), [], [])
        _check_fields(frame, config)
        parts, part_row, ordinal, skipped = _cleaned(frame, config, crs)
        group = join_groups(frame, config, part_row)
        summary = PartSummary.of(parts, frame["src_fid"].to_numpy(np.int64)[part_row], config)
        largest_bare = field_largest_bare(frame, config)
    return _Survey(len(frame), local_fid, part_row, ordinal, group, summary, skipped,
                   list(caught), largest_bare)


def handover_task(src: Any, i: int, payload: Any, config: Any, offset: int,
                  rows: np.ndarray):
    """Return the rows (local indices) of partition ``i`` that other partitions need."""
    frame = _load_partition(src, i, payload, config, offset)
    out = frame.iloc[rows].copy()
    out["_global_row"] = rows + offset
    return out


@dataclass
class _Plan:
    """What one partition scans: its chains as global part keys in chain order."""

    own_rows: np.ndarray        # local rows of this partition to keep
    offset: int                 # global row of its first row
    keys: np.ndarray            # (m,) global part keys (row * width + ordinal), chain order
    reverse: np.ndarray         # (m,) bool
    chain: np.ndarray           # (m,) local chain number, sorted, 0..c-1
    width: int                  # key multiplier
    rows_needed: np.ndarray     # global rows to take from handed-over frames
    sources: list               # partitions handing rows over to this one
    ring_rows: np.ndarray       # global rows of its parts recognised as roundabouts by shape


def scan_task(src: Any, i: int, payload: Any, config: Any, crs: Any, note: str, dem: Any,
              plan: _Plan, handed: list, arrow: bool = False,
              out_dir: str | None = None, bare_percent: bool | None = None) -> dict:
    """Scan the chains homed in partition ``i`` (second pass).

    ``bare_percent`` is the layer's ``auto`` superelevation unit, decided on the client
    from every partition's survey, so that all partitions read the field alike.

    ``layers`` of the returned dict is ``(named layers, assessment summary)``; with
    ``arrow`` the layers are :class:`curvescan.io.partitions.ArrowLayer` tables, made here
    so that the client neither unpickles nor encodes a geometry. With ``out_dir`` too (a
    folder the client reads: worker processes of a local cluster) each table goes into an
    Arrow IPC file there and the layer is its :class:`~curvescan.io.partitions.ArrowFile`
    description, so that the client maps the rows instead of receiving them.
    """
    import pandas as pd

    from .pipeline import scan_chains
    from .prepare import assemble, part_ends

    timings: dict[str, float] = {}
    if len(plan.keys) == 0:  # every chain of this partition is homed elsewhere
        return {"layers": None, "speed": {}, "terrain": {}, "chains": 0, "timings": timings,
                "messages": []}
    t0 = time.perf_counter()
    with record_warnings() as caught:
        frame = _load_partition(src, i, payload, config, plan.offset)
        frame = frame.iloc[plan.own_rows].copy()
        frame["_global_row"] = plan.own_rows + plan.offset
        pieces = [frame]
        for h in handed:
            pieces.append(h.loc[np.isin(h["_global_row"].to_numpy(), plan.rows_needed)])
        if len(pieces) > 1:
            frame = pd.concat(pieces, ignore_index=True)
        timings["read"] = round(time.perf_counter() - t0, 4)
        t = time.perf_counter()
        parts, part_row, ordinal, _ = _cleaned(frame, config, crs)
        keys = frame["_global_row"].to_numpy(np.int64)[part_row] * plan.width + ordinal
        order = np.argsort(keys, kind="stable")
        at = np.searchsorted(keys[order], plan.keys)
        local = order[np.minimum(at, len(order) - 1)]
        if len(plan.keys) and not np.array_equal(keys[local], plan.keys):
            raise RuntimeError(f"partition {i}: parts of its chains are missing")
        starts, ends, _ = part_ends(parts)
        chains = assemble(parts[0], starts, ends, part_row, local, plan.reverse, plan.chain,
                          config.join_tolerance_m)
        chains.crs, chains.notes = crs, [note]
        chains.ring_rows = np.flatnonzero(np.isin(frame["_global_row"].to_numpy(np.int64),
                                                  plan.ring_rows))
        frame = frame.drop(columns="_global_row")
        timings["prepare"] = round(time.perf_counter() - t, 4)
        layers, speed, terrain_record, vertex_record = scan_chains(
            frame, chains, config, dem, lambda *_: None, timings,
            superelevation_bare_percent=bare_percent)
        curves, segments, hazards, extra, summary = layers
        named = {"curves": curves, "segments": segments, "hazards": hazards, **extra}
        del layers, curves, segments, hazards, extra
        if arrow:
            from .io.partitions import ArrowLayer

            t = time.perf_counter()
            for name in list(named):  # envelopes here too: the client only writes
                named[name] = ArrowLayer.from_frame(named[name]).with_boxes()
                if out_dir is not None:
                    named[name] = named[name].to_file(
                        os.path.join(out_dir, f"part{i:06d}.{name}.arrow"))
            timings["to_arrow"] = round(time.perf_counter() - t, 4)
    return {"layers": (named, summary), "speed": speed, "terrain": terrain_record,
            "vertices": vertex_record,
            "chains": chains.n_chains, "timings": timings,
            "messages": list(caught)}


# ----------------------------------------------------------------------------- client side

def _client(config: Any):
    """Return a client of the given scheduler, or of a new local cluster (caller closes)."""
    try:
        from distributed import Client, LocalCluster
    except ImportError:  # pragma: no cover - depends on the environment
        from .errors import InputError

        raise InputError("partitioned scans need dask: pip install 'curvescan[dask]'") from None
    if config.scheduler:
        try:
            return Client(config.scheduler, timeout="30s"), None
        except (OSError, ValueError, TypeError, MemoryError) as exc:
            # a refused or timed-out connection, an address without a port, or a service
            # that is no dask scheduler (its first bytes read as a huge message length)
            from .errors import DataSourceError

            text = ("the reply is not dask's protocol" if isinstance(exc, MemoryError)
                    else str(exc).splitlines()[0] if str(exc) else type(exc).__name__)
            raise DataSourceError(f"cannot connect to the dask scheduler {config.scheduler!r}"
                                  f" (--scheduler): {text}") from None
    processes = config.workers > 1
    import logging

    import dask

    if not logging.getLogger("curvescan").isEnabledFor(logging.INFO):
        # keep a local cluster's start-up and shut-down chatter (and the heartbeat errors
        # of workers closing) off the user's terminal unless they asked for -v
        dask.config.set({"distributed.logging.distributed": "critical",
                         "distributed.admin.log-format": "%(message)s"})
        logging.getLogger("distributed").setLevel(logging.CRITICAL)
    # one compute thread per worker process: numba's parallel kernels too (dask already
    # sets OMP/MKL/OpenBLAS threads to 1), else N workers run 2N threads on N cores
    extra = {"env": {"NUMBA_NUM_THREADS": "1"}} if processes else {}
    cluster = LocalCluster(n_workers=config.workers, threads_per_worker=1,
                           processes=processes, dashboard_address=None,
                           silence_logs=40, **extra)
    return Client(cluster), cluster


def _working_crs(src: Any, config: Any, client: Any):
    import geopandas as gpd
    import shapely

    from .prepare import working_crs
    from .read import parse_crs

    crs = src.crs
    if crs is None:
        if config.assume_crs is None:
            from .errors import CRSError

            raise CRSError(f"{src.path or 'input frame'} has no CRS; give one with "
                           "--assume-crs (e.g. EPSG:4326 for GPS data)")
        crs = parse_crs(config.assume_crs, what="--assume-crs")
    bounds = src.bounds
    if bounds is None or not np.all(np.isfinite(bounds)):
        futures = [client.submit(_bounds_task, src.light(), i, src.payload(i), pure=False)
                   for i in range(src.n)]
        b = np.array([f.result() for f in futures])
        bounds = np.array([np.nanmin(b[:, 0]), np.nanmin(b[:, 1]),
                           np.nanmax(b[:, 2]), np.nanmax(b[:, 3])])
    corners = gpd.GeoDataFrame(geometry=shapely.points([bounds[:2], bounds[2:]]), crs=crs)
    return working_crs(corners, config.crs)


def _bounds_task(src: Any, i: int, payload: Any) -> np.ndarray:
    from .prepare import finite_bounds

    with record_warnings():  # the survey reads the partition again and keeps its warnings
        frame = src.read(i, payload)
    return finite_bounds(frame.geometry.values) if len(frame) else np.full(4, np.nan)


def _plans(surveys: list[_Survey], config: Any):
    """Join all part ends; return per-partition plans, hand-over rows and totals."""
    from .prepare import PartSummary, chain_order, screen_summaries

    n_rows = np.array([s.n_rows for s in surveys], dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(n_rows)])
    counts = np.array([len(s.part_row) for s in surveys])
    if counts.sum() == 0:
        return None
    part_of = np.repeat(np.arange(len(surveys)), counts)
    grow = np.concatenate([s.part_row + offsets[k] for k, s in enumerate(surveys)])
    ordinal = np.concatenate([s.ordinal for s in surveys])
    width = int(ordinal.max()) + 1
    keys = grow * width + ordinal
    # every partition of one layer has the same fields, so all send groups or none
    group = None
    if any(s.group is not None for s in surveys):
        group = np.concatenate([s.group if s.group is not None
                                else np.full(len(s.part_row), "road", dtype=object)
                                for s in surveys])
    # duplicates out, untagged rings found: the step prepare takes, over all partitions
    pieces = [s.summary for s in surveys]
    screened = screen_summaries(PartSummary(
        np.concatenate([p.end_xy for p in pieces]), np.concatenate([p.shapes for p in pieces]),
        np.concatenate([p.identity for p in pieces]) if config.drop_duplicates else None,
        np.concatenate([p.fid + (offsets[k] if s.local_fid else 0)
                        for k, (p, s) in enumerate(zip(pieces, surveys))])), group, config)
    kept = np.flatnonzero(~screened.dropped)
    ring_rows = np.unique(grow[kept[screened.ring]])
    part, reverse, chain_of = chain_order(screened.end_xy, screened.group,
                                          config.join_tolerance_m, config.through_junction_deg)
    part = kept[part]
    first = np.r_[True, chain_of[1:] != chain_of[:-1]]
    home_of_chain = part_of[part[first]]
    home = home_of_chain[chain_of]          # per entry of the chain order
    plans, wanted = [], [[] for _ in surveys]
    for p in range(len(surveys)):
        sel = np.flatnonzero(home == p)
        rows = np.unique(grow[part[sel]])
        local = (rows >= offsets[p]) & (rows < offsets[p + 1])
        foreign = rows[~local]
        src_part = np.searchsorted(offsets, foreign, side="right") - 1
        for q in np.unique(src_part):
            wanted[q].append(foreign[src_part == q] - offsets[q])
        c = chain_of[sel]
        _, chain_local = np.unique(c, return_inverse=True)
        plans.append(_Plan(own_rows=rows[local] - offsets[p], offset=int(offsets[p]),
                           keys=keys[part[sel]], reverse=reverse[sel],
                           chain=chain_local.ravel(), width=width, rows_needed=foreign,
                           sources=np.unique(src_part).tolist(),
                           ring_rows=ring_rows[np.isin(ring_rows, rows)]))
    handover = [np.unique(np.concatenate(w)) if w else None for w in wanted]
    return (plans, handover, offsets, int(chain_of.max()) + 1, len(ring_rows),
            screened.skipped)


def run_partitions(source: Any, config: Any, dem: Any, progress: Progress | None,
                   sink: Callable[[int, dict], None], arrow: bool = False,
                   out_dir: str | None = None,
                   reword: Callable[[list], list] | None = None,
                   tail: Callable[[Any, bool], None] | None = None) -> dict:
    """Run the four passes; hand the partitions' results to ``sink`` in partition order.

    The partitions' warnings are merged (:func:`~curvescan.recording.merge`), then passed
    through ``reword`` (e.g. :meth:`_Merger.layer_warnings`) before they are raised again.

    With ``arrow`` and ``out_dir``, worker processes of a local cluster (made here) hand
    their results over as Arrow IPC files in ``out_dir`` (:func:`scan_task`); in-process
    and remote workers send them in the result as before.

    ``tail(client, shared)``, if given, runs once every partition is handed on, while the
    cluster is still up (``shared``: its workers are processes of this machine that see
    ``out_dir``); its time is not part of ``timings["total"]``.

    Returns the parts of the run record that are known once all partitions are done.
    """
    from distributed import as_completed

    from .errors import DataQualityWarning, InputError
    from .export import check_output_crs

    check_output_crs(config.output_crs)  # fail before the work, not after
    from .io.partitions import open_partitions
    from .prepare import _reason_summary
    from .terrain_attr import auto_bare_percent

    report = progress or (lambda stage, frac: None)
    size = config.partition_features or DEFAULT_PARTITION_FEATURES
    timings: dict[str, float] = {}
    recorded: list[Recorded] = []   # the run record's warnings, merged over partitions
    scan_messages: list[Recorded] = []
    t0 = time.perf_counter()
    client, cluster = _client(config)
    try:
        src = open_partitions(source, layer=config.layer, partition_features=size,
                              client=client, where=config.where)
        crs, note = _working_crs(src, config, client)
        light = src.light()
        futures = [client.submit(survey_task, light, i, src.payload(i), config, crs, pure=False)
                   for i in range(src.n)]
        surveys: list[Any] = [None] * src.n
        index = {f.key: i for i, f in enumerate(futures)}
        for k, fut in enumerate(as_completed(futures), 1):
            surveys[index[fut.key]] = fut.result()
            report(f"survey {k}/{src.n}", 0.2 * k / src.n)
        del futures
        timings["survey"] = round(time.perf_counter() - t0, 4)
        n_rows = np.array([sv.n_rows for sv in surveys], dtype=np.int64)
        starts = np.concatenate([[0], np.cumsum(n_rows)])
        skipped = [dict(s, src_fid=s["src_fid"] + int(starts[k])) if sv.local_fid else s
                   for k, sv in enumerate(surveys) for s in sv.skipped]
        recorded = merge([m for sv in surveys for m in sv.messages])
        # the scan pass reads and cleans the rows again: what the survey said, it says twice
        surveyed = {m.key for m in recorded}
        warn_again(recorded, stacklevel=3)
        # the auto superelevation unit: decided once, on the whole layer's field
        bare_percent = auto_bare_percent(max(
            (sv.largest_bare for sv in surveys if sv.largest_bare is not None), default=None))
        t = time.perf_counter()
        planned = _plans(surveys, config)
        if planned is None:
            raise InputError("the input has no usable line geometries "
                             f"({len(skipped)} features skipped: {_reason_summary(skipped)})")
        plans, handover, offsets, n_chains, n_ring_rows, duplicates = planned
        skipped = skipped + duplicates
        if skipped:
            recorded.append(Recorded(DataQualityWarning,
                                     f"{len(skipped)} input features or parts skipped: "
                                     f"{_reason_summary(skipped)}"))
            warn_again(recorded[-1:], stacklevel=3)
        n_rows = int(offsets[-1])
        del surveys
        timings["join"] = round(time.perf_counter() - t, 4)
        t = time.perf_counter()
        hand = {q: client.submit(handover_task, light, q, src.payload(q), config,
                                 int(offsets[q]), rows, pure=False)
                for q, rows in enumerate(handover) if rows is not None}
        dem_path = None if dem is None else str(dem)
        from .io.partitions import _in_process

        # a local cluster's worker processes share this file system; the client maps the
        # files they write (no socket copy of every result row, no deserialising)
        files = out_dir if arrow and cluster is not None and not _in_process(client) else None
        # ids are given in partition order, so results are handed to ``sink`` in that
        # order; partitions are submitted in order, and only while fewer than ``window``
        # are submitted but not yet handed on: at most that many results wait on the client
        window = 2 * max(1, len(client.scheduler_info().get("workers", {}))) + 1
        queue, index, pending = as_completed(), {}, {}
        submitted = delivered = 0
        part_timings: dict[str, float] = {}

        def top_up() -> None:
            nonlocal submitted
            while submitted < src.n and submitted - delivered < window:
                p = submitted
                fut = client.submit(scan_task, light, p, src.payload(p), config, crs, note,
                                    dem_path, plans[p], [hand[q] for q in plans[p].sources],
                                    arrow, files, bare_percent, pure=False)
                index[fut.key] = p
                queue.add(fut)
                submitted += 1

        top_up()
        for k, fut in enumerate(queue, 1):
            out = fut.result()
            fut.release()
            scan_messages += out["messages"]
            for name, v in out["timings"].items():
                part_timings[name] = round(part_timings.get(name, 0.0) + v, 4)
            pending[index.pop(fut.key)] = out
            while delivered in pending:
                sink(delivered, pending.pop(delivered))
                delivered += 1
            report(f"partition {k}/{src.n}", 0.2 + 0.8 * k / src.n)
            top_up()
        timings["scan"] = round(time.perf_counter() - t, 4)
        # once for the layer, counts added up
        scan_messages = merge([m for m in scan_messages if m.key not in surveyed])
        if reword is not None:
            scan_messages = reword(scan_messages)
        warn_again(scan_messages, stacklevel=3)
        recorded += scan_messages
        timings["total"] = round(time.perf_counter() - t0, 4)
        if tail is not None:
            tail(client, files is not None)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    return {"crs": crs, "note": note, "input_crs": src.crs, "n_rows": n_rows,
            "chains": n_chains, "ring_rows": n_ring_rows, "skipped": skipped,
            "partitions": src.n,
            "timings": timings, "task_timings": part_timings, "messages": describe(recorded)}


#: Layers ranked over all partitions: rank column and the columns that decide the order
#: (:func:`curvescan.assess.rerank`).
RANKED = {"hazards": ("severity_rank", ["curve_id", "mildest_condition", "posted_kmh",
                                        "limit_kmh"]),
          "winter": ("winter_rank", ["curve_id", "winter_score"])}

#: Rows of a ranked layer written at a time once the ranks are known.
RANK_CHUNK = 50_000

#: Rows of each ranked layer a streamed result keeps in memory (for the summary).
TOP_ROWS = 100


class _Merger:
    """Renumber ids across partitions and keep every layer in memory.

    Hazards and further layers (``winter``) get ranks over all partitions
    (:func:`curvescan.assess.rerank`) once all partitions are in.
    """

    def __init__(self) -> None:
        self.next = {"curve_id": 0, "segment_id": 0, "chain_id": 0}
        self.kept: dict[str, list] = {}
        self.counts: dict[str, int] = {}
        self.speed: dict[str, Any] = {}
        self.terrain: dict[str, Any] = {}
        self.vertices: dict[str, Any] = {}
        self.assessment: dict[str, Any] = {}

    def __call__(self, index: int, out: dict) -> None:
        """Take partition ``index``'s result (partitions come in order: ids follow it)."""
        if out["layers"] is None:
            return
        named, summary = out["layers"]
        shift = dict(self.next)
        for name, layer in named.items():
            self.counts[name] = self.counts.get(name, 0) + len(layer)
            self._layer(name, layer, {c: shift[c] for c in shift if c in layer.columns})
        self.next["curve_id"] += len(named["curves"])
        self.next["segment_id"] += len(named["segments"])
        self.next["chain_id"] += out["chains"]
        _merge_speed(self.speed, out["speed"])
        _merge_report(self.assessment, summary)
        self.terrain = out["terrain"] or self.terrain
        _merge_report(self.vertices, out["vertices"])

    def layer_warnings(self, recorded: list[Recorded]) -> list[Recorded]:
        """``recorded`` with the warnings that hold for the whole layer worded for it.

        Whether the posted-speed field mixes units is a property of the layer: a partition
        that holds only bare numbers does not see the mph values of another. The
        partitions' own mixed-units warnings are replaced by the layer's, placed where the
        first of them was.
        """
        from .speeds import MIXED_UNITS, mixed_units_warning

        layer = mixed_units_warning(self.speed) if "units" in self.speed else None
        at = next((k for k, r in enumerate(recorded) if r.template == MIXED_UNITS), 0)
        kept = [r for r in recorded if r.template != MIXED_UNITS]
        return kept[:at] + ([layer] if layer is not None else []) + kept[at:]

    def _layer(self, name: str, layer: Any, shift: dict[str, int]) -> None:
        cols = {c: layer[c] + by for c, by in shift.items()}
        self.kept.setdefault(name, []).append(layer.assign(**cols) if cols else layer)

    def layers(self, crs: Any, config: Any) -> dict[str, Any]:
        """Return the kept layers, concatenated; hazards and winter re-ranked over all parts."""
        from . import assess

        out = {name: _concat(frames, crs) for name, frames in self.kept.items()}
        hz, winter = out.get("hazards"), out.get("winter")
        if hz is not None and winter is not None and "mildest_condition" in hz.columns:
            names = assess.condition_order(out.get("curves", hz), config)
            out["hazards"], out["winter"] = assess.rerank(hz, winter, names)
        return out


class _Streamer(_Merger):
    """Renumber ids across partitions and stream every layer into a :class:`GpkgAppender`.

    Partitions arrive as Arrow tables (``scan_task(arrow=True)``), or as Arrow IPC files
    the workers wrote, mapped here. ``curves``, ``segments`` and unranked layers are
    appended as they come (a worker's file is removed once written). Ranked layers
    (:data:`RANKED`) wait in an :class:`ArrowSpill` on disk (a worker's file becomes part of
    it) while the client keeps only their ranking columns and envelopes (about 56 bytes a
    row); :meth:`write_ranked` then ranks those columns over all partitions and writes the
    rows in rank order, :data:`RANK_CHUNK` at a time. Held in memory: the ranking columns
    and envelopes, ``curve_id`` and ``posted_kmh`` of every curve (for the summary) and the
    first :data:`TOP_ROWS` rows of each ranked layer.
    """

    def __init__(self, sink: Any) -> None:
        super().__init__()
        self.sink = sink
        self.spills: dict[str, Any] = {}
        self.keys: dict[str, list] = {}
        self.empty: dict[str, Any] = {}
        self.summary: list = []
        self.top: dict[str, Any] = {}
        self.columns: dict[str, list] = {}
        self.mildest: dict[str, set] = {}

    def __call__(self, index: int, out: dict) -> None:
        if out["layers"] is not None:  # results handed over as files: map them
            named, summary = out["layers"]
            out = dict(out, layers=({name: layer.open() if hasattr(layer, "open") else layer
                                     for name, layer in named.items()}, summary))
        super().__call__(index, out)

    def _layer(self, name: str, layer: Any, shift: dict[str, int]) -> None:
        if name in RANKED:
            self.empty.setdefault(name, layer.empty())
            spill = self.spills.get(name) or self.spills.setdefault(name, self.sink.spill(name))
            keys = layer.shifted(shift).frame(RANKED[name][1])
            keys["_row"] = np.arange(spill.n, spill.n + len(layer), dtype=np.int64)
            self.keys.setdefault(name, []).append(keys)
            spill.append(layer, shift)  # a worker's file stays where it is, as the spill
            self._style_values(name, layer)
            return
        path, layer = layer.path, layer.shifted(shift)
        self.sink.append(name, layer)
        if path is not None:  # a worker's file, written now; where a mapped file cannot
            try:              # be removed (Windows) the folder goes at the end instead
                os.unlink(path)
            except OSError:
                pass
        if name == "curves":
            self.summary.append(layer.frame(["curve_id", "posted_kmh"]))
        self._style_values(name, layer)

    def _style_values(self, name: str, layer: Any) -> None:
        self.columns.setdefault(name, layer.columns)
        if "mildest_condition" in layer.columns:
            self.mildest.setdefault(name, set()).update(
                v for v in layer.table["mildest_condition"].unique().to_pylist() if v is not None)

    def style_frames(self) -> dict[str, Any]:
        """Stand-ins of the written layers for :func:`curvescan.styles.write_styles`: their
        columns and every ``mildest_condition`` value, which is all a style depends on."""
        import pandas as pd

        out = {}
        for name, columns in self.columns.items():
            values = sorted(self.mildest.get(name, ()))
            frame = pd.DataFrame(index=range(len(values)), columns=columns)
            if "mildest_condition" in columns:
                frame["mildest_condition"] = values
            out[name] = frame
        return out

    def write_ranked(self, curve_columns: list[str], config: Any, report: Progress,
                     written: Callable[[str], None] | None = None) -> None:
        """Rank the spilled layers over all partitions; write them in rank order.

        ``written(name)``, if given, is called once layer ``name`` is complete and another
        layer is still to be written (not after the last)."""
        import pandas as pd

        from . import assess

        keys = {name: pd.concat(frames, ignore_index=True)
                for name, frames in self.keys.items()}
        self.keys.clear()
        hz, winter = keys.get("hazards"), keys.get("winter")
        if hz is not None and winter is not None and "mildest_condition" in hz.columns:
            names = assess.condition_order(pd.DataFrame(columns=curve_columns), config)
            keys["hazards"], keys["winter"] = assess.rerank(hz, winter, names)
        total = max(1, sum(len(k) for k in keys.values()))
        done = 0
        names = list(keys)
        for k, (name, order) in enumerate(keys.items()):
            if k and written is not None:
                written(names[k - 1])
            rank_col = RANKED[name][0]
            rows = order["_row"].to_numpy()
            ranks = order[rank_col].to_numpy() if rank_col in order else None
            if not len(rows):
                self.sink.append(name, self.empty[name])
            for a in range(0, len(rows), RANK_CHUNK):
                chunk = self.spills[name].take(rows[a:a + RANK_CHUNK])
                if ranks is not None and rank_col in chunk.columns:
                    chunk = chunk.replaced(rank_col, ranks[a:a + RANK_CHUNK])
                if a == 0:
                    self.top[name] = chunk.head(TOP_ROWS).to_frame()
                self.sink.append(name, chunk)
                done += min(RANK_CHUNK, len(rows) - a)
                report(f"writing {name}", done / total)
            self.top.setdefault(name, self.empty[name].to_frame())


def _build_trees(jobs: list[tuple[str, tuple]]) -> list[tuple[str, Any]]:
    """Build the trees of ``jobs`` (``(layer, args of build_tree_file)``) one after the
    other, in one task: ``(layer, result)`` pairs, ``result`` the exception of a failed
    build. One task at a time keeps one core for the client, which writes meanwhile."""
    from .io.rtree import build_tree_file

    out = []
    for layer, args in jobs:
        try:
            out.append((layer, build_tree_file(*args)))
        except Exception as exc:  # e.g. a full disk: that index is built at close
            out.append((layer, exc))
    return out


def _prebuild_indexes(sink: Any, client: Any, layers: list[str] | None = None) -> Any:
    """Submit the spatial index builds of ``layers`` (default: all ``sink`` has written so
    far), whose rows are all written (:func:`curvescan.io.rtree.build_tree_file`), as
    one task; its future, or None."""
    index = sink.index
    if index is None:
        return None
    jobs = [(layer, args) for layer in (list(index.rows) if layers is None else layers)
            if (args := index.prebuild_args(layer)) is not None]
    return client.submit(_build_trees, jobs, pure=False) if jobs else None


def _adopt_indexes(sink: Any, builds: list) -> None:
    """Hand the trees of :func:`_prebuild_indexes` (its futures; None for none) to
    ``sink``'s index; a build that failed is left to the GeoPackage's close, which builds
    that index itself."""
    import logging
    import warnings

    from .errors import DataQualityWarning
    from .io.rtree import _REBUILT

    log = logging.getLogger("curvescan")
    results = []
    for future in builds:
        if future is None:
            continue
        try:
            results += future.result()
        except Exception as exc:  # e.g. a worker lost: the close builds those indexes
            log.debug("spatial indexes built at close: %s", exc)
    for layer, result in results:
        if isinstance(result, Exception):
            log.debug("index of %s built at close: %s", layer, result)
            continue
        tree_file, rows, bulk = result
        if not bulk:
            warnings.warn(_REBUILT.format(rtree=f"of {layer}"),
                          DataQualityWarning, stacklevel=3)
        sink.index.adopt(layer, tree_file, rows)


def _merge_report(total: dict, part: dict) -> None:
    """Fold one partition's report into ``total``: numbers add up, lists are capped at 10."""
    for key, value in (part or {}).items():
        if key not in total:
            total[key] = value.copy() if isinstance(value, (dict, list)) else value
        elif isinstance(value, dict) and isinstance(total[key], dict):
            _merge_report(total[key], value)
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            total[key] = total[key] + value
        elif isinstance(value, list) and isinstance(total[key], list):
            total[key] = (total[key] + value)[:10]


#: posted-speed report values that are the same in every partition: kept, not added up
_SPEED_FIXED = ("field", "looked_for", "max_kmh", "no_limit_kmh", "bare_unit",
                "implicit_table")


def _merge_speed(total: dict, part: dict) -> None:
    """Fold one partition's posted-speed report into ``total`` (see :func:`_merge_report`);
    settings are kept, ``mixed_units`` is decided again on the summed unit counts."""
    if not part:
        return
    fixed = {k: total.get(k, part.get(k)) for k in _SPEED_FIXED if k in total or k in part}
    examples = sorted(set(total.get("unparsed_examples", []))
                      | set(part.get("unparsed_examples", [])))[:10]
    _merge_report(total, {k: v for k, v in part.items()
                          if k not in _SPEED_FIXED and k not in ("mixed_units",
                                                                 "unparsed_examples")})
    total.update(fixed)
    if "unparsed_examples" in part or "unparsed_examples" in total:
        total["unparsed_examples"] = examples
    if "units" in total and "bare_unit" in total:
        from .speeds import mixes_units

        total["mixed_units"] = mixes_units(total["units"], total["bare_unit"])


def _finish(source, dem, config, info: dict, merger: _Merger, layers: dict):
    import geopandas as gpd
    import pandas as pd

    from . import assess, physics
    from ._version import __version__
    from .cautions import CAUTION
    from .geometry import chord_tolerance_for
    from .pipeline import ScanResult

    info["timings"]["partitions"] = info["partitions"]
    info["timings"]["tasks"] = info["task_timings"]
    run = {
        "curvescan_version": __version__,
        "created_utc": pd.Timestamp.now(tz="UTC").isoformat(timespec="seconds"),
        "input": str(source) if not isinstance(source, gpd.GeoDataFrame) else "GeoDataFrame",
        "input_layer": config.layer,
        "input_crs": info["input_crs"].to_string() if info["input_crs"] is not None else None,
        "working_crs": info["crs"].to_wkt(),
        "dem": None if dem is None else str(dem),
        # defaults that depend on the input as used
        "parameters": chord_tolerance_for(config, info["input_crs"]).as_dict(),
        "physics": physics.run_record(config),
        "terrain": merger.terrain,
        "vertices": merger.vertices,
        "input_features": info["n_rows"],
        "chains": info["chains"],
        "roundabout_features_by_shape": info["ring_rows"],
        "curves": merger.counts.get("curves", 0),
        "hazards": merger.counts.get("hazards", 0),
        "segments": merger.counts.get("segments", 0),
        "skipped_features": len(info["skipped"]),
        "skipped": info["skipped"],
        "posted_speed": merger.speed or {"field": None, "looked_for": config.speed_field},
        "notes": [info["note"], f"scanned in {info['partitions']} partitions; assessment "
                  "counts are summed over partitions, its worst lists are per partition"],
        "warnings": info["messages"],
        "timings_s": info["timings"],
        "caution": CAUTION,
        "assessment": merger.assessment,
    }
    main = ("curves", "segments", "hazards")
    return ScanResult(curves=layers["curves"], segments=layers["segments"],
                      hazards=layers["hazards"], run=run,
                      extra={k: v for k, v in layers.items() if k not in main},
                      descriptions=dict(getattr(assess, "DESCRIPTIONS", {})))


def _concat(frames: list, crs: Any):
    import geopandas as gpd
    import pandas as pd

    frames = [f for f in frames if len(f)] or frames[:1]
    if not frames:
        return gpd.GeoDataFrame({"geometry": []}, geometry="geometry", crs=crs)
    return pd.concat(frames, ignore_index=True)


def scan_partitioned(source: Any, *, dem: Any = None, progress: Progress | None = None,
                     config: Any) -> Any:
    """Scan partition by partition on a dask cluster; return the whole result in memory.

    Called by :func:`curvescan.scan` when ``workers > 1``, a ``scheduler`` or a
    ``partition_features`` is given, or the source is a GeoParquet folder.
    """
    merger = _Merger()
    info = run_partitions(source, config, dem, progress, merger,
                          reword=merger.layer_warnings)
    return _finish(source, dem, config, info, merger, merger.layers(info["input_crs"], config))


def scan_to_gpkg(source: Any, output: Any, *, dem: Any = None, overwrite: bool = False,
                 progress: Progress | None = None, **parameters: Any) -> Any:
    """Scan partition by partition, streaming every layer into ``output``.

    Workers hand back Arrow tables; ``curves`` and ``segments`` are appended to the
    GeoPackage as partitions complete; ``hazards`` and ``winter`` wait on disk until all
    partitions are in, are ranked from their ranking columns alone and written in rank
    order (see :class:`_Streamer`). Client memory is bounded by a partition's result
    plus about 80 bytes a curve. The returned result holds the run record, ``curve_id``
    and ``posted_kmh`` of every curve, the first :data:`TOP_ROWS` rows of ``hazards`` and
    ``winter`` (the run record has the full counts) and no ``segments`` rows.
    """
    import pandas as pd

    from .config import make_config
    from .io.partitions import GpkgAppender
    from .pipeline import ScanResult
    from .styles import write_styles

    config = make_config(parameters.pop("config", None), **parameters)
    from . import assess

    probe = ScanResult(curves=pd.DataFrame(), segments=pd.DataFrame(), hazards=pd.DataFrame(),
                       run={}, descriptions=dict(getattr(assess, "DESCRIPTIONS", {})))
    sink = GpkgAppender(output, overwrite=overwrite, descriptions=probe.layer_descriptions())
    merger = _Streamer(sink)
    report = progress or (lambda stage, frac: None)
    tail_timings: dict[str, float] = {}

    def tail(client: Any, shared: bool) -> None:
        # the layers written so far are complete: where worker processes see the spill
        # folder, they build those layers' spatial indexes while the client writes the
        # ranked layers (GDAL holds the GIL while it writes: a thread would wait), and
        # each ranked layer's index while the client writes the next
        builds = [_prebuild_indexes(sink, client)] if shared else []
        t = time.perf_counter()
        curve_columns = merger.empty.get("hazards", merger.empty.get("curves"))
        merger.write_ranked(list(curve_columns.columns) if curve_columns is not None else [],
                            config, lambda s, f: report(s, 0.9 + 0.1 * f),
                            written=(lambda name: builds.append(
                                _prebuild_indexes(sink, client, [name]))) if shared else None)
        tail_timings["write_ranked"] = round(time.perf_counter() - t, 4)
        _adopt_indexes(sink, builds)

    try:
        info = run_partitions(source, config, dem, lambda s, f: report(s, 0.9 * f), merger,
                              arrow=True, out_dir=sink.folder(),
                              reword=merger.layer_warnings, tail=tail)
        info["timings"].update(tail_timings)
        layers = {"curves": (pd.concat(merger.summary, ignore_index=True) if merger.summary
                             else pd.DataFrame({"curve_id": [], "posted_kmh": []})),
                  "segments": pd.DataFrame(), **merger.top}
        layers.setdefault("hazards", pd.DataFrame())
        result = _finish(source, dem, config, info, merger, layers)
        styles = merger.style_frames()
        sink.close({"run": result.layers()["run"]},
                   finish=lambda path: write_styles(path, styles))
    except BaseException:
        sink.abort()
        raise
    return result
