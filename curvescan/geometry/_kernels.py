"""Compiled inner loops (numba) for the station and group passes, with numpy fallbacks.

The geometry stage walks tens of millions of stations on a region. numba runs each pass
in one loop without temporaries, chain by chain (on all cores where the loop is
parallel), instead of many whole-array numpy passes with searches, sorts and scatters.
Kernels are cached on disk after the first call.

Every kernel gives exactly the values of the numpy form it replaces (same operations in
the same order; sums accumulate in index order as ``np.bincount`` does), and that numpy
form stays in the calling module as the fallback where numba is not installed, or when
:data:`ENABLED` is set to False (the tests compare both). One exception: the compiled
chord curvature takes ``atan2`` from the C library, numpy its own vectorised one; they
differ in the last bit. Where an angle is a result (``station_heading``) the kernel
returns the differences and numpy takes the ``atan2``. The compound split search
(``best_split_kernel``) gives the same split positions, not the same intermediate
values: it solves its 3x3 systems itself and hands the positions its error bound cannot
rank back to numpy's LAPACK solve.
"""

from __future__ import annotations

import os

import numpy as np

try:  # pragma: no cover - exercised through both branches in tests
    from numba import njit, prange

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover
    HAVE_NUMBA = False

__all__ = ["HAVE_NUMBA", "ENABLED", "compiled", "chord_kappa"]

#: Use the compiled kernels (where numba is installed). Tests set it to False to run the
#: numpy fallbacks and compare; the environment variable ``CURVESCAN_NUMBA=0`` sets it too.
ENABLED = os.environ.get("CURVESCAN_NUMBA", "1") != "0"


def compiled() -> bool:
    """Whether the compiled kernels are used."""
    return HAVE_NUMBA and ENABLED


