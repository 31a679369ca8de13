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

__all__: list[str] = []


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
    row = xt[0]
    v = row[i]
    if metric_code == 0:
        for jj in range(ncols):
            d = row[c0 + jj] - v
            buf[jj] = d * d
        for c in range(1, m):
            row = xt[c]
            v = row[i]
            for jj in range(ncols):
                d = row[c0 + jj] - v
                buf[jj] += d * d
    else:
        for jj in range(ncols):
            buf[jj] = abs(row[c0 + jj] - v)
        for c in range(1, m):
            row = xt[c]
            v = row[i]
            for jj in range(ncols):
                d = abs(row[c0 + jj] - v)
                if d > buf[jj]:
                    buf[jj] = d


@njit(cache=True)
def _scan_strip(xt, thr, metric_code, theiler, c0, c1, s, hd, hv, rpre, rsuf, dpre, dsuf, coltop):
    n = xt.shape[1]
    we = max(theiler, 1)
    width = c1 - c0
    if width <= 0:
        return
    colrun = np.zeros(width, dtype=np.int32)
    diagrun = np.zeros(n, dtype=np.int32)
    buf = np.empty(width, dtype=np.float64)
    # Hit masks of this row and the previous one, shifted by one so that
    # index jj holds column jj - 1 (column -1 is never a hit).
    cur = np.zeros(width + 1, dtype=np.uint8)
    prev = np.zeros(width + 1, dtype=np.uint8)
    n_words = (width + 7) // 8
    events = np.zeros(8 * n_words, dtype=np.uint8)
    words = events.view(np.uint64)
    join_top = theiler == 0
    for i in range(c0 + we, n):
        ncols = min(c1, i - we + 1) - c0
        _row_distances(xt, i, c0, ncols, metric_code, buf)
        for jj in range(ncols):
            cur[jj + 1] = buf[jj] <= thr
        # A cell needs work only if it recurs or closes a run: its column,
        # diagonal or row predecessor recurred. Whole 8-cell words without
        # such cells are skipped.
        for jj in range(ncols):
            events[jj] = cur[jj + 1] | cur[jj] | prev[jj + 1] | prev[jj]
        rowrun = 0
        for w in range((ncols + 7) // 8):
            if words[w] == 0:
                continue
            for jj in range(8 * w, min(8 * w + 8, ncols)):
                if events[jj] == 0:
                    continue
                k = i - c0 - jj
                if cur[jj + 1]:
                    colrun[jj] += 1
                    diagrun[k] += 1
                    rowrun += 1
                    continue
                c = colrun[jj]
                if c > 0:
                    # A column's first run starts at row j + we; with
                    # theiler = 0 it continues through the line of identity.
                    if join_top and i - c == c0 + jj + we:
                        coltop[c0 + jj] = c
                    else:
                        hv[s, c] += 1
                    colrun[jj] = 0
                d = diagrun[k]
                if d > 0:
                    if d == jj:
                        dpre[s, k] = d
                    else:
                        hd[s, d] += 1
                    diagrun[k] = 0
                if rowrun > 0:
                    if rowrun == jj:
                        rpre[s, i] = rowrun
                    else:
                        hv[s, rowrun] += 1
                    rowrun = 0
        cur, prev = prev, cur
        if rowrun == ncols:
            rpre[s, i] = rowrun
        rsuf[s, i] = rowrun
    for jj in range(width):
        c = colrun[jj]
        if c > 0:
            if join_top and c == n - (c0 + jj) - we:
                coltop[c0 + jj] = c
            else:
                hv[s, c] += 1
    for k in range(we, n - c0):
        d = diagrun[k]
        seglen = min(c1, n - k) - c0
        if d == seglen:
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
        total = 0
        for i in range(c0 + we, n):
            ncols = min(c1, i - we + 1) - c0
            if ncols <= 0:
                continue
            _row_distances(xt, i, c0, ncols, metric_code, buf)
            for jj in range(ncols):
                total += buf[jj] <= thr
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
            for jj in range(ncols):
                v = buf[jj]
                if v <= lo:
                    nb += 1
                elif v <= hi:
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
    parts = [out[a : a + f] for a, f in zip(starts, filled, strict=True)]
    return int(below.sum()), np.concatenate(parts)


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
