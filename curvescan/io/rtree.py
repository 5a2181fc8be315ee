"""GeoPackage spatial indexes built in one pass after the rows are written.

GDAL keeps a layer's RTree index up to date row by row while it appends to a layer that
already exists (the partitioned writer appends partition by partition), and that cost
grows faster than the layer. So curvescan creates its layers without an index
(``SPATIAL_INDEX=NO``) and :func:`add_spatial_indexes` builds each index once at the end:
it reads every row's envelope from the GeoPackage geometry header, packs the envelopes
into a sort-tile-recursive tree and stores the tree's nodes directly in the tables of
SQLite's R*Tree module, then registers the index as the GeoPackage RTree extension asks
(``gpkg_extensions`` row and the six triggers that keep it current on later edits).

Sources: "OGC GeoPackage Encoding Standard", version 1.3.1 (OGC 12-128r18), clause 2.1.3
(geometry blob header: flags byte, envelope as minx, maxx, miny, maxy) and annex F.3
(RTree Spatial Indexes: virtual table ``rtree_<t>_<c>`` with columns id, minx, maxx,
miny, maxy, and its triggers); SQLite's R*Tree module documentation
(https://www.sqlite.org/rtree.html: 32-bit float coordinates rounded outward,
``rtreecheck()``) and the file format of its node, rowid and parent tables in
``ext/rtree/rtree.c`` (node: 2-byte depth, used in the root only, 2-byte cell count,
cells of 8-byte id and four 4-byte floats, all big-endian; at most 51 cells a node).
The packing is the sort-tile-recursive method of Leutenegger, Lopez and Edgington,
"STR: a simple and efficient algorithm for R-tree packing", ICDE 1997.
"""

from __future__ import annotations

import sqlite3
from typing import Any, Iterable

import numpy as np

__all__ = ["add_spatial_indexes", "envelopes", "wkb_envelopes", "IndexBuilder"]

#: Most cells SQLite's R*Tree keeps in a node (``RTREE_MAXCELLS`` in ``rtree.c``).
MAX_CELLS = 51
#: Bytes of one cell of a two-dimensional float R*Tree: id and four float32.
_CELL = np.dtype([("id", ">i8"), ("box", ">f4", (4,))])

_EXTENSION = ("http://www.geopackage.org/spec120/#extension_rtree", "write-only")

_TRIGGERS = {  # GeoPackage 1.3.1 annex F.3.3, with {t} table, {c} column, {i} id column
    "insert": 'AFTER INSERT ON "{t}" WHEN (new."{c}" NOT NULL AND NOT ST_IsEmpty(NEW."{c}")) '
              'BEGIN INSERT OR REPLACE INTO "{r}" VALUES (NEW."{i}",ST_MinX(NEW."{c}"), '
              'ST_MaxX(NEW."{c}"),ST_MinY(NEW."{c}"), ST_MaxY(NEW."{c}")); END',
    "update1": 'AFTER UPDATE OF "{c}" ON "{t}" WHEN OLD."{i}" = NEW."{i}" AND '
               '(NEW."{c}" NOTNULL AND NOT ST_IsEmpty(NEW."{c}")) BEGIN INSERT OR REPLACE '
               'INTO "{r}" VALUES (NEW."{i}",ST_MinX(NEW."{c}"), ST_MaxX(NEW."{c}"),'
               'ST_MinY(NEW."{c}"), ST_MaxY(NEW."{c}")); END',
    "update2": 'AFTER UPDATE OF "{c}" ON "{t}" WHEN OLD."{i}" = NEW."{i}" AND '
               '(NEW."{c}" ISNULL OR ST_IsEmpty(NEW."{c}")) BEGIN DELETE FROM "{r}" '
               'WHERE id = OLD."{i}"; END',
    "update3": 'AFTER UPDATE ON "{t}" WHEN OLD."{i}" != NEW."{i}" AND (NEW."{c}" NOTNULL '
               'AND NOT ST_IsEmpty(NEW."{c}")) BEGIN DELETE FROM "{r}" WHERE id = OLD."{i}"; '
               'INSERT OR REPLACE INTO "{r}" VALUES (NEW."{i}",ST_MinX(NEW."{c}"), '
               'ST_MaxX(NEW."{c}"),ST_MinY(NEW."{c}"), ST_MaxY(NEW."{c}")); END',
    "update4": 'AFTER UPDATE ON "{t}" WHEN OLD."{i}" != NEW."{i}" AND (NEW."{c}" ISNULL OR '
               'ST_IsEmpty(NEW."{c}")) BEGIN DELETE FROM "{r}" WHERE id IN (OLD."{i}", '
               'NEW."{i}"); END',
    "delete": 'AFTER DELETE ON "{t}" WHEN old."{c}" NOT NULL BEGIN DELETE FROM "{r}" '
              'WHERE id = OLD."{i}"; END',
}