if HAVE_NUMBA:  # pragma: no cover - compiled code is not traced by coverage

    @njit(parallel=True, cache=True)
    def _chord_kappa(x, y, s, chain, st_off, half, at, out, scatter, every):
        """Chord curvature at stations ``at`` (or at every station when ``every``) into
        ``out[t]`` (or ``out[at[t]]`` when ``scatter``)."""
        n = s.shape[0] if every else at.shape[0]
        for t in prange(n):
            i = np.int64(t) if every else at[t]
            o = i if scatter else np.int64(t)
            ch = chain[i]
            start = st_off[ch]
            last = st_off[ch + 1] - 1
            k = min(half[ch], (last - start) // 2)
            if k <= 0:
                out[o] = 0.0
                continue
            c = min(max(i, start + k), last - k)
            a = c - k
            b = c + k
            d1x = x[c] - x[a]
            d1y = y[c] - y[a]
            d2x = x[b] - x[c]
            d2y = y[b] - y[c]
            turn = np.arctan2(d1x * d2y - d1y * d2x, d1x * d2x + d1y * d2y)
            span = 0.5 * (s[b] - s[a])
            out[o] = turn / span if span > 0 else 0.0

    @njit(parallel=True, cache=True)
    def resample_kernel(cx, cy, gm, v_off, base, st_off, step):
        """Stations of every chain: ``x, y, s, gs`` and the neighbour differences
        ``dx, dy`` the heading is taken from (see ``resample.resample``)."""
        n = st_off[-1]
        x = np.empty(n)
        y = np.empty(n)
        s = np.empty(n)
        gs = np.empty(n)
        dx = np.empty(n)
        dy = np.empty(n)
        for c in prange(st_off.shape[0] - 1):
            lo = v_off[c]
            hi = v_off[c + 1] - 2
            j = lo
            b = base[c]
            first = st_off[c]
            end = st_off[c + 1]
            for i in range(first, end):
                si = (i - first) * step[c]
                g = si + b
                s[i] = si
                gs[i] = g
                # searchsorted(gm, g, "right") - 1, clipped to the chain's segments
                while j < hi and gm[j + 1] <= g:
                    j += 1
                jj = max(j, lo) if lo <= hi else hi
                span = gm[jj + 1] - gm[jj]
                t = (g - gm[jj]) / span if span > 0 else 0.0
                t = min(max(t, 0.0), 1.0) if t == t else t
                x[i] = cx[jj] * (1.0 - t) + cx[jj + 1] * t
                y[i] = cy[jj] * (1.0 - t) + cy[jj + 1] * t
            for i in range(first, end):
                a = max(i - 1, first)
                e = min(i + 1, end - 1)
                dx[i] = x[e] - x[a]
                dy[i] = y[e] - y[a]
        return x, y, s, gs, dx, dy

    @njit(parallel=True, cache=True)
    def median_segment_kernel(measure, v_off):
        """Upper median of each chain's segment lengths (0 for a chain of one vertex)."""
        nc = v_off.shape[0] - 1
        out = np.zeros(nc)
        for c in prange(nc):
            m = v_off[c + 1] - v_off[c] - 1
            if m <= 0:
                continue
            seg = np.empty(m)
            for k in range(m):
                i = v_off[c] + k
                seg[k] = measure[i + 1] - measure[i]
            seg.sort()
            out[c] = seg[m // 2]
        return out

    @njit(parallel=True, cache=True)
    def on_chord_kernel(x, y, tol, out):
        """``out[i]``: vertex ``i`` lies within ``tol`` of the segment between vertices
        ``i - 1`` and ``i + 1`` (see ``resample.shape_vertices``; same operations)."""
        n = x.shape[0]
        for i in prange(1, n - 1):
            ux = x[i + 1] - x[i - 1]
            uy = y[i + 1] - y[i - 1]
            px = x[i] - x[i - 1]
            py = y[i] - y[i - 1]
            length = np.hypot(ux, uy)
            if length > 0.0:
                along = (px * ux + py * uy) / length
                off = abs(px * uy - py * ux) / length
                out[i] = off <= tol and along >= 0.0 and along <= length
            else:
                out[i] = False

    @njit(parallel=True, cache=True)
    def collinear_kernel(cx, cy, v_off, cand, tol, max_run):
        """Sequential collinear rule of ``resample._sequential_keep`` (same values)."""
        n = cx.shape[0]
        keep = np.ones(n, dtype=np.bool_)
        nc = v_off.shape[0] - 1
        for c in prange(nc):
            first = v_off[c]
            last = v_off[c + 1] - 1
            k = first
            for i in range(first + 1, last):
                if not cand[i] or i - k > max_run:
                    k = i
                    continue
                ax = cx[k]
                ay = cy[k]
                ux = cx[i + 1] - ax
                uy = cy[i + 1] - ay
                length = np.hypot(ux, uy)
                ok = length > 0.0
                j = k + 1
                while ok and j <= i:
                    px = cx[j] - ax
                    py = cy[j] - ay
                    along = (px * ux + py * uy) / length
                    off = abs(px * uy - py * ux) / length
                    ok = off <= tol and along >= 0.0 and along <= length
                    j += 1
                if ok:
                    keep[i] = False
                else:
                    k = i
        return keep

    @njit(parallel=True, cache=True)
    def noise_kernel(cx, cy, measure, v_off, kappa, use_kappa):
        """Upper median of each chain's absolute vertex offsets from the neighbour chord
        (sagitta of ``kappa`` removed; 0 where a chain has none; see noise.py)."""
        nc = v_off.shape[0] - 1
        med = np.zeros(nc)
        for c in prange(nc):
            o0 = v_off[c]
            m = v_off[c + 1] - o0 - 2
            if m <= 0:
                continue
            vals = np.empty(m)
            cnt = 0
            for i in range(o0 + 1, o0 + 1 + m):
                ax = cx[i - 1]
                ay = cy[i - 1]
                chx = cx[i + 1] - ax
                chy = cy[i + 1] - ay
                length = np.hypot(chx, chy)
                if not length > 1e-9:
                    continue
                off = (chx * (cy[i] - ay) - chy * (cx[i] - ax)) / length
                if use_kappa:
                    h1 = measure[i] - measure[i - 1]
                    h2 = measure[i + 1] - measure[i]
                    off = off + kappa[i] * h1 * h2 / 2.0
                vals[cnt] = abs(off)
                cnt += 1
            if cnt > 0:
                v = np.sort(vals[:cnt])
                med[c] = v[cnt // 2]
        return med

    @njit(cache=True)
    def spike_candidate_kernel(xy):
        """Turns ``i`` (at vertex ``i + 1``) whose two segments have a dot product not
        above zero: ``np.flatnonzero(dot <= 0)`` of ``prepare._remove_spikes``."""
        n = xy.shape[0] - 2
        count = 0
        for i in range(n):
            dot = (xy[i + 2, 0] - xy[i + 1, 0]) * (xy[i + 1, 0] - xy[i, 0])
            dot += (xy[i + 2, 1] - xy[i + 1, 1]) * (xy[i + 1, 1] - xy[i, 1])
            if dot <= 0.0:
                count += 1
        out = np.empty(count, dtype=np.int64)
        t = 0
        for i in range(n):
            dot = (xy[i + 2, 0] - xy[i + 1, 0]) * (xy[i + 1, 0] - xy[i, 0])
            dot += (xy[i + 2, 1] - xy[i + 1, 1]) * (xy[i + 1, 1] - xy[i, 1])
            if dot <= 0.0:
                out[t] = i
                t += 1
        return out

    @njit(parallel=True, cache=True)
    def linestring_wkb_kernel(points, offsets, out):
        """WKB of each LineString ``p`` (header, then its points' bytes from
        ``points``, 16 a point) at byte ``9 p + 16 offsets[p]`` of ``out``."""
        for p in prange(offsets.shape[0] - 1):
            o = 9 * p + 16 * offsets[p]
            cnt = offsets[p + 1] - offsets[p]
            out[o] = 1
            out[o + 1] = 2
            out[o + 2] = 0
            out[o + 3] = 0
            out[o + 4] = 0
            for q in range(4):
                out[o + 5 + q] = (cnt >> (8 * q)) & 255
            src = 16 * offsets[p]
            out[o + 9:o + 9 + 16 * cnt] = points[src:src + 16 * cnt]

    @njit(cache=True)
    def _point_at(coords, gm, v_off, c, g, out, row):
        """``resample.interpolate`` of one measure ``g`` on chain ``c`` into ``out[row]``:
        the same search (NaN after everything), clip and arithmetic."""
        lo = 0
        hi = gm.shape[0]
        if g == g:
            while lo < hi:  # searchsorted(gm, g, "right")
                mid = (lo + hi) // 2
                if gm[mid] <= g:
                    lo = mid + 1
                else:
                    hi = mid
        else:
            lo = gm.shape[0]
        j = lo - 1
        j = max(j, v_off[c])  # np.clip: maximum, then minimum
        j = min(j, v_off[c + 1] - 2)
        span = gm[j + 1] - gm[j]
        t = (g - gm[j]) / span if span > 0 else 0.0
        if t == t:  # np.clip's comparisons (NaN stays NaN)
            t = t if t > 0.0 else 0.0
            t = t if t < 1.0 else 1.0
        out[row, 0] = coords[j, 0] * (1.0 - t) + coords[j + 1, 0] * t
        out[row, 1] = coords[j, 1] * (1.0 - t) + coords[j + 1, 1] * t

    @njit(parallel=True, cache=True)
    def substring_points_kernel(coords, gm, v_off, chain, g0, g1, i0, inner, offsets):
        """Points of each piece ``p`` (see ``pieces._lines``): the interpolated point at
        ``g0[p]``, vertices ``i0[p] ..`` (``inner[p]`` of them), the point at ``g1[p]``,
        from row ``offsets[p]``."""
        out = np.empty((offsets[-1], 2))
        for p in prange(chain.shape[0]):
            first = offsets[p]
            _point_at(coords, gm, v_off, chain[p], g0[p], out, first)
            for k in range(inner[p]):
                out[first + 1 + k, 0] = coords[i0[p] + k, 0]
                out[first + 1 + k, 1] = coords[i0[p] + k, 1]
            _point_at(coords, gm, v_off, chain[p], g1[p], out, offsets[p + 1] - 1)
        return out

    @njit(cache=True)
    def near_vertex_kernel(gs, gm):
        """Stations either side of each vertex (``searchsorted(gs, gm)`` clipped to
        ``1 .. n-1``, and the station before), as a sorted index array."""
        n = gs.shape[0]
        mark = np.zeros(n, dtype=np.bool_)
        j = 0
        for v in range(gm.shape[0]):
            g = gm[v]
            while j < n and gs[j] < g:
                j += 1
            k = min(max(j, 1), n - 1)
            mark[k - 1] = True
            mark[k] = True
        return np.flatnonzero(mark)

    @njit(cache=True)
    def expand_kernel(starts, counts):
        total = 0
        for g in range(counts.shape[0]):
            total += counts[g]
        idx = np.empty(total, dtype=np.int64)
        grp = np.empty(total, dtype=np.int64)
        p = 0
        for g in range(counts.shape[0]):
            s0 = starts[g]
            for k in range(counts[g]):
                idx[p] = s0 + k
                grp[p] = g
                p += 1
        return idx, grp

    @njit(cache=True)
    def scatter_min_kernel(out, grp, values):
        for i in range(grp.shape[0]):
            g = grp[i]
            v = values[i]
            if v < out[g] or v != v:
                out[g] = v

    @njit(cache=True)
    def scatter_max_kernel(out, grp, values):
        for i in range(grp.shape[0]):
            g = grp[i]
            v = values[i]
            if v > out[g] or v != v:
                out[g] = v

    @njit(cache=True)
    def stops_around_kernel(idx, grp, centre, stop, n):
        """Nearest flagged index on each side of each group's centre (see ``_ragged``)."""
        left = np.full(n, -1, dtype=np.int64)
        right = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
        for t in range(idx.shape[0]):
            if not stop[t]:
                continue
            g = grp[t]
            i = idx[t]
            if i > centre[g]:
                if i < right[g]:
                    right[g] = i
            elif i < centre[g]:
                if i > left[g]:
                    left[g] = i
        return left, right

    @njit(parallel=True, cache=True, error_model="numpy")
    def below_half_stops_kernel(K, scale, sign, radius, a, b, centre):
        """Nearest station on each side of ``centre`` within ``a..b`` where
        ``K[scale] * sign`` is below ``0.5 / radius`` (see ``circular.half_level_span``;
        -1 and ``int64`` max where none), walking outward from the centre."""
        n = a.shape[0]
        left = np.full(n, -1, dtype=np.int64)
        right = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
        for g in prange(n):
            bar = 0.5 / radius[g]
            for i in range(centre[g] - 1, a[g] - 1, -1):
                if K[scale[g], i] * sign[g] < bar:
                    left[g] = i
                    break
            for i in range(centre[g] + 1, b[g] + 1):
                if K[scale[g], i] * sign[g] < bar:
                    right[g] = i
                    break
        return left, right

    @njit(cache=True)
    def _group_order(grp, n):
        """Positions of each group's members in index order: ``(order, first, counts)``."""
        counts = np.zeros(n, dtype=np.int64)
        for i in range(grp.shape[0]):
            counts[grp[i]] += 1
        first = np.zeros(n, dtype=np.int64)
        acc = 0
        for g in range(n):
            first[g] = acc
            acc += counts[g]
        fill = first.copy()
        order = np.empty(grp.shape[0], dtype=np.int64)
        for i in range(grp.shape[0]):
            g = grp[i]
            order[fill[g]] = i
            fill[g] += 1
        return order, first, counts

    @njit(cache=True)
    def _before(k1, i1, k2, i2):
        """Order of a stable sort by key (NaN last): by key, then by position."""
        if k1 != k1:
            return k2 != k2 and i1 < i2
        if k2 != k2:
            return True
        return k1 < k2 or (k1 == k2 and i1 < i2)

    @njit(cache=True)
    def _select(key, pos, rank):
        """Reorder ``key``/``pos`` in place so that element ``rank`` is where a stable sort
        by key would put it (quickselect; the pairs are distinct, so it is unique)."""
        lo = 0
        hi = key.shape[0] - 1
        while lo < hi:
            mid = (lo + hi) // 2
            key[mid], key[hi] = key[hi], key[mid]
            pos[mid], pos[hi] = pos[hi], pos[mid]
            pk = key[hi]
            pp = pos[hi]
            store = lo
            for i in range(lo, hi):
                if _before(key[i], pos[i], pk, pp):
                    key[i], key[store] = key[store], key[i]
                    pos[i], pos[store] = pos[store], pos[i]
                    store += 1
            key[store], key[hi] = key[hi], key[store]
            pos[store], pos[hi] = pos[hi], pos[store]
            if store == rank:
                return
            if store < rank:
                lo = store + 1
            else:
                hi = store - 1

    @njit(cache=True)
    def group_quantile_kernel(values, key, grp, n, q):
        """Within each group, the value at rank ``floor(q (count - 1))`` in a stable sort
        by ``key`` (the ordering of ``_ragged.group_quantile``)."""
        out = np.full(n, np.nan)
        order, first, counts = _group_order(grp, n)
        k = np.empty(grp.shape[0])
        for i in range(grp.shape[0]):
            k[i] = key[order[i]]
        for g in range(n):
            m = counts[g]
            if m == 0:
                continue
            f = first[g]
            rank = int(np.floor(q * (m - 1)))
            _select(k[f:f + m], order[f:f + m], rank)
            out[g] = values[order[f + rank]]
        return out

    @njit(parallel=True, cache=True)
    def range_quantile_kernel(K, row, pf, pl, q):
        """The ``q`` quantile of ``|K[row[g]]|`` over stations ``pf[g]..pl[g]`` of each
        range, ranked as ``group_quantile_kernel`` ranks the expanded ranges (the sort key
        scaled by the range of all values, NaN taken as the top)."""
        n = pf.shape[0]
        lo = np.inf
        hi = -np.inf
        for g in range(n):
            for i in range(pf[g], pl[g] + 1):
                v = abs(K[row[g], i])
                if v == v:
                    lo = min(lo, v)
                    hi = max(hi, v)
        if lo > hi:
            lo = np.nan
            hi = np.nan
        span = hi - lo if hi > lo else 1.0
        out = np.full(n, np.nan)
        for g in prange(n):
            m = pl[g] - pf[g] + 1
            if m <= 0:
                continue
            key = np.empty(m)
            pos = np.arange(m)
            for t in range(m):
                v = abs(K[row[g], pf[g] + t])
                w = hi if v != v else min(v, 1.7976931348623157e308)
                key[t] = g + 0.999 * (w - lo) / span
            rank = int(np.floor(q * (m - 1)))
            _select(key, pos, rank)
            out[g] = abs(K[row[g], pf[g] + pos[rank]])
        return out

    @njit(parallel=True, cache=True)
    def core_kernel(K, scale, pf, pl, q, share):
        """First and last station of each piece's core (see ``circular._core``): the run
        of stations with ``|K[scale]|`` at or above ``share`` times the piece's ``q``
        quantile with the largest sum, the later run on ties."""
        n = pf.shape[0]
        level = range_quantile_kernel(K, scale, pf, pl, q)
        first = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
        last = np.full(n, -1, dtype=np.int64)
        for g in prange(n):
            bar = share * level[g]
            best = 0.0
            run_first = 0
            run_sum = 0.0
            for i in range(pf[g], pl[g] + 1):
                ak = abs(K[scale[g], i])
                hit = ak >= bar
                if i == pf[g] or hit != (abs(K[scale[g], i - 1]) >= bar):
                    run_first = i
                    run_sum = 0.0
                run_sum += ak if hit else 0.0
                end = i == pl[g] or (abs(K[scale[g], i + 1]) >= bar) != hit
                if end and (last[g] < 0 or run_sum >= best):
                    best = run_sum
                    first[g] = run_first
                    last[g] = i
        return first, last

    @njit(cache=True)
    def group_argmax_kernel(values, grp, n):
        """Last position of each group in a lexsort by (group, value): the largest value,
        NaN above all, the later index on ties; -1 for an empty group."""
        out = np.full(n, -1, dtype=np.int64)
        nan = np.zeros(n, dtype=np.bool_)
        for i in range(grp.shape[0]):
            g = grp[i]
            v = values[i]
            b = out[g]
            if v != v:
                out[g] = i
                nan[g] = True
            elif b < 0 or (not nan[g] and v >= values[b]):
                out[g] = i
        return out

    @njit(cache=True)
    def running_turn_kernel(k, s, chain):
        """``[0, cumsum(k * step)]`` with the step zero across chain ends (see
        ``circular.cumulative_turn``)."""
        n = s.shape[0]
        out = np.empty(n + 1)
        out[0] = 0.0
        acc = 0.0
        for i in range(n):
            step = 0.0
            if i + 1 < n and chain[i + 1] == chain[i]:
                step = s[i + 1] - s[i]
            acc = acc + k[i] * step
            out[i + 1] = acc
        return out

    @njit(cache=True)
    def label_runs_kernel(kappa, chain, kappa_off):
        """Maximal runs of one label (sign of ``kappa`` where ``|kappa| >= kappa_off``,
        else 0) within a chain: ``starts, ends`` (inclusive) and the label (int8)."""
        n = kappa.shape[0]
        starts = np.empty(n, dtype=np.int64)
        ends = np.empty(n, dtype=np.int64)
        lab = np.empty(n, dtype=np.int8)
        r = -1
        prev = 0
        for i in range(n):
            k = kappa[i]
            lb = 0
            if abs(k) >= kappa_off:
                lb = 1 if k > 0 else (-1 if k < 0 else 0)
            if i == 0 or lb != prev or chain[i] != chain[i - 1]:
                r += 1
                starts[r] = i
                lab[r] = lb
            ends[r] = i
            prev = lb
        return starts[:r + 1].copy(), ends[:r + 1].copy(), lab[:r + 1].copy()

    @njit(cache=True)
    def range_max_abs_kernel(values, starts, ends):
        """Largest ``|values|`` over each inclusive range (NaN if one is NaN)."""
        out = np.full(starts.shape[0], -np.inf)
        for g in range(starts.shape[0]):
            m = out[g]
            for i in range(starts[g], ends[g] + 1):
                v = abs(values[i])
                if v > m or v != v:
                    m = v
            out[g] = m
        return out

    @njit(cache=True)
    def moment_sums_kernel(x, y, group, n_groups):
        """Counts, coordinate sums, and sums of ``XX, YY, XY, XZ, YZ, ZZ`` of the points
        centred on their group's mean ``sum / count`` (``Z = X^2 + Y^2``), in index order."""
        cnt = np.zeros(n_groups)
        sx = np.zeros(n_groups)
        sy = np.zeros(n_groups)
        for i in range(group.shape[0]):
            g = group[i]
            cnt[g] += 1.0
            sx[g] += x[i]
            sy[g] += y[i]
        mx = np.full(n_groups, np.nan)
        my = np.full(n_groups, np.nan)
        for g in range(n_groups):
            if cnt[g] > 0:
                mx[g] = sx[g] / cnt[g]
                my[g] = sy[g] / cnt[g]
        m = np.zeros((6, n_groups))
        for i in range(group.shape[0]):
            g = group[i]
            X = x[i] - mx[g]
            Y = y[i] - my[g]
            Z = X * X + Y * Y
            m[0, g] += X * X
            m[1, g] += Y * Y
            m[2, g] += X * Y
            m[3, g] += X * Z
            m[4, g] += Y * Z
            m[5, g] += Z * Z
        return cnt, sx, sy, m

    @njit(cache=True)
    def normal_kernel(X, Y, group, active, a, b, r, n_groups):
        """Gauss-Newton normal equations ``J^T J``, ``J^T d`` of the circle distance over the
        points of active groups (see ``circlefit._normal``), and the sum of squared
        distances (see ``cost_kernel``)."""
        jtj = np.zeros((n_groups, 3, 3))
        jtd = np.zeros((n_groups, 3))
        cost = np.zeros(n_groups)
        for i in range(group.shape[0]):
            g = group[i]
            if not active[g]:
                continue
            u = X[i] - a[g]
            v = Y[i] - b[g]
            rho = np.hypot(u, v)
            dc = rho - r[g]
            cost[g] += dc * dc
            if not rho > 0:
                rho = 1e-12
            ju = -u / rho
            jv = -v / rho
            jw = -1.0
            d = rho - r[g]
            jtj[g, 0, 0] += ju * ju
            jtj[g, 0, 1] += ju * jv
            jtj[g, 0, 2] += ju * jw
            jtj[g, 1, 1] += jv * jv
            jtj[g, 1, 2] += jv * jw
            jtj[g, 2, 2] += jw * jw
            jtd[g, 0] += ju * d
            jtd[g, 1] += jv * d
            jtd[g, 2] += jw * d
        for g in range(n_groups):
            jtj[g, 1, 0] = jtj[g, 0, 1]
            jtj[g, 2, 0] = jtj[g, 0, 2]
            jtj[g, 2, 1] = jtj[g, 1, 2]
        return jtj, jtd, cost

    @njit(cache=True)
    def circle_gap_kernel(coords, idx, grp, cx, cy, r):
        """``|distance from the centre - radius|`` of vertices ``idx`` from their group's
        circle (see ``circlefit.circle_gaps``)."""
        out = np.empty(idx.shape[0])
        for t in range(idx.shape[0]):
            g = grp[t]
            i = idx[t]
            out[t] = abs(np.hypot(coords[i, 0] - cx[g], coords[i, 1] - cy[g]) - r[g])
        return out

    @njit(cache=True)
    def wkb_envelope_kernel(data, offsets, valid, out, done):
        """Envelopes (minx, maxx, miny, maxy) of little-endian WKB LineStrings and
        MultiLineStrings into ``out``; ``done`` marks the rows read (see
        ``io.rtree.wkb_envelopes``, whose fallback is shapely)."""
        b4 = np.empty(4, np.uint8)
        scratch = np.empty(1 << 16, np.uint8)
        for i in range(offsets.shape[0] - 1):
            if not valid[i]:
                done[i] = True
                continue
            p = offsets[i]
            end = offsets[i + 1]
            if end - p < 9 or data[p] != 1:
                continue
            for k in range(4):
                b4[k] = data[p + 1 + k]
            kind = b4.view(np.uint32)[0]
            base = kind % 1000
            dims = 2 + (1 if (kind // 1000) in (1, 2) else 0) + (2 if kind // 1000 == 3 else 0)
            if kind > 3999 or base not in (2, 5):
                continue
            if base == 2:
                parts = 1
                q = p
            else:
                for k in range(4):
                    b4[k] = data[p + 5 + k]
                parts = b4.view(np.uint32)[0]
                q = p + 9
            x0 = np.inf
            x1 = -np.inf
            y0 = np.inf
            y1 = -np.inf
            ok = True
            for part in range(parts):
                if base == 5:  # each part has its own header: byte order and type
                    if q + 9 > end or data[q] != 1:
                        ok = False
                        break
                    for k in range(4):
                        b4[k] = data[q + 1 + k]
                    if b4.view(np.uint32)[0] != kind - 3:
                        ok = False
                        break
                    r = q + 5
                else:
                    r = p + 5
                for k in range(4):
                    b4[k] = data[r + k]
                m = b4.view(np.uint32)[0]
                r += 4
                size = 8 * dims * m
                if r + size > end:
                    ok = False
                    break
                if size > scratch.shape[0]:
                    scratch = np.empty(2 * size, np.uint8)
                scratch[:size] = data[r:r + size]  # aligned copy of the points
                values = scratch[:size].view(np.float64)
                for j in range(m):
                    x = values[j * dims]
                    y = values[j * dims + 1]
                    x0 = min(x0, x)
                    x1 = max(x1, x)
                    y0 = min(y0, y)
                    y1 = max(y1, y)
                q = r + size
            if not ok:
                continue
            if x0 <= x1:
                out[i, 0] = x0
                out[i, 1] = x1
                out[i, 2] = y0
                out[i, 3] = y1
            done[i] = True


    @njit(cache=True)
    def tangent_end_kernel(coords, end, step, k, cx, cy, r, sigma):
        """Best number of end vertices to move from the circle to a tangent line, and the
        drop in the sum of squares in noise variances (see ``circular._tangent_end_gain``)."""
        n = end.shape[0]
        best_b = np.zeros(n, dtype=np.int64)
        best_gain = np.full(n, -np.inf)
        for p in range(n):
            e = end[p]
            for b in range(1, k[p] + 1):
                ia = e + step * (b - 1)
                ib = e + step * b
                ux = 0.5 * (coords[ia, 0] + coords[ib, 0]) - cx[p]
                uy = 0.5 * (coords[ia, 1] + coords[ib, 1]) - cy[p]
                norm = np.hypot(ux, uy)
                ux = ux / norm
                uy = uy / norm
                acc = 0.0
                for v in range(b):
                    i = e + step * v
                    px = coords[i, 0] - cx[p]
                    py = coords[i, 1] - cy[p]
                    d_line = px * ux + py * uy - r[p]
                    d_circ = np.hypot(px, py) - r[p]
                    acc += d_circ ** 2 - d_line ** 2
                gain = acc / sigma[p] ** 2
                if gain >= best_gain[p]:
                    best_gain[p] = gain
                    best_b[p] = b
        return best_b, best_gain

    @njit(cache=True)
    def cost_kernel(X, Y, group, active, a, b, r, n_groups):
        """Sum of squared distances from the circles over the points of active groups."""
        out = np.zeros(n_groups)
        for i in range(group.shape[0]):
            g = group[i]
            if not active[g]:
                continue
            d = np.hypot(X[i] - a[g], Y[i] - b[g]) - r[g]
            out[g] += d * d
        return out


    @njit(cache=True)
    def _kasa_prefix(coords, start, m, cx, cy, r, acc, buf):
        """``buf[:, k]``: the running moment sums (rows as ``compound._best_split``) after
        the group's first ``k`` vertices, continued from ``acc`` in index order as
        ``np.cumsum`` over all groups gives them; ``acc`` ends past the group."""
        for q in range(10):
            buf[q, 0] = acc[q]
        mom = np.empty(10)
        for k in range(m):
            u = (coords[start + k, 0] - cx) / r
            v = (coords[start + k, 1] - cy) / r
            z = u * u + v * v
            mom[0] = 1.0
            mom[1] = u
            mom[2] = v
            mom[3] = z
            mom[4] = u * u
            mom[5] = u * v
            mom[6] = v * v
            mom[7] = u * z
            mom[8] = v * z
            mom[9] = z * z
            for q in range(10):
                acc[q] += mom[q]
                buf[q, k + 1] = acc[q]

    @njit(cache=True)
    def _kasa_bound(mv, a, lu, b, y, x):
        """Kasa residual of one moment vector by a 3x3 LU with partial pivoting, and a
        bound on its difference from LAPACK's: ``(rss, bound)``, bound infinite where
        the system is too ill-conditioned to tell. ``a, lu`` (3x3) and ``b, y, x`` (3)
        are work arrays."""
        a[0, 0], a[0, 1], a[0, 2] = mv[4], mv[5], mv[1]
        a[1, 0], a[1, 1], a[1, 2] = mv[5], mv[6], mv[2]
        a[2, 0], a[2, 1], a[2, 2] = mv[1], mv[2], mv[0]
        b[0], b[1], b[2] = mv[7], mv[8], mv[3]
        amax = 0.0
        for i in range(3):
            y[i] = b[i]
            for j in range(3):
                lu[i, j] = a[i, j]
                amax = max(amax, abs(a[i, j]))
        for j in range(3):
            p = j
            for i in range(j + 1, 3):
                if abs(lu[i, j]) > abs(lu[p, j]):
                    p = i
            for k in range(3):
                lu[j, k], lu[p, k] = lu[p, k], lu[j, k]
            y[j], y[p] = y[p], y[j]
            piv = lu[j, j]
            if not abs(piv) > 1e-12 * amax:
                return np.nan, np.inf
            for i in range(j + 1, 3):
                f = lu[i, j] / piv
                for k in range(j + 1, 3):
                    lu[i, k] -= f * lu[j, k]
                y[i] -= f * y[j]
        for i in range(2, -1, -1):
            acc = y[i]
            for k in range(i + 1, 3):
                acc -= lu[i, k] * x[k]
            x[i] = acc / lu[i, i]
        rss = mv[9] - (b[0] * x[0] + b[1] * x[1] + b[2] * x[2])
        # both solutions are backward stable, (A + E) x = b with |E| <= ~9 eps |L||U|:
        # their residuals differ by about eps (|szz| + |b||x| + |x|'|A||x|) (Higham,
        # Accuracy and Stability of Numerical Algorithms, 2nd ed., 2002, sec. 9.3);
        # 256 eps leaves a wide margin
        mag = abs(mv[9])
        for i in range(3):
            mag += abs(b[i] * x[i])
            for j in range(3):
                mag += abs(x[i]) * abs(a[i, j]) * abs(x[j])
        if not np.isfinite(rss) or not np.isfinite(mag):
            return np.nan, np.inf
        return rss, 256.0 * 2.220446049250313e-16 * mag

    @njit(parallel=True, cache=True)
    def best_split_kernel(coords, i0, count, cx, cy, r, todo, min_sub):
        """Split position of each group (see ``compound._best_split``) where the
        approximate totals decide it beyond their error bounds: ``best`` (offset within the
        group, -1 where none or undecided) and, for undecided groups, the positions that
        may be the best with their left and right moment sums (``grp, k, left, right``)
        for the exact numpy evaluation."""
        n = i0.shape[0]
        # the running sums at each group's start, in index order (one sequential pass)
        width = 1
        for g in range(n):
            width = max(width, count[g] + 1)
        buf = np.empty((10, width))
        acc_at = np.zeros((n, 10))
        acc = np.zeros(10)
        for g in range(n):
            acc_at[g] = acc
            _kasa_prefix(coords, i0[g], count[g], cx[g], cy[g], r[g], acc, buf)
        offs = np.zeros(n + 1, dtype=np.int64)
        for g in range(n):
            offs[g + 1] = offs[g] + count[g] + 1
        best = np.full(n, -1, dtype=np.int64)
        hits = np.zeros(n, dtype=np.int64)
        maybe = np.zeros(offs[n], dtype=np.bool_)
        for g in prange(n):
            m = count[g]
            if not todo[g] or m < 2 * min_sub:
                continue
            buf = np.empty((10, m + 1))
            _kasa_prefix(coords, i0[g], m, cx[g], cy[g], r[g], acc_at[g].copy(), buf)
            tot = np.empty(m + 1)
            err = np.empty(m + 1)
            lv = np.empty(10)
            rv = np.empty(10)
            a = np.empty((3, 3))
            lu = np.empty((3, 3))
            b = np.empty(3)
            y = np.empty(3)
            x = np.empty(3)
            upper = np.inf
            sure = True
            for k in range(min_sub, m - min_sub + 1):
                for q in range(10):
                    lv[q] = buf[q, k] - buf[q, 0]
                    rv[q] = buf[q, m] - buf[q, k]
                r1, e1 = _kasa_bound(lv, a, lu, b, y, x)
                r2, e2 = _kasa_bound(rv, a, lu, b, y, x)
                tot[k] = r1 + r2
                err[k] = e1 + e2 + 4.0 * 2.220446049250313e-16 * abs(r1 + r2)
                if not np.isfinite(err[k]):
                    sure = False
                upper = min(upper, tot[k] + err[k])
            for k in range(min_sub, m - min_sub + 1):
                if not sure or tot[k] - err[k] <= upper:
                    maybe[offs[g] + k] = True
                    hits[g] += 1
                    best[g] = k
            if hits[g] > 1:
                best[g] = -1
        n_maybe = 0
        for g in range(n):
            if hits[g] > 1:
                n_maybe += hits[g]
        grp = np.empty(n_maybe, dtype=np.int64)
        pos = np.empty(n_maybe, dtype=np.int64)
        left = np.empty((10, n_maybe))
        right = np.empty((10, n_maybe))
        t = 0
        for g in range(n):
            if hits[g] <= 1:
                continue
            m = count[g]
            _kasa_prefix(coords, i0[g], m, cx[g], cy[g], r[g], acc_at[g].copy(), buf)
            for k in range(min_sub, m - min_sub + 1):
                if maybe[offs[g] + k]:
                    grp[t] = g
                    pos[t] = k
                    for q in range(10):
                        left[q, t] = buf[q, k] - buf[q, 0]
                        right[q, t] = buf[q, m] - buf[q, k]
                    t += 1
        return best, grp, pos, left, right

def chord_kappa(x, y, s, chain, st_off, half, at=None, out=None):
    """Compiled chord curvature at stations ``at`` (all where None; see
    ``resample.chord_curvature``);
    with ``out`` (one value per station) written to ``out[at]`` instead."""
    every = at is None  # all stations: no index array of their own
    at = np.zeros(0, dtype=np.int64) if every else np.asarray(at, dtype=np.int64)
    scatter = out is not None
    if not scatter:
        out = np.empty(len(s) if every else len(at))
    _chord_kappa(np.ascontiguousarray(x), np.ascontiguousarray(y), s,
                 chain.astype(np.int64, copy=False), st_off.astype(np.int64, copy=False),
                 np.asarray(half, dtype=np.int64), at, out, scatter, every)
    return out
