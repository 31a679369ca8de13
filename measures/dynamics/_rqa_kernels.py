"""Compiled kernels behind :func:`measures.rqa` (private).

The recurrence matrix is never stored. The strict lower triangle
(``i - j >= max(theiler, 1)``) is cut into vertical strips of columns with
equal area; each strip is scanned row by row, so every pairwise distance is
computed once. Vertical lines of the whole matrix are the columns of the
lower triangle plus its rows (a row of the lower triangle is a column of the
upper one, by symmetry); diagonal lines are its diagonals, counted twice.

Each row of a strip is done in three steps: (1) distances of the row
segment, one contiguous pass per coordinate, the last pass comparing with
the threshold and storing one hit byte per cell (step (1) alone is the
count-only floor, :func:`count_recurrences`); (2) the bytes are packed into
64-cell words and, for each kind of line, level masks are updated with word
operations only: bit b of level l is set when the run ending at cell b holds
at least l + 1 cells (for columns: this cell and level l - 1 of the cell
above; for diagonals the cell up-left; for rows the cell to the left). The
population counts C(l) of the levels give the number of lines holding at
least l cells, C(l) - C(l + 1), hence every line shorter than _K without a
single branch per line; (3) runs that reach _K cells (rare) record their
start row where they reach it and are counted with their exact length where
they stop.

Each strip counts the pieces of rows and diagonals that cross its edges as
lines of their own and stores their prefix/suffix lengths; the stitching
step takes those pieces out again and puts the joined lines in, so the
result does not depend on the number of strips.

Memory is O(n_strips * N); strips run in parallel (``prange``).

Distances: for ``metric_code == 0`` the squared Euclidean distance, summed
over coordinates in index order (``s = d0*d0; s += d1*d1; ...``), is compared
with a squared threshold; for ``metric_code == 1`` the maximum absolute
coordinate difference is compared with the threshold. The dense reference
uses the same per-pair arithmetic, so both agree bit for bit at ties.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeAlias

import numpy as np
from llvmlite import ir
from numba import njit, prange
from numba.core import cgutils, types
from numba.cpython.unsafe.numbers import leading_zeros, trailing_zeros
from numba.extending import intrinsic

__all__: list[str] = []

_GATHER = np.uint64(0x0102040810204080)
_TOP = np.uint64(56)
_ONE = np.uint64(1)
_63 = np.uint64(63)
#: Runs shorter than _K cells are counted from bit masks alone (branch-free);
#: longer ones, rare, get their exact length from their start row.
_K = 8
#: Index arithmetic in the kernels mixes Python ints and numpy int64 scalars.
_Int: TypeAlias = int | np.int64


@intrinsic
def _popcount(typingctx: Any, x: Any) -> tuple[Any, Callable[..., Any]]:
    """Number of set bits of a uint64 (LLVM's ctpop; vectorises)."""

    def codegen(context: Any, builder: ir.IRBuilder, signature: Any, args: list[ir.Value]) -> Any:
        i64 = ir.IntType(64)
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(i64, [i64]), "llvm.ctpop.i64"
        )
        return builder.call(fn, args)

    return types.int64(types.uint64), codegen


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
def _accumulate(
    xt: np.ndarray, i: int, c0: int, ncols: int, metric_code: int, acc: np.ndarray, n_coords: int
) -> None:
    # Partial distances of the row segment over coordinates 0 .. n_coords - 1
    # (n_coords >= 1): squared differences summed in index order, or their max.
    # One pass per coordinate keeps the inner loop contiguous (vectorisable).
    # The row kernels (streaming, count-only, bracket, image) start here; single
    # pairs go through _pair_distance, which sums in the same order, so every path
    # compares the same values with the threshold.
    row = xt[0, c0 : c0 + ncols]
    v = xt[0, i]
    if metric_code == 0:
        for jj in range(ncols):
            d = row[jj] - v
            acc[jj] = d * d
        for c in range(1, n_coords):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = row[jj] - v
                acc[jj] += d * d
    else:
        for jj in range(ncols):
            acc[jj] = abs(row[jj] - v)
        for c in range(1, n_coords):
            row = xt[c, c0 : c0 + ncols]
            v = xt[c, i]
            for jj in range(ncols):
                d = abs(row[jj] - v)
                b = acc[jj]
                acc[jj] = d if d > b else b