def _quote(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def envelopes(con: sqlite3.Connection, table: str, column: str,
              fid: str) -> tuple[np.ndarray, np.ndarray]:
    """Ids and envelopes ``(n, 4)``: minx, maxx, miny, maxy as float64, of the non-empty
    geometries of ``table``, read from their GeoPackage headers (geometries written
    without an envelope are decoded)."""
    rows = con.execute(
        f"SELECT {_quote(fid)}, substr({_quote(column)}, 4, 1), "
        f"substr({_quote(column)}, 9, 32) FROM {_quote(table)} "
        f"WHERE {_quote(column)} IS NOT NULL").fetchall()
    if not rows:
        return np.zeros(0, np.int64), np.zeros((0, 4))
    ids = np.fromiter((r[0] for r in rows), np.int64, len(rows))
    flags = np.frombuffer(b"".join(r[1] for r in rows), np.uint8)
    kind = (flags >> 1) & 7                  # envelope contents indicator
    empty = (flags & 16) != 0
    boxes = np.full((len(rows), 4), np.nan)
    has = (kind >= 1) & (kind <= 4) & ~empty
    for little in (True, False):
        sel = np.flatnonzero(has & (((flags & 1) == 1) == little))
        if len(sel):
            raw = b"".join(rows[k][2] for k in sel)
            boxes[sel] = np.frombuffer(raw, "<f8" if little else ">f8").reshape(-1, 4)
    other = np.flatnonzero(~has & ~empty & (kind == 0))
    if len(other):  # no envelope in the header: decode those geometries
        boxes[other] = _decoded_boxes(con, table, column, fid, ids[other])
    keep = np.isfinite(boxes).all(axis=1)
    return ids[keep], boxes[keep]


def _decoded_boxes(con, table, column, fid, ids) -> np.ndarray:
    import shapely

    out = np.full((len(ids), 4), np.nan)
    for k, i in enumerate(ids.tolist()):
        blob = con.execute(f"SELECT {_quote(column)} FROM {_quote(table)} WHERE "
                           f"{_quote(fid)} = ?", (i,)).fetchone()[0]
        geom = shapely.from_wkb(bytes(blob[8:]))  # no envelope: WKB right after the header
        if geom is not None and not geom.is_empty:
            x0, y0, x1, y1 = geom.bounds
            out[k] = (x0, x1, y0, y1)
    return out


def wkb_envelopes(wkb: Any) -> np.ndarray:
    """Envelopes ``(n, 4)`` (minx, maxx, miny, maxy; NaN for null and empty geometries)
    of an Arrow binary array of WKB.

    Little-endian LineStrings and MultiLineStrings (2D, Z, M, ZM) are read by one compiled
    pass over the bytes; any other geometry, and every geometry without numba, through
    shapely.
    """
    import pyarrow as pa

    from ..geometry import _kernels as kn

    if isinstance(wkb, pa.ChunkedArray):  # chunk by chunk: no copy of the whole column
        parts = [wkb_envelopes(chunk) for chunk in wkb.chunks]
        return np.concatenate(parts) if parts else np.zeros((0, 4))
    arr = wkb
    n = len(arr)
    out = np.full((n, 4), np.nan)
    if n == 0:
        return out
    todo = np.ones(n, bool)
    if kn.compiled():
        bufs = arr.buffers()
        width = np.int64 if pa.types.is_large_binary(arr.type) else np.int32
        offsets = np.frombuffer(bufs[1], width)[arr.offset:arr.offset + n + 1].astype(np.int64)
        data = (np.frombuffer(bufs[2], np.uint8) if bufs[2] is not None
                else np.zeros(0, np.uint8))
        valid = ~np.asarray(arr.is_null()).astype(bool) if arr.null_count else np.ones(n, bool)
        done = np.zeros(n, bool)
        kn.wkb_envelope_kernel(data, offsets, valid, out, done)
        todo = ~done
    if todo.any():
        import shapely

        sel = np.flatnonzero(todo)
        geoms = shapely.from_wkb(np.asarray(arr.take(pa.array(sel)).to_numpy(
            zero_copy_only=False), dtype=object))
        b = shapely.bounds(geoms)  # minx, miny, maxx, maxy; NaN for empty and None
        out[sel] = b[:, [0, 2, 1, 3]]
    return out


class IndexBuilder:
    """Collects the envelopes of the rows written to each layer, in write order, and
    builds the layers' RTree indexes from them at the end (:meth:`build`).

    Rows must be appended to new tables (the GeoPackage then numbers them 1, 2, ...);
    :meth:`build` checks that and otherwise reads the envelopes back from the file.
    With ``folder`` the envelopes wait in files there (16 bytes a row) instead of memory.
    """

    def __init__(self, folder: str | None = None) -> None:
        self.folder = folder
        self.parts: dict[str, list] = {}
        self.rows: dict[str, int] = {}
        self.prebuilt: dict[str, str] = {}  # layer: file of its tree (build_tree_file)

    def add(self, layer: str, wkb: Any, boxes: np.ndarray | None = None) -> None:
        """Record the envelopes of ``wkb`` (Arrow binary), the next rows of ``layer``
        (``boxes``: those envelopes as :func:`index_boxes` gives them, when known)."""
        boxes = index_boxes(wkb) if boxes is None else boxes
        self.rows[layer] = self.rows.get(layer, 0) + len(boxes)
        if self.folder is None:
            self.parts.setdefault(layer, []).append(boxes)
            return
        import os

        if layer not in self.parts:
            self.parts[layer] = [os.path.join(self.folder, f"envelopes_{len(self.parts)}.f32")]
        with open(self.parts[layer][0], "ab") as fh:
            fh.write(np.ascontiguousarray(boxes).tobytes())

    def boxes(self, layer: str) -> np.ndarray:
        if self.folder is None:
            parts = self.parts.get(layer, [])
            return (np.concatenate(parts) if parts else np.zeros((0, 4), np.float32))
        return np.fromfile(self.parts[layer][0], np.float32).reshape(-1, 4)

    def build(self, path: str) -> list[str]:
        """Add the RTree index of every geometry table of ``path`` (see
        :func:`add_spatial_indexes`), from the recorded envelopes where they apply."""
        return add_spatial_indexes(path, known=self)

    def prebuild_args(self, layer: str) -> tuple[str, str, int] | None:
        """Arguments of :func:`build_tree_file` for ``layer``, whose rows are all written:
        its envelope file, a tree file next to it and the row count (None without a
        folder or rows). The tree can then be built by another process while the writer
        goes on with other layers; :meth:`adopt` takes it back."""
        if self.folder is None or not self.rows.get(layer):
            return None
        envelope_file = self.parts[layer][0]
        return envelope_file, envelope_file[:-len(".f32")] + ".rtree.sqlite", self.rows[layer]

    def adopt(self, layer: str, tree_file: str, rows: int) -> None:
        """Use the tree in ``tree_file`` (:func:`build_tree_file`) for ``layer`` if it holds
        ``rows`` rows, as many as were recorded; :meth:`build` copies it in."""
        if rows == self.rows.get(layer):
            self.prebuilt[layer] = tree_file


#: Name of the R*Tree table in a file of :func:`build_tree_file`.
TREE_TABLE = "tree"


def build_tree_file(envelope_file: str, tree_file: str, rows: int) -> tuple[str, int, bool]:
    """Build the packed R*Tree of the envelopes in ``envelope_file`` (float32 rows, as
    :class:`IndexBuilder` writes them; ids 1 to ``rows``) in a new SQLite file.

    Runs anywhere that sees both files, e.g. a worker process of a local cluster while
    the client writes other layers. Returns ``(tree_file, rows, bulk)``: ``bulk`` is False
    where SQLite's check rejected the packed tree and it was built row by row.
    """
    import os

    boxes = np.fromfile(envelope_file, np.float32).reshape(-1, 4)
    if len(boxes) != rows:
        raise ValueError(f"{envelope_file}: {len(boxes)} envelopes, expected {rows}")
    if os.path.exists(tree_file):
        os.unlink(tree_file)
    con = sqlite3.connect(tree_file)
    try:
        with con:
            con.execute("PRAGMA journal_mode = OFF")
            con.execute(f"CREATE VIRTUAL TABLE {TREE_TABLE} USING "
                        "rtree(id, minx, maxx, miny, maxy)")
            bulk = _fill(con, TREE_TABLE, *_finite_rows(boxes))
    finally:
        con.close()
    return tree_file, rows, bulk


def _copy_tree(con: sqlite3.Connection, rtree: str, schema: str) -> None:
    """Fill the (new, empty) R*Tree ``rtree`` with the tables of the tree in the attached
    database ``schema`` (:func:`build_tree_file`): its node, rowid and parent tables are
    copied as they are."""
    for part in ("_node", "_rowid", "_parent"):
        con.execute(f"DELETE FROM {_quote(rtree + part)}")
        con.execute(f"INSERT INTO {_quote(rtree + part)} SELECT * FROM "
                    f"{_quote(schema)}.{_quote(TREE_TABLE + part)}")


def index_boxes(wkb: Any) -> np.ndarray:
    """Envelopes of ``wkb`` (Arrow binary) as the index stores them: ``(n, 4)`` float32,
    minx, maxx, miny, maxy, rounded outward."""
    return _float32_outward(wkb_envelopes(wkb))


def _float32_outward(boxes: np.ndarray) -> np.ndarray:
    """Envelopes as float32, minima rounded down and maxima up (as SQLite's R*Tree does)."""
    f = boxes.astype(np.float32)
    lo, hi = f[:, 0::2], f[:, 1::2]
    down = lo.astype(np.float64) > boxes[:, 0::2]
    up = hi.astype(np.float64) < boxes[:, 1::2]
    lo[down] = np.nextafter(lo[down], np.float32(-np.inf))
    hi[up] = np.nextafter(hi[up], np.float32(np.inf))
    f[:, 0::2], f[:, 1::2] = lo, hi
    return f


def _str_groups(boxes: np.ndarray) -> np.ndarray:
    """Order of ``boxes`` (float32 ``(n, 4)``) that tiles them: consecutive runs of
    :data:`MAX_CELLS` form the nodes of the level above (sort-tile-recursive)."""
    n = len(boxes)
    cx = boxes[:, 0].astype(np.float64) + boxes[:, 1]
    cy = boxes[:, 2].astype(np.float64) + boxes[:, 3]
    nodes = -(-n // MAX_CELLS)
    slices = int(np.ceil(np.sqrt(nodes)))
    per_slice = slices * MAX_CELLS
    by_x = np.argsort(cx)
    # then by y within each slice of ``per_slice`` boxes: one sort of slice + y in [0, 1)
    y = cy[by_x]
    span = float(y.max() - y.min()) or 1.0
    key = np.arange(n) // per_slice + 0.5 * (y - y.min()) / span
    return by_x[np.argsort(key)]


def _pack(ids: np.ndarray, boxes: np.ndarray):
    """The tree's levels, leaves first: per level the (ids, boxes) of its cells in node
    order and the node of each cell (0-based within the level)."""
    levels = []
    while True:
        n = len(ids)
        order = _str_groups(boxes) if n > MAX_CELLS else np.arange(n)
        ids, boxes = ids[order], boxes[order]
        node = np.arange(n) // MAX_CELLS
        levels.append((ids, boxes, node))
        n_nodes = int(node[-1]) + 1 if n else 1
        if n_nodes == 1:
            return levels
        starts = np.arange(0, n, MAX_CELLS)
        parent_boxes = np.column_stack([
            np.minimum.reduceat(boxes[:, 0], starts), np.maximum.reduceat(boxes[:, 1], starts),
            np.minimum.reduceat(boxes[:, 2], starts), np.maximum.reduceat(boxes[:, 3], starts)])
        ids, boxes = np.arange(n_nodes, dtype=np.int64), parent_boxes  # child placeholders


def build_rtree(con: sqlite3.Connection, rtree: str, ids: np.ndarray,
                boxes: np.ndarray) -> None:
    """Fill the (new, empty) R*Tree virtual table ``rtree`` with ``ids`` and ``boxes``."""
    if not _fill(con, rtree, ids, boxes):
        import warnings

        from ..errors import DataQualityWarning

        warnings.warn(_REBUILT.format(rtree=rtree), DataQualityWarning, stacklevel=2)


_REBUILT = ("spatial index {rtree}: the bulk-built tree failed SQLite's check; "
            "rebuilt row by row")


def _fill(con: sqlite3.Connection, rtree: str, ids: np.ndarray, boxes: np.ndarray) -> bool:
    """:func:`build_rtree` without the warning: False where the packed tree failed
    SQLite's check and ``rtree`` was filled row by row instead."""
    if not len(ids):
        return True
    node_size = 4 + MAX_CELLS * _CELL.itemsize
    page = con.execute("PRAGMA page_size").fetchone()[0]
    node_size = min(node_size, page - 64)
    cells = (node_size - 4) // _CELL.itemsize
    if cells < MAX_CELLS:  # pages below 2 kB: not what GDAL or SQLite create by default
        raise ValueError(f"page size {page} too small for the bulk-built RTree")
    if boxes.dtype != np.float32:
        boxes = _float32_outward(boxes)
    levels = _pack(ids, boxes)
    # number the nodes from the root down: root 1, then each level below in order
    n_nodes = [int(node[-1]) + 1 for _, _, node in levels]
    first = {}
    nxt = 1
    for depth in range(len(levels) - 1, -1, -1):
        first[depth] = nxt
        nxt += n_nodes[depth]
    node_rows, parent_rows = [], []
    for depth, (cell_ids, cell_boxes, node) in enumerate(levels):
        nodeno = first[depth] + node
        if depth > 0:  # cells point at child nodes: child placeholder k -> its number
            cell_ids = first[depth - 1] + cell_ids
            parent_rows.append(np.column_stack([cell_ids, nodeno]))
        buf = np.zeros((n_nodes[depth], node_size), np.uint8)
        counts = np.bincount(node, minlength=n_nodes[depth]).astype(">u2")
        buf[:, 2:4] = counts.view(np.uint8).reshape(-1, 2)
        slot = np.arange(len(node)) % MAX_CELLS
        body = np.ascontiguousarray(buf[:, 4:4 + MAX_CELLS * _CELL.itemsize])
        view = body.view(_CELL).reshape(n_nodes[depth], MAX_CELLS)
        view["id"][node, slot] = cell_ids
        view["box"][node, slot] = cell_boxes
        buf[:, 4:4 + MAX_CELLS * _CELL.itemsize] = body
        if depth == len(levels) - 1:
            buf[0, 0:2] = np.array([depth], ">u2").view(np.uint8)
        node_rows.append((first[depth] + np.arange(n_nodes[depth]), buf))
    leaf_ids, _, leaf_node = levels[0]
    q = _quote(rtree + "_node")
    con.execute(f"DELETE FROM {q}")
    con.execute(f"DELETE FROM {_quote(rtree + '_rowid')}")
    con.execute(f"DELETE FROM {_quote(rtree + '_parent')}")
    con.executemany(f"INSERT INTO {q} VALUES (?, ?)",
                    ((int(k), b.tobytes()) for nodeno, buf in node_rows
                     for k, b in zip(nodeno.tolist(), buf)))
    by_id = np.argsort(leaf_ids, kind="stable")
    ids_sorted, nodes_sorted = leaf_ids[by_id], (first[0] + leaf_node)[by_id]
    r = _quote(rtree + "_rowid")
    try:
        if ids_sorted[-1] - ids_sorted[0] != len(ids_sorted) - 1:
            raise ValueError("ids not consecutive")
        # consecutive ids: one statement over a JSON array (SQLite's json_each)
        con.execute(f"INSERT INTO {r} SELECT ? + key, value FROM json_each(?)",
                    (int(ids_sorted[0]), "[" + ",".join(map(str, nodes_sorted.tolist())) + "]"))
    except (ValueError, sqlite3.OperationalError):  # no JSON functions in this SQLite
        con.executemany(f"INSERT INTO {r} VALUES (?, ?)",
                        zip(ids_sorted.tolist(), nodes_sorted.tolist()))
    if parent_rows:
        con.executemany(f"INSERT INTO {_quote(rtree + '_parent')} VALUES (?, ?)",
                        np.concatenate(parent_rows).tolist())
    if _tree_ok(con, rtree):
        return True
    # never leave a file whose index SQLite does not accept: rebuild it through SQLite's
    # own inserts (slower, always valid); the caller says so
    _insert_rows(con, rtree, ids, boxes)
    return False


def _tree_ok(con: sqlite3.Connection, rtree: str) -> bool:
    """SQLite's own structural check of an R*Tree (``rtreecheck``, SQLite 3.24 and later;
    where it is missing the tree is taken as built)."""
    try:
        return con.execute("SELECT rtreecheck(?)", (rtree,)).fetchone()[0] == "ok"
    except sqlite3.OperationalError:
        return True


def _insert_rows(con: sqlite3.Connection, rtree: str, ids: np.ndarray,
                 boxes: np.ndarray) -> None:
    """Empty ``rtree`` and insert every box through the R*Tree module itself."""
    con.execute(f"DROP TABLE {_quote(rtree)}")
    con.execute(f"CREATE VIRTUAL TABLE {_quote(rtree)} USING rtree(id, minx, maxx, miny, maxy)")
    b = np.asarray(boxes, dtype=float)
    con.executemany(f"INSERT INTO {_quote(rtree)} VALUES (?, ?, ?, ?, ?)",
                    zip(np.asarray(ids).tolist(), b[:, 0].tolist(), b[:, 1].tolist(),
                        b[:, 2].tolist(), b[:, 3].tolist()))


def add_spatial_indexes(path: str, tables: Iterable[str] | None = None,
                        known: IndexBuilder | None = None) -> list[str]:
    """Build the RTree spatial index of every geometry table of the GeoPackage at
    ``path`` that has none (or of ``tables`` only); return the tables indexed.

    Envelopes come from ``known`` for a table whose rows it recorded (when the table's
    ids are 1 to its row count), else from the geometry headers in the file.
    """
    done = []
    con = sqlite3.connect(str(path))
    attached = {}  # layer: schema of its prebuilt tree (attached before any transaction)
    for k, (layer, tree_file) in enumerate((known.prebuilt if known else {}).items()):
        con.execute("ATTACH DATABASE ? AS " + _quote(f"prebuilt{k}"), (tree_file,))
        attached[layer] = f"prebuilt{k}"
    try:
        with con:
            con.execute("CREATE TABLE IF NOT EXISTS gpkg_extensions (table_name TEXT, "
                        "column_name TEXT, extension_name TEXT NOT NULL, definition TEXT "
                        "NOT NULL, scope TEXT NOT NULL, CONSTRAINT ge_tce UNIQUE "
                        "(table_name, column_name, extension_name))")
            geoms = con.execute("SELECT table_name, column_name FROM "
                                "gpkg_geometry_columns").fetchall()
            have = {(t.lower(), c.lower()) for t, c in con.execute(
                "SELECT table_name, column_name FROM gpkg_extensions WHERE "
                "extension_name = 'gpkg_rtree_index'")}
            wanted = None if tables is None else {t.lower() for t in tables}
            for table, column in geoms:
                if (table.lower(), column.lower()) in have or (
                        wanted is not None and table.lower() not in wanted):
                    continue
                fid = _fid_column(con, table)
                rtree = f"rtree_{table}_{column}"
                recorded = _recorded_rows(con, table, fid, known)
                con.execute(f"CREATE VIRTUAL TABLE {_quote(rtree)} USING "
                            "rtree(id, minx, maxx, miny, maxy)")
                if recorded and table in attached:
                    # the recorded rows are the table's rows, so the tree built from
                    # their envelopes in another process is this index
                    _copy_tree(con, rtree, attached[table])
                else:
                    boxes = known.boxes(table) if recorded else None
                    if boxes is not None and len(boxes) == known.rows[table]:
                        ids, boxes = _finite_rows(boxes)
                    else:
                        ids, boxes = envelopes(con, table, column, fid)
                    build_rtree(con, rtree, ids, boxes)
                for name, body in _TRIGGERS.items():
                    con.execute(f"CREATE TRIGGER {_quote(rtree + '_' + name)} " + body.format(
                        t=table.replace('"', '""'), c=column.replace('"', '""'),
                        i=fid.replace('"', '""'), r=rtree.replace('"', '""')))
                con.execute("INSERT INTO gpkg_extensions (table_name, column_name, "
                            "extension_name, definition, scope) VALUES (?, ?, "
                            "'gpkg_rtree_index', ?, ?)", (table, column, *_EXTENSION))
                done.append(table)
    finally:
        con.close()
    return done


def _finite_rows(boxes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ids (1, 2, ...) and envelopes of the rows of ``boxes`` that have an envelope
    (an empty geometry's is NaN and stays out of the index)."""
    keep = np.flatnonzero(np.isfinite(boxes).all(axis=1))
    return keep.astype(np.int64) + 1, boxes[keep]


def _recorded_rows(con, table, fid, known) -> bool:
    """Whether ``known`` recorded the rows of ``table``: ids 1 to its row count."""
    if known is None or table not in known.rows:
        return False
    n = known.rows[table]
    # two statements: SQLite answers a lone min() or max() from the key, both at once
    # by reading the table
    lo = con.execute(f"SELECT min({_quote(fid)}) FROM {_quote(table)}").fetchone()[0]
    hi = con.execute(f"SELECT max({_quote(fid)}) FROM {_quote(table)}").fetchone()[0]
    if n and (lo != 1 or hi != n):
        return False
    # ids 1 to n are unique: n rows unless some were deleted (a count would read the table)
    count = None
    if con.execute("SELECT 1 FROM sqlite_master WHERE name = 'gpkg_ogr_contents'").fetchone():
        row = con.execute("SELECT feature_count FROM gpkg_ogr_contents WHERE "
                          "lower(table_name) = lower(?)", (table,)).fetchone()
        count = row[0] if row else None
    if count is None:
        count = con.execute(f"SELECT count(*) FROM {_quote(table)}").fetchone()[0]
    return count == n


def _fid_column(con: sqlite3.Connection, table: str) -> str:
    for _, name, typ, _, _, pk in con.execute(f"PRAGMA table_info({_quote(table)})"):
        if pk and typ.upper() == "INTEGER":
            return name
    return "rowid"
