"""Compiled kernels behind :func:`measures.rqa` (private).

The recurrence matrix is never stored. The strict lower triangle
(``i - j >= max(theiler, 1)``) is cut into vertical strips of columns with
equal area; each strip is scanned row by row, so every pairwise distance is
computed once. While scanning, a strip keeps the current run length of each
of its columns (vertical lines of the lower triangle), of each diagonal
``k = i - j`` and of the current row (a row of the lower triangle is a column
of the upper triangle, by symmetry). Runs that touch a strip's left or right
edge are stored as prefix/suffix lengths and stitched across strips
afterwards, so the result does not depend on the number of strips.

Each row of a strip is done in three steps: (1) distances of the row
segment, one contiguous pass per coordinate, the last pass comparing with
the threshold and storing one hit byte per cell; (2) a branch-free,
vectorised pass that updates the column and diagonal run lengths of every
cell and flags the cells that close a column, diagonal or row run; (3) a
sparse pass that gathers the flags of 64 cells into bit masks and visits
only the set bits to update the histograms. Step (1) alone is the
count-only floor (:func:`count_recurrences` uses the same code).

Memory is O(n_strips * N); strips run in parallel (``prange``).

Distances: for ``metric_code == 0`` the squared Euclidean distance, summed
over coordinates in index order (``s = d0*d0; s += d1*d1; ...``), is compared
with a squared threshold; for ``metric_code == 1`` the maximum absolute
coordinate difference is compared with the threshold. The dense reference
uses the same per-pair arithmetic, so both agree bit for bit at ties.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange
from numba.cpython.unsafe.numbers import trailing_zeros

__all__: list[str] = []

_GATHER = np.uint64(0x0102040810204080)
_TOP = np.uint64(56)
_ONE = np.uint64(1)


def strip_edges(n: int, first_offset: int, n_strips: int) -> np.ndarray:
    """Column boundaries giving strips of (nearly) equal lower-triangle area.

    The area to the right of column c is about (n - first_offset - c)**2 / 2,
    so equal shares put boundary s at ``m * (1 - sqrt(1 - s / S))`` with
    ``m = n - first_offset`` columns that hold any admissible cell.
    """
    m = max(n - first_offset, 0)
    s = np.arange(n_strips + 1, dtype=np.float64) / n_strips
    edges = np.floor(m * (1.0 - np.sqrt(1.0 - s))).astype(np.int64)
    edges[-1] = m
    return np.maximum.accumulate(edges)


@njit(cache=True, inline="always")
def _row_distances(xt, i, c0, ncols, metric_code, buf):
    # One pass per coordinate keeps the inner loop contiguous (vectorisable)
    # while each pair still sums its squared differences in index order.
    m = xt.shape[0]
    acc = buf[:ncols]
    row = xt[0, c0 : c0 + ncols]
    v = xt[0, i]
    if metric_code == 0:
        for jj in range(ncols):
            d = row[jj] - v
            acc[jj] = d * d
        for c in range(1, m):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = row[jj] - v
                acc[jj] += d * d
    else:
        for jj in range(ncols):
            acc[jj] = abs(row[jj] - v)
        for c in range(1, m):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = abs(row[jj] - v)
                b = acc[jj]
                acc[jj] = d if d > b else b


@njit(cache=True, inline="always")
def _row_hits(xt, i, c0, ncols, metric_code, thr, buf, hit):
    # hit[1 + jj] = 1 when the pair (i, c0 + jj) recurs (hit[0] is left as
    # is). Same arithmetic as _row_distances, but the last coordinate's term
    # is added (or maxed) and compared in the same pass. Slices indexed by
    # the loop counter keep the loads contiguous (vector loads, no gathers).
    m = xt.shape[0]
    last = xt[m - 1, c0 : c0 + ncols]
    u = xt[m - 1, i]
    out = hit[1 : ncols + 1]
    if m == 1:
        if metric_code == 0:
            for jj in range(ncols):
                d = last[jj] - u
                out[jj] = d * d <= thr
        else:
            for jj in range(ncols):
                out[jj] = abs(last[jj] - u) <= thr
        return
    acc = buf[:ncols]
    row = xt[0, c0 : c0 + ncols]
    v = xt[0, i]
    if metric_code == 0:
        for jj in range(ncols):
            d = row[jj] - v
            acc[jj] = d * d
        for c in range(1, m - 1):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = row[jj] - v
                acc[jj] += d * d
        for jj in range(ncols):
            d = last[jj] - u
            out[jj] = acc[jj] + d * d <= thr
    else:
        for jj in range(ncols):
            acc[jj] = abs(row[jj] - v)
        for c in range(1, m - 1):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = abs(row[jj] - v)
                b = acc[jj]
                acc[jj] = d if d > b else b
        for jj in range(ncols):
            d = abs(last[jj] - u)
            b = acc[jj]
            out[jj] = (d if d > b else b) <= thr


@njit(cache=True)
def _scan_strip(xt, thr, metric_code, theiler, c0, c1, s, hd, hv, rpre, rsuf, dpre, dsuf, coltop):
    n = xt.shape[1]
    we = max(theiler, 1)
    width = c1 - c0
    if width <= 0 or c0 + we >= n:
        return
    buf = np.empty(width, dtype=np.float64)
    # hit[jj + 1] is cell (i, c0 + jj); hit[0] = 0 stops backward row scans.
    hit = np.zeros(width + 1, dtype=np.uint8)
    # Run lengths ending in the previous row (old) and in this row (new):
    # col[jj] down column jj, dia[jj] along the diagonal through column
    # jj - 1 (so the diagonal entering column jj reads dia_old[jj]).
    col_old = np.zeros(width, dtype=np.int32)
    col_new = np.zeros(width, dtype=np.int32)
    dia_old = np.zeros(width + 1, dtype=np.int32)
    dia_new = np.zeros(width + 1, dtype=np.int32)
    # Line-end flags, one byte per cell, read eight at a time: a column
    # (end_c), diagonal (end_d) or row (end_r) run stops before this cell.
    n_words = (width + 7) // 8
    end_c = np.zeros(8 * n_words, dtype=np.uint8)
    end_d = np.zeros(8 * n_words, dtype=np.uint8)
    end_r = np.zeros(8 * n_words, dtype=np.uint8)
    words_c = end_c.view(np.uint64)
    words_d = end_d.view(np.uint64)
    words_r = end_r.view(np.uint64)
    join_top = theiler == 0
    ncols = 0
    for i in range(c0 + we, n):
        ncols = min(c1, i - we + 1) - c0
        _row_hits(xt, i, c0, ncols, metric_code, thr, buf, hit)
        # Branch-free run update of every cell (vectorised); the few cells
        # that close a line are flagged and handled below.
        for jj in range(ncols):
            h = hit[jj + 1]
            c = col_old[jj]
            d = dia_old[jj]
            col_new[jj] = (c + 1) * h
            dia_new[jj + 1] = (d + 1) * h
            miss = h == 0
            end_c[jj] = (c != 0) & miss
            end_d[jj] = (d != 0) & miss
            end_r[jj] = (hit[jj] != 0) & miss
        for g in range(0, (ncols + 7) // 8, 8):
            # Gather the 0/1 flag bytes of 64 cells into bit masks (the
            # multiplier moves byte b's low bit to bit 56 + b) and visit only
            # the set bits, one kind of line at a time: no per-cell branch.
            mc = np.uint64(0)
            md = np.uint64(0)
            mr = np.uint64(0)
            for w in range(g, min(g + 8, n_words)):
                sh = np.uint64(8 * (w - g))
                mc |= ((words_c[w] * _GATHER) >> _TOP) << sh
                md |= ((words_d[w] * _GATHER) >> _TOP) << sh
                mr |= ((words_r[w] * _GATHER) >> _TOP) << sh
            if (mc | md | mr) == 0:
                continue
            base = 8 * g
            while mc != 0:
                jj = base + np.int64(trailing_zeros(mc))
                mc &= mc - _ONE
                c = col_old[jj]
                if join_top and i - c == c0 + jj + we:
                    # A column's first run starts at row j + we; with
                    # theiler = 0 it continues through the line of identity.
                    coltop[c0 + jj] = c
                else:
                    hv[s, c] += 1
            while md != 0:
                jj = base + np.int64(trailing_zeros(md))
                md &= md - _ONE
                d = dia_old[jj]
                if d == jj:
                    dpre[s, i - c0 - jj] = d
                else:
                    hd[s, d] += 1
            while mr != 0:
                jj = base + np.int64(trailing_zeros(mr))
                mr &= mr - _ONE
                r = 1
                while hit[jj - r]:
                    r += 1
                if r == jj:
                    rpre[s, i] = r
                else:
                    hv[s, r] += 1
        r = 0
        while hit[ncols - r]:
            r += 1
        if r == ncols:
            rpre[s, i] = r
        rsuf[s, i] = r
        if ncols == width:
            # The diagonal through (i, c1 - 1) leaves the strip here.
            d = dia_new[width]
            k = i - (c1 - 1)
            if d == width:
                dpre[s, k] = d
            dsuf[s, k] = d
        col_old, col_new = col_new, col_old
        dia_old, dia_new = dia_new, dia_old
    for jj in range(width):
        c = col_old[jj]
        if c > 0:
            if join_top and c == n - (c0 + jj) - we:
                coltop[c0 + jj] = c
            else:
                hv[s, c] += 1
    # Diagonals ending on the last row (the one through column c1 - 1, if
    # any, was stored above with the same values).
    for jj in range(ncols):
        d = dia_old[jj + 1]
        k = n - 1 - c0 - jj
        if d == jj + 1:
            dpre[s, k] = d
        dsuf[s, k] = d


@njit(cache=True)
def _stitch(edges, pre, suf, last, hist, tail):
    """Join the prefix/suffix runs of consecutive strips along each line.

    Line q (a row or a diagonal of the lower triangle) covers columns
    [0, last[q]). A strip whose segment is all ones passes its length on;
    otherwise the carried run plus its prefix is one finished line, and its
    suffix is carried on. When ``tail`` is non-empty the run touching the
    line's end is returned there instead of counted (theiler = 0 joins it
    with the column below the line of identity).
    """
    n_strips = edges.shape[0] - 1
    keep_tail = tail.shape[0] > 0
    for q in range(pre.shape[1]):
        end = last[q]
        carry = 0
        for s in range(n_strips):
            c0 = edges[s]
            if c0 >= end:
                break
            seglen = min(edges[s + 1], end) - c0
            p = pre[s, q]
            if p == seglen:
                carry += seglen
            else:
                t = carry + p
                if t > 0:
                    hist[t] += 1
                carry = suf[s, q]
        if keep_tail:
            tail[q] = carry
        elif carry > 0:
            hist[carry] += 1


@njit(cache=True, parallel=True)
def _scan_all(xt, thr, metric_code, theiler, edges, hd, hv, rpre, rsuf, dpre, dsuf, coltop):
    for s in prange(edges.shape[0] - 1):
        _scan_strip(
            xt, thr, metric_code, theiler, edges[s], edges[s + 1], s, hd, hv,
            rpre, rsuf, dpre, dsuf, coltop,
        )  # fmt: skip


def line_histograms(
    xt: np.ndarray, thr: float, metric_code: int, theiler: int, n_strips: int
) -> tuple[np.ndarray, np.ndarray]:
    """Histograms of diagonal and vertical line lengths of the whole matrix.

    Parameters
    ----------
    xt : ndarray, shape (m, N), C-contiguous float64
        Points, coordinates first.
    thr : float
        Squared threshold (Euclidean) or threshold (maximum norm).

    Returns
    -------
    diag, vert : ndarray of int64, shape (N + 1,)
        ``diag[l]`` is the number of diagonal lines of length l in the whole
        matrix (both triangles, plus the line of identity when theiler = 0);
        ``vert[l]`` likewise for vertical lines.
    """
    n = xt.shape[1]
    we = max(theiler, 1)
    edges = strip_edges(n, we, n_strips)
    ns = edges.shape[0] - 1
    hd = np.zeros((ns, n + 1), dtype=np.int64)
    hv = np.zeros((ns, n + 1), dtype=np.int64)
    rpre = np.zeros((ns, n), dtype=np.int64)
    rsuf = np.zeros((ns, n), dtype=np.int64)
    dpre = np.zeros((ns, n), dtype=np.int64)
    dsuf = np.zeros((ns, n), dtype=np.int64)
    coltop = np.zeros(n, dtype=np.int64)
    if n > we:
        _scan_all(xt, thr, metric_code, theiler, edges, hd, hv, rpre, rsuf, dpre, dsuf, coltop)
    diag_lower = hd.sum(axis=0)
    vert = hv.sum(axis=0)
    del hd, hv
    idx = np.arange(n, dtype=np.int64)
    # Row i of the lower triangle covers columns [0, i - we + 1); diagonal k
    # covers columns [0, n - k) (only k >= we carry cells).
    row_end = np.maximum(idx - we + 1, 0)
    diag_end = np.where(idx >= we, n - idx, 0)
    row_tail = np.zeros(n if theiler == 0 else 0, dtype=np.int64)
    _stitch(edges, rpre, rsuf, row_end, vert, row_tail)
    _stitch(edges, dpre, dsuf, diag_end, diag_lower, np.zeros(0, dtype=np.int64))
    diag = 2 * diag_lower
    if theiler == 0:
        diag[n] += 1
        # Column j of the whole matrix: upper part (= row j of the lower
        # triangle), the cell (j, j), then the lower part.
        np.add.at(vert, row_tail + 1 + coltop, 1)
    return diag, vert


@njit(cache=True, parallel=True)
def _count_all(xt, thr, metric_code, theiler, edges, counts):
    n = xt.shape[1]
    we = max(theiler, 1)
    for s in prange(edges.shape[0] - 1):
        c0 = edges[s]
        c1 = edges[s + 1]
        buf = np.empty(max(c1 - c0, 1), dtype=np.float64)
        hit = np.zeros(max(c1 - c0, 1) + 1, dtype=np.uint8)
        total = 0
        for i in range(c0 + we, n):
            ncols = min(c1, i - we + 1) - c0
            if ncols <= 0:
                continue
            _row_hits(xt, i, c0, ncols, metric_code, thr, buf, hit)
            row_total = 0
            for jj in range(ncols):
                row_total += hit[jj + 1]
            total += row_total
        counts[s] = total


def count_recurrences(xt: np.ndarray, thr: float, metric_code: int, theiler: int) -> int:
    """Number of recurrent pairs in the strict lower triangle (the compute floor)."""
    n = xt.shape[1]
    edges = strip_edges(n, max(theiler, 1), 16)
    counts = np.zeros(edges.shape[0] - 1, dtype=np.int64)
    _count_all(xt, thr, metric_code, theiler, edges, counts)
    return int(counts.sum())


@njit(cache=True, parallel=True)
def pair_distances(xt, rows, cols, metric_code):
    """Distances (squared for Euclidean) of the given pairs, same arithmetic."""
    m = xt.shape[0]
    out = np.empty(rows.shape[0], dtype=np.float64)
    for p in prange(rows.shape[0]):
        i = rows[p]
        j = cols[p]
        if metric_code == 0:
            d = xt[0, j] - xt[0, i]
            acc = d * d
            for c in range(1, m):
                d = xt[c, j] - xt[c, i]
                acc += d * d
        else:
            acc = abs(xt[0, j] - xt[0, i])
            for c in range(1, m):
                d = abs(xt[c, j] - xt[c, i])
                if d > acc:
                    acc = d
        out[p] = acc
    return out


@njit(cache=True, parallel=True)
def _bracket_all(xt, lo, hi, metric_code, theiler, edges, starts, caps, below, filled, out):
    n = xt.shape[1]
    we = max(theiler, 1)
    for s in prange(edges.shape[0] - 1):
        c0 = edges[s]
        c1 = edges[s + 1]
        buf = np.empty(max(c1 - c0, 1), dtype=np.float64)
        nb = 0
        nf = 0
        base = starts[s]
        cap = caps[s]
        for i in range(c0 + we, n):
            ncols = min(c1, i - we + 1) - c0
            if ncols <= 0:
                continue
            _row_distances(xt, i, c0, ncols, metric_code, buf)
            row_below = 0
            for jj in range(ncols):
                row_below += buf[jj] <= lo
            nb += row_below
            for jj in range(ncols):
                v = buf[jj]
                if v <= hi and v > lo:
                    if nf < cap:
                        out[base + nf] = v
                    nf += 1
        below[s] = nb
        filled[s] = nf


def bracket_pass(
    xt: np.ndarray, lo: float, hi: float, metric_code: int, theiler: int, capacity: int
) -> tuple[int, np.ndarray | None]:
    """Count lower-triangle distances <= lo and collect those in (lo, hi].

    Returns ``(n_below, candidates)``; candidates is None when a strip's
    buffer (share of ``capacity`` proportional to its area) overflowed.
    """
    n = xt.shape[1]
    we = max(theiler, 1)
    edges = strip_edges(n, we, 16)
    widths = np.diff(edges)
    area = widths * np.maximum(n - we - edges[:-1] - (widths - 1) / 2.0, 0.0)
    share = area / max(area.sum(), 1.0)
    caps = (np.ceil(share * capacity) + 64).astype(np.int64)
    starts = np.concatenate(([0], np.cumsum(caps)[:-1])).astype(np.int64)
    out = np.empty(int(caps.sum()), dtype=np.float64)
    below = np.zeros(len(caps), dtype=np.int64)
    filled = np.zeros(len(caps), dtype=np.int64)
    _bracket_all(xt, lo, hi, metric_code, theiler, edges, starts, caps, below, filled, out)
    if np.any(filled > caps):
        return int(below.sum()), None
    # Close the gaps between the strips' shares in place (no second copy).
    end = 0
    for a, f in zip(starts, filled, strict=True):
        out[end : end + f] = out[a : a + f]
        end += f
    return int(below.sum()), out[:end]


@njit(cache=True, parallel=True)
def _image_rows(xt, thr, metric_code, theiler, block, size, counts, admissible):
    n = xt.shape[1]
    for bi in prange(size):
        buf = np.empty(n, dtype=np.float64)
        for i in range(bi * block, min((bi + 1) * block, n)):
            ncols = i - theiler + 1
            if ncols <= 0:
                continue
            _row_distances(xt, i, 0, ncols, metric_code, buf)
            for j in range(ncols):
                bj = j // block
                admissible[bi, bj] += 1
                if buf[j] <= thr:
                    counts[bi, bj] += 1


def image_counts(
    xt: np.ndarray, thr: float, metric_code: int, theiler: int, block: int, size: int
) -> tuple[np.ndarray, np.ndarray]:
    """Recurrent and admissible cell counts per (block x block) tile, lower part + diagonal."""
    counts = np.zeros((size, size), dtype=np.int64)
    admissible = np.zeros((size, size), dtype=np.int64)
    _image_rows(xt, thr, metric_code, theiler, block, size, counts, admissible)
    return counts, admissible