@njit(cache=True, inline="always")
def _row_distances(
    xt: np.ndarray, i: int, c0: int, ncols: int, metric_code: int, buf: np.ndarray
) -> None:
    _accumulate(xt, i, c0, ncols, metric_code, buf[:ncols], xt.shape[0])


@njit(cache=True, inline="always")
def _row_hits(
    xt: np.ndarray,
    i: int,
    c0: int,
    ncols: int,
    metric_code: int,
    thr: float,
    buf: np.ndarray,
    hit: np.ndarray,
) -> None:
    # hit[1 + jj] = 1 when the pair (i, c0 + jj) recurs (hit[0] is left as is).
    _hits_into(xt, i, c0, ncols, metric_code, thr, buf, hit[1 : ncols + 1])


@njit(cache=True, inline="always")
def _hits_into(
    xt: np.ndarray,
    i: int,
    c0: int,
    ncols: int,
    metric_code: int,
    thr: float,
    buf: np.ndarray,
    out: np.ndarray,
) -> None:
    # out[jj] = 1 when the pair (i, c0 + jj) recurs. Same arithmetic as
    # _row_distances, but the last coordinate's term is added (or maxed) and
    # compared in the same pass. Slices indexed by the loop counter keep the
    # loads contiguous (vector loads, no gathers).
    m = xt.shape[0]
    last = xt[m - 1, c0 : c0 + ncols]
    u = xt[m - 1, i]
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
    _accumulate(xt, i, c0, ncols, metric_code, acc, m - 1)
    if metric_code == 0:
        for jj in range(ncols):
            d = last[jj] - u
            out[jj] = acc[jj] + d * d <= thr
    else:
        for jj in range(ncols):
            d = abs(last[jj] - u)
            b = acc[jj]
            out[jj] = (d if d > b else b) <= thr


@njit(cache=True, inline="always")
def _run_so_far(lev: np.ndarray, w: _Int, b: _Int, start: _Int, i: _Int) -> _Int:
    # Length of the run (of one kind) ending at lane 64 w + b of this row,
    # read off the level masks; runs of _K or more cells use their start row.
    bit = _ONE << np.uint64(b)
    if lev[_K - 1, w + 1] & bit:
        return i - start + 1
    d = 0
    while d < _K - 1 and (lev[d, w + 1] & bit):
        d += 1
    return d


@njit(cache=True)
def _scan_strip(
    xt: np.ndarray,
    thr: float,
    metric_code: int,
    theiler: int,
    c0: int,
    c1: int,
    s: int,
    hd: np.ndarray,
    hv: np.ndarray,
    rpre: np.ndarray,
    rsuf: np.ndarray,
    dpre: np.ndarray,
    dsuf: np.ndarray,
) -> None:
    n = xt.shape[1]
    we = max(theiler, 1)
    width = c1 - c0
    if width <= 0 or c0 + we >= n:
        return
    K = _K
    jj: _Int
    w: _Int
    r: _Int
    # 64 lanes (cells) per word; one spare lane for diagonals leaving the
    # strip. Level arrays carry a zero word in front (index 0) and behind,
    # so shifts across word edges need no branch.
    nw = width // 64 + 1
    buf = np.empty(width, dtype=np.float64)
    hb = np.zeros(64 * nw, dtype=np.uint8)
    hw = hb.view(np.uint64)
    hbits = np.zeros(nw, dtype=np.uint64)
    # lev[l, w + 1] bit b: the run of that kind ending at lane 64 w + b holds
    # at least l + 1 cells. Columns and diagonals keep the previous row.
    col_old = np.zeros((K, nw + 2), dtype=np.uint64)
    col_new = np.zeros((K, nw + 2), dtype=np.uint64)
    dia_old = np.zeros((K, nw + 2), dtype=np.uint64)
    dia_new = np.zeros((K, nw + 2), dtype=np.uint64)
    row = np.zeros((K, nw + 2), dtype=np.uint64)
    # pre_*: diagonals unbroken since the strip's left edge (prefix runs).
    pre_old = np.zeros(nw + 2, dtype=np.uint64)
    pre_new = np.zeros(nw + 2, dtype=np.uint64)
    # cnt_*[l] = number of cells whose run so far holds >= l cells.
    cnt_c = np.zeros(K + 1, dtype=np.int64)
    cnt_d = np.zeros(K + 1, dtype=np.int64)
    cnt_r = np.zeros(K + 1, dtype=np.int64)
    long_c = 0
    long_d = 0
    long_r = 0
    cstart = np.zeros(width, dtype=np.int64)
    dstart = np.zeros(n, dtype=np.int64)
    allones = ~np.uint64(0)
    p_words = 0
    ncols = 0
    for i in range(c0 + we, n):
        ncols = min(c1, i - we + 1) - c0
        _hits_into(xt, i, c0, ncols, metric_code, thr, buf, hb)
        nwa = min(nw, ncols // 64 + 1)
        tot = 0
        for w in range(nwa):
            x = np.uint64(0)
            for q in range(8):
                x |= ((hw[8 * w + q] * _GATHER) >> _TOP) << np.uint64(8 * q)
            hbits[w] = x
            col_new[0, w + 1] = x
            dia_new[0, w + 1] = x
            row[0, w + 1] = x
            tot += _popcount(x)  # type: ignore[call-arg]  # numba passes typingctx
        cnt_c[1] += tot
        cnt_d[1] += tot
        cnt_r[1] += tot
        # Branch-free level update: a cell extends the run of the cell above
        # (column), up-left (diagonal) or left (row) by one.
        for lv in range(1, K):
            sc = 0
            sd = 0
            sr = 0
            for w in range(nwa):
                h = hbits[w]
                xc = h & col_old[lv - 1, w + 1]
                col_new[lv, w + 1] = xc
                xd = h & ((dia_old[lv - 1, w + 1] << _ONE) | (dia_old[lv - 1, w] >> _63))
                dia_new[lv, w + 1] = xd
                xr = h & ((row[lv - 1, w + 1] << _ONE) | (row[lv - 1, w] >> _63))
                row[lv, w + 1] = xr
                sc += _popcount(xc)  # type: ignore[call-arg]  # numba passes typingctx
                sd += _popcount(xd)  # type: ignore[call-arg]  # numba passes typingctx
                sr += _popcount(xr)  # type: ignore[call-arg]  # numba passes typingctx
            cnt_c[lv + 1] += sc
            cnt_d[lv + 1] += sd
            cnt_r[lv + 1] += sr
        # Long runs (>= K cells) are rare: note where they reach K cells and
        # count their exact length where they stop.
        pend = -1
        for w in range(nwa):
            h = hbits[w]
            oc = col_old[K - 1, w + 1]
            rc = col_new[K - 1, w + 1] & ~oc
            ec = oc & ~h
            od = (dia_old[K - 1, w + 1] << _ONE) | (dia_old[K - 1, w] >> _63)
            rd = dia_new[K - 1, w + 1] & ~od
            ed = od & ~h
            ar = row[K - 1, w + 1]
            sr = ar & ~((ar << _ONE) | (row[K - 1, w] >> _63))
            er = ar & ~((ar >> _ONE) | (row[K - 1, w + 2] << _63))
            if (rc | ec | rd | ed | sr | er) == 0:
                continue
            base = 64 * w
            long_c += _popcount(rc)  # type: ignore[call-arg]  # numba passes typingctx
            long_d += _popcount(rd)  # type: ignore[call-arg]  # numba passes typingctx
            while rc != 0:
                jj = base + np.int64(trailing_zeros(rc))  # type: ignore[call-arg]  # numba passes typingctx
                rc &= rc - _ONE
                cstart[jj] = i - K + 1
            while ec != 0:
                jj = base + np.int64(trailing_zeros(ec))  # type: ignore[call-arg]  # numba passes typingctx
                ec &= ec - _ONE
                hv[s, i - cstart[jj]] += 1
            while rd != 0:
                jj = base + np.int64(trailing_zeros(rd))  # type: ignore[call-arg]  # numba passes typingctx
                rd &= rd - _ONE
                dstart[i - c0 - jj] = i - K + 1
            while ed != 0:
                jj = base + np.int64(trailing_zeros(ed))  # type: ignore[call-arg]  # numba passes typingctx
                ed &= ed - _ONE
                hd[s, i - dstart[i - c0 - jj]] += 1
            # Row runs: the k-th lane reaching K cells pairs with the k-th
            # run end (one run may be open from the previous word).
            while er != 0:
                e = base + np.int64(trailing_zeros(er))  # type: ignore[call-arg]  # numba passes typingctx
                er &= er - _ONE
                if pend >= 0:
                    st = pend
                    pend = -1
                else:
                    st = base + np.int64(trailing_zeros(sr))  # type: ignore[call-arg]  # numba passes typingctx
                    sr &= sr - _ONE
                hv[s, e - st + K] += 1
                long_r += 1
            if sr != 0:
                pend = base + np.int64(trailing_zeros(sr))  # type: ignore[call-arg]  # numba passes typingctx
        # Diagonal prefix runs (from the strip's left edge) that stop here.
        pw = min(p_words + 1, nwa)
        p_words = 0
        for w in range(pw):
            sp = (pre_old[w + 1] << _ONE) | (pre_old[w] >> _63)
            h = hbits[w]
            nx = h & (sp | (_ONE if w == 0 else np.uint64(0)))
            pre_new[w + 1] = nx
            if nx != 0:
                p_words = w + 1
            ep = sp & ~h
            while ep != 0:
                jj = 64 * w + np.int64(trailing_zeros(ep))  # type: ignore[call-arg]  # numba passes typingctx
                ep &= ep - _ONE
                if jj < width:
                    dpre[s, i - c0 - jj] = jj
        pre_new[pw + 1] = 0
        # Row prefix (from lane 0) and suffix (ending at the row's last cell).
        if hbits[0] & _ONE:
            r = 0
            w = 0
            while w < nwa and hbits[w] == allones:
                r += 64
                w += 1
            if w < nwa:
                r += np.int64(trailing_zeros(~hbits[w]))  # type: ignore[call-arg]  # numba passes typingctx
            rpre[s, i] = min(r, ncols)
        e = ncols - 1
        w = e // 64
        b = e - 64 * w
        x = hbits[w] << np.uint64(63 - b)
        r = 64 if x == allones else np.int64(leading_zeros(~x))  # type: ignore[call-arg]  # numba passes typingctx
        if r >= b + 1:
            r = b + 1
            w -= 1
            while w >= 0 and hbits[w] == allones:
                r += 64
                w -= 1
            if w >= 0:
                r += np.int64(leading_zeros(~hbits[w]))  # type: ignore[call-arg]  # numba passes typingctx
        rsuf[s, i] = r
        if ncols == width:
            # The diagonal through (i, c1 - 1) leaves the strip here.
            k = i - (c1 - 1)
            d = _run_so_far(dia_new, (width - 1) // 64, (width - 1) % 64, dstart[k], i)
            if d == width:
                dpre[s, k] = d
            dsuf[s, k] = d
        col_old, col_new = col_new, col_old
        dia_old, dia_new = dia_new, dia_old
        pre_old, pre_new = pre_new, pre_old
    # Runs still open on the last row.
    i = n - 1
    for jj in range(ncols):
        w = jj // 64
        bit = _ONE << np.uint64(jj - 64 * w)
        if col_old[K - 1, w + 1] & bit:
            hv[s, n - cstart[jj]] += 1
        k = i - c0 - jj
        d = _run_so_far(dia_old, w, jj - 64 * w, dstart[k], i)
        if d >= K:
            hd[s, d] += 1
        if d == jj + 1:
            dpre[s, k] = d
        dsuf[s, k] = d
    # cnt[l] - cnt[l + 1] lines hold >= l cells; K and more were counted exactly.
    _fold(cnt_c, long_c, hv, s)
    _fold(cnt_r, long_r, hv, s)
    _fold(cnt_d, long_d, hd, s)


@njit(cache=True, inline="always")
def _fold(cnt: np.ndarray, n_long: int, hist: np.ndarray, s: int) -> None:
    g_next = n_long
    for lv in range(_K - 1, 0, -1):
        g = cnt[lv] - cnt[lv + 1]
        hist[s, lv] += g - g_next
        g_next = g


@njit(cache=True)
def _stitch(
    edges: np.ndarray,
    pre: np.ndarray,
    suf: np.ndarray,
    last: np.ndarray,
    hist: np.ndarray,
    tail: np.ndarray,
) -> None:
    """Join the prefix/suffix runs of consecutive strips along each line.

    Line q (a row or a diagonal of the lower triangle) covers columns
    [0, last[q]). Each strip has counted its pieces of the line as lines of
    their own; here the pieces that touch a strip edge are taken out again
    and the joined lines put in. A strip whose segment is all ones passes its
    length on; otherwise the carried run plus its prefix is one finished
    line, and its suffix is carried on. When ``tail`` is non-empty the run
    touching the line's end is returned there instead of counted (theiler =
    0 joins it with the column below the line of identity).
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
            if seglen <= 0:
                continue
            p = pre[s, q]
            if p == seglen:
                hist[seglen] -= 1
                carry += seglen
            else:
                u = suf[s, q]
                if p > 0:
                    hist[p] -= 1
                if u > 0:
                    hist[u] -= 1
                t = carry + p
                if t > 0:
                    hist[t] += 1
                carry = u
        if keep_tail:
            tail[q] = carry
        elif carry > 0:
            hist[carry] += 1


@njit(cache=True, inline="always")
def _pair_distance(xt: np.ndarray, i: int, j: int, metric_code: int, m: int) -> float:
    # One pair's distance (squared for Euclidean) with the same order of operations as
    # _accumulate's per-column sums, so single pairs and whole rows compare equal values.
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
    return acc


@njit(cache=True, parallel=True)
def _top_runs(xt: np.ndarray, thr: float, metric_code: int, out: np.ndarray) -> None:
    # theiler = 0: length of the run starting at (j + 1, j) down column j.
    n = xt.shape[1]
    m = xt.shape[0]
    for j in prange(n - 1):
        i = j + 1
        while i < n:
            acc = _pair_distance(xt, i, j, metric_code, m)
            if not acc <= thr:
                break
            i += 1
        out[j] = i - (j + 1)


@njit(cache=True, parallel=True)
def _scan_all(
    xt: np.ndarray,
    thr: float,
    metric_code: int,
    theiler: int,
    edges: np.ndarray,
    hd: np.ndarray,
    hv: np.ndarray,
    rpre: np.ndarray,
    rsuf: np.ndarray,
    dpre: np.ndarray,
    dsuf: np.ndarray,
) -> None:
    for s in prange(edges.shape[0] - 1):
        _scan_strip(
            xt, thr, metric_code, theiler, edges[s], edges[s + 1], s, hd, hv,
            rpre, rsuf, dpre, dsuf,
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
    if n > we:
        _scan_all(xt, thr, metric_code, theiler, edges, hd, hv, rpre, rsuf, dpre, dsuf)
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
        # triangle), the cell (j, j), then the lower part. The strips counted
        # the lower part's first run as a line of its own.
        coltop = np.zeros(n, dtype=np.int64)
        if n > 1:
            _top_runs(xt, thr, metric_code, coltop)
        top = coltop[coltop > 0]
        np.subtract.at(vert, top, 1)
        np.add.at(vert, row_tail + 1 + coltop, 1)
    return diag, vert


@njit(cache=True, parallel=True)
def _count_all(
    xt: np.ndarray,
    thr: float,
    metric_code: int,
    theiler: int,
    edges: np.ndarray,
    counts: np.ndarray,
) -> None:
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


@njit(cache=True)
def lower_distances(xt: np.ndarray, we: int, metric_code: int) -> np.ndarray:
    """Distances of every pair (i, j <= i - we), in ``np.tril_indices(n, -we)`` order.

    The same values as ``pair_distances`` on those indices (one arithmetic), without
    building the two index arrays of every pair.
    """
    m = xt.shape[0]
    n = xt.shape[1]
    out = np.empty(max(n - we, 0) * max(n - we + 1, 0) // 2, dtype=np.float64)
    p = 0
    for i in range(we, n):
        for j in range(i - we + 1):
            out[p] = _pair_distance(xt, i, j, metric_code, m)
            p += 1
    return out


@njit(cache=True)
def keep_lower_pairs(
    a: np.ndarray, b: np.ndarray, we: int, rows: np.ndarray, cols: np.ndarray, filled: int
) -> int:
    """Append (max, min) of the draws ``a``, ``b`` with ``|a - b| >= we`` to ``rows``/``cols``
    from index ``filled`` on, in draw order, until they are full; return the new fill.

    One pass in place of ``abs``, a mask, ``maximum``, ``minimum``, two boolean gathers and
    two concatenations of arrays twice the sample's size: the same pairs in the same order.
    """
    k = filled
    cap = rows.shape[0]
    for t in range(a.shape[0]):
        if k >= cap:
            break
        x = a[t]
        y = b[t]
        if abs(x - y) >= we:
            if x > y:
                rows[k] = x
                cols[k] = y
            else:
                rows[k] = y
                cols[k] = x
            k += 1
    return k


@njit(cache=True, parallel=True)
def pair_distances(
    xt: np.ndarray, rows: np.ndarray, cols: np.ndarray, metric_code: int
) -> np.ndarray:
    """Distances (squared for Euclidean) of the given pairs, same arithmetic."""
    m = xt.shape[0]
    out = np.empty(rows.shape[0], dtype=np.float64)
    for p in prange(rows.shape[0]):
        i = rows[p]
        j = cols[p]
        out[p] = _pair_distance(xt, i, j, metric_code, m)
    return out


@njit(cache=True, inline="always")
def _bracket_row(
    xt: np.ndarray,
    i: int,
    c0: int,
    ncols: int,
    metric_code: int,
    lo: float,
    hi: float,
    buf: np.ndarray,
    flag: np.ndarray,
) -> int:
    # Distances of the row segment (same arithmetic as _row_distances); the
    # last coordinate's pass also counts the cells <= lo and flags those in
    # (lo, hi], so buf is written once and reread only at flagged cells.
    m = xt.shape[0]
    acc = buf[:ncols]
    last = xt[m - 1, c0 : c0 + ncols]
    u = xt[m - 1, i]
    below = 0
    if m == 1:
        for jj in range(ncols):
            d = last[jj] - u
            v = d * d if metric_code == 0 else abs(d)
            acc[jj] = v
            below += v <= lo
            flag[jj] = (v <= hi) & (v > lo)
        return below
    _accumulate(xt, i, c0, ncols, metric_code, acc, m - 1)
    if metric_code == 0:
        for jj in range(ncols):
            d = last[jj] - u
            v = acc[jj] + d * d
            acc[jj] = v
            below += v <= lo
            flag[jj] = (v <= hi) & (v > lo)
    else:
        for jj in range(ncols):
            d = abs(last[jj] - u)
            b = acc[jj]
            v = d if d > b else b
            acc[jj] = v
            below += v <= lo
            flag[jj] = (v <= hi) & (v > lo)
    return below


@njit(cache=True, parallel=True)
def _bracket_all(
    xt: np.ndarray,
    lo: float,
    hi: float,
    metric_code: int,
    theiler: int,
    edges: np.ndarray,
    starts: np.ndarray,
    caps: np.ndarray,
    below: np.ndarray,
    filled: np.ndarray,
    out: np.ndarray,
) -> None:
    n = xt.shape[1]
    we = max(theiler, 1)
    for s in prange(edges.shape[0] - 1):
        c0 = edges[s]
        c1 = edges[s + 1]
        width = max(c1 - c0, 1)
        buf = np.empty(width, dtype=np.float64)
        # One flag byte per cell inside the bracket, read 8 at a time; the
        # bracket holds ~0.2 % of the cells, so whole words are mostly zero.
        n_words = (width + 7) // 8
        flag = np.zeros(8 * n_words, dtype=np.uint8)
        words = flag.view(np.uint64)
        nb = 0
        nf = 0
        base = starts[s]
        cap = caps[s]
        for i in range(c0 + we, n):
            ncols = min(c1, i - we + 1) - c0
            if ncols <= 0:
                continue
            nb += _bracket_row(xt, i, c0, ncols, metric_code, lo, hi, buf, flag)
            for w in range((ncols + 7) // 8):
                x = words[w]
                if x == 0:
                    continue
                mk = (x * _GATHER) >> _TOP
                while mk != 0:
                    jj = 8 * w + np.int64(trailing_zeros(mk))  # type: ignore[call-arg]  # numba passes typingctx
                    mk &= mk - _ONE
                    if nf < cap:
                        out[base + nf] = buf[jj]
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
    end: int | np.int64 = 0
    for a, f in zip(starts, filled, strict=True):
        out[end : end + f] = out[a : a + f]
        end += f
    return int(below.sum()), out[:end]


@njit(cache=True, parallel=True)
def _image_rows(
    xt: np.ndarray,
    thr: float,
    metric_code: int,
    theiler: int,
    block: int,
    size: int,
    counts: np.ndarray,
    admissible: np.ndarray,
) -> None:
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
