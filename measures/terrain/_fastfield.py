"""Private: fused kernels for scoring large heightmaps and their surrogates.

- ``ordinal_counts``: 2-D ordinal pattern histogram (Bandt & Pompe 2002;
  Ribeiro et al. 2012) in one pass, without materialising codes, plus the
  number of windows holding a tie. With ``ties="stable"`` the patterns are
  those of :func:`measures.ordinal_patterns` (the earlier value ranks lower);
  with ``ties="random"`` equal values are ordered by a seeded hash of their
  cell, i.e. random tie-breaking, so quantisation does not pile windows into
  the all-equal pattern.
- ``phase_surrogates``: 2-D phase-randomised surrogates (Theiler et al.
  1992): the amplitude spectrum is taken once, each surrogate draws its
  phases on the rfft half-plane from its own seeded generator (``[seed, k]``,
  so surrogate k is the same whatever order they are made in) with the
  Hermitian symmetry of the ``kx = 0`` and Nyquist columns imposed, then
  costs one inverse FFT. float32
  throughout: a surrogate is a random draw, its rounding (1e-7 relative)
  is far below its sampling spread.
"""

from __future__ import annotations

import math
import os
import threading
from collections.abc import Callable
from typing import Any

import numpy as np
from numba import njit, prange
from numpy.typing import NDArray
from scipy import fft as sfft

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)


@njit(cache=True, inline="always")
def _mix(z: np.uint64) -> np.uint64:  # splitmix64 finaliser (Steele, Lea & Flood 2014)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@njit(cache=True, inline="always")
def _before(
    a: float, b: float, tied: bool, ka: np.uint64, kb: np.uint64, use_key: bool
) -> bool | np.bool_:
    """True when value a (earlier in the window) ranks below value b."""
    if not tied:
        return a < b or (a == b and not use_key) or (a == b and ka < kb)
    if use_key:
        return ka < kb
    return True  # stable: the earlier of two equal values ranks lower


@njit(cache=True, parallel=True)
def _ordinal_kernel(  # pragma: no cover - compiled
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    wy: int,
    wx: int,
    use_key: bool,
    seed: int,
    n_chunks: int,
) -> tuple[NDArray[np.int64], np.int64]:
    ny, nx = x.shape
    oy, ox = ny - wy + 1, nx - wx + 1
    d = wy * wx
    n_pat = 1
    for i in range(2, d + 1):
        n_pat *= i
    fact = np.ones(d, dtype=np.int64)
    for r in range(d - 2, -1, -1):
        fact[r] = fact[r + 1] * (d - 1 - r)
    counts = np.zeros((n_chunks, n_pat), dtype=np.int64)
    ties = np.zeros(n_chunks, dtype=np.int64)
    rows_per = (oy + n_chunks - 1) // n_chunks
    s = np.uint64(seed) * _GOLDEN
    for c in prange(n_chunks):
        vals = np.empty(d, dtype=x.dtype)
        rvals = np.empty(d, dtype=raw.dtype)
        keys = np.empty(d, dtype=np.uint64)
        rank = np.empty(d, dtype=np.int64)
        inv = np.empty(d, dtype=np.int64)
        for i in range(c * rows_per, min(oy, (c + 1) * rows_per)):
            for j in range(ox):
                k = 0
                for r in range(wy):
                    for q in range(wx):
                        vals[k] = x[i + r, j + q]
                        rvals[k] = raw[i + r, j + q]
                        if use_key:
                            keys[k] = _mix(s + np.uint64((i + r) * nx + (j + q)))
                        k += 1
                tie = False
                for a in range(d):
                    rank[a] = 0
                    inv[a] = 0
                for b in range(1, d):
                    for a in range(b):
                        same = rvals[a] == rvals[b]
                        if same:
                            tie = True
                        if _before(vals[a], vals[b], same, keys[a], keys[b], use_key):
                            rank[b] += 1
                        else:
                            rank[a] += 1
                            inv[b] += 1
                code = 0
                for a in range(d):
                    code += inv[a] * fact[rank[a]]
                counts[c, code] += 1
                if tie:
                    ties[c] += 1
    return counts.sum(axis=0), ties.sum()


@njit(cache=True, inline="always")
def _below(
    vp: float,
    vq: float,
    rp: float,
    rq: float,
    cp: int,
    cq: int,
    use_key: bool,
    s: np.uint64,
) -> tuple[bool | np.bool_, bool]:
    """(p ranks below q, tied) for p earlier in the window than q."""
    if rp == rq:
        if use_key:
            return _mix(s + np.uint64(cp)) < _mix(s + np.uint64(cq)), True
        return True, True
    return vp <= vq, False


def _lehmer_table() -> NDArray[np.int64]:
    """Code of the 2 x 2 pattern for each 6-bit vector of pairwise comparisons.

    Bit order: (0,1), (0,2), (0,3), (1,2), (1,3), (2,3); a set bit says the
    earlier cell of the pair ranks below the later one. The code is the
    Lehmer code of the window's ordinal pattern as in ``_ordinal_kernel``
    (identical for all D = 4 windows). Bit vectors that no order produces
    (possible only when tie keys and values disagree) get the code the rank
    arithmetic gives them, as before; codes >= 24 are not counted.
    """
    weight = (6, 2, 1, 1)
    out = np.empty(64, dtype=np.int64)
    for v in range(64):
        b01, b02, b03, b12, b13, b23 = ((v >> s) & 1 for s in range(6))
        k1 = 1 - b01
        k2 = (1 - b02) + (1 - b12)
        k3 = (1 - b03) + (1 - b13) + (1 - b23)
        rk1 = b01 + (1 - b12) + (1 - b13)
        rk2 = b02 + b12 + (1 - b23)
        rk3 = b03 + b13 + b23
        out[v] = k1 * weight[min(rk1, 3)] + k2 * weight[min(rk2, 3)] + k3 * weight[min(rk3, 3)]
    return out


_LEHMER_22 = _lehmer_table()


@njit(cache=True, inline="always")
def _tied_bits(
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    i: int,
    j: int,
    nx: int,
    use_key: bool,
    s: np.uint64,
    off: Any,
) -> int:
    """The 6 comparison bits of a window holding a tie (equal raw heights)."""
    c0 = i * nx + j
    c2 = c0 + nx
    v0, v1, v2, v3 = x[i, j] + off, x[i, j + 1] + off, x[i + 1, j] + off, x[i + 1, j + 1] + off
    r0, r1 = raw[i, j] + off, raw[i, j + 1] + off
    r2, r3 = raw[i + 1, j] + off, raw[i + 1, j + 1] + off
    b01 = _below(v0, v1, r0, r1, c0, c0 + 1, use_key, s)[0]
    b02 = _below(v0, v2, r0, r2, c0, c2, use_key, s)[0]
    b03 = _below(v0, v3, r0, r3, c0, c2 + 1, use_key, s)[0]
    b12 = _below(v1, v2, r1, r2, c0 + 1, c2, use_key, s)[0]
    b13 = _below(v1, v3, r1, r3, c0 + 1, c2 + 1, use_key, s)[0]
    b23 = _below(v2, v3, r2, r3, c2, c2 + 1, use_key, s)[0]
    return (int(b01) | (int(b02) << 1) | (int(b03) << 2) | (int(b12) << 3) | (int(b13) << 4)) | (
        int(b23) << 5
    )


@njit(cache=True, nogil=True)
def _rows_22(  # pragma: no cover - compiled
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    same: bool,
    use_key: bool,
    s: np.uint64,
    i0: int,
    i1: int,
    hist: NDArray[np.int64],
    off: Any,
) -> int:
    """Windows with top rows i0 .. i1 - 1 into ``hist`` (4 x 64 bins); returns the tied count.

    ``off`` (of x's dtype) is added to every value of x and raw before any
    comparison, with x's rounding: the counts of ``x + off`` without that array.

    Two passes per row: the first computes every window's comparison bits
    and tie flag without branches (the compiler vectorises it), the second
    histograms them (four interleaved histograms, so runs of one pattern on
    smooth ground do not serialise on one counter) and redoes the rare tied
    windows by the tie rule. ``same``: ``raw`` is ``x`` (not read twice).
    """
    nx = x.shape[1]
    ox = nx - 1
    buf = np.empty(ox, dtype=np.uint8)
    n_tie = 0
    for i in range(i0, i1):
        a0, a1 = x[i], x[i + 1]
        if same:
            for j in range(ox):
                v0, v1, v2, v3 = a0[j] + off, a0[j + 1] + off, a1[j] + off, a1[j + 1] + off
                code = (
                    (v0 <= v1) * 1
                    + (v0 <= v2) * 2
                    + (v0 <= v3) * 4
                    + (v1 <= v2) * 8
                    + (v1 <= v3) * 16
                    + (v2 <= v3) * 32
                )
                tie = (v0 == v1) | (v0 == v2) | (v0 == v3) | (v1 == v2) | (v1 == v3) | (v2 == v3)
                buf[j] = code + 64 * tie
        else:
            q0, q1 = raw[i], raw[i + 1]
            for j in range(ox):
                v0, v1, v2, v3 = a0[j] + off, a0[j + 1] + off, a1[j] + off, a1[j + 1] + off
                r0, r1 = q0[j] + off, q0[j + 1] + off
                r2, r3 = q1[j] + off, q1[j + 1] + off
                code = (
                    (v0 <= v1) * 1
                    + (v0 <= v2) * 2
                    + (v0 <= v3) * 4
                    + (v1 <= v2) * 8
                    + (v1 <= v3) * 16
                    + (v2 <= v3) * 32
                )
                tie = (r0 == r1) | (r0 == r2) | (r0 == r3) | (r1 == r2) | (r1 == r3) | (r2 == r3)
                buf[j] = code + 64 * tie
        for j in range(ox):
            code = buf[j]
            if code >= 64:
                n_tie += 1
                code = _tied_bits(x, raw, i, j, nx, use_key, s, off)
            hist[(j & 3) * 64 + code] += 1
    return n_tie


@njit(cache=True, parallel=True)
def _ordinal_kernel_22(  # pragma: no cover - compiled
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    same: bool,
    use_key: bool,
    seed: int,
    n_chunks: int,
    off: Any,
) -> tuple[NDArray[np.int64], np.int64]:
    """The 2 x 2 case of ``_ordinal_kernel``: a 6-bit comparison vector per window."""
    oy = x.shape[0] - 1
    hist = np.zeros((n_chunks, 4 * 64 + 64), dtype=np.int64)  # padded rows: no false sharing
    ties = np.zeros(n_chunks * 8, dtype=np.int64)
    rows_per = (oy + n_chunks - 1) // n_chunks
    s = np.uint64(seed) * _GOLDEN
    for c in prange(n_chunks):
        i0, i1 = c * rows_per, min(oy, (c + 1) * rows_per)
        ties[c * 8] = _rows_22(x, raw, same, use_key, s, i0, i1, hist[c], off)
    return hist, ties.sum()


@njit(cache=True, nogil=True)
def _ordinal_kernel_22_serial(  # pragma: no cover - compiled
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    same: bool,
    use_key: bool,
    seed: int,
    n_chunks: int,
    off: Any,
) -> tuple[NDArray[np.int64], np.int64]:
    """``_ordinal_kernel_22`` on the calling thread, without the GIL (one surrogate per thread)."""
    hist = np.zeros((1, 4 * 64 + 64), dtype=np.int64)
    s = np.uint64(seed) * _GOLDEN
    n_tie = _rows_22(x, raw, same, use_key, s, 0, x.shape[0] - 1, hist[0], off)
    return hist, np.int64(n_tie)


def ordinal_counts(
    x: NDArray,
    order: tuple[int, int],
    *,
    ties: str = "stable",
    seed: int = 0,
    raw: NDArray | None = None,
    serial: bool = False,
    offset: float = 0.0,
) -> tuple[NDArray[np.int64], int]:
    """Histogram over all D! patterns of ``order = (dx, dy)`` windows, and the tied-window count.

    ``offset``: the counts are those of ``x + offset`` computed in x's dtype
    (as ``x += offset`` would round), without writing that array (2 x 2 only).

    ``raw``: the heights as measured, when ``x`` is a levelled copy. Ties are
    equalities of the measured heights: subtracting a plane from quantised
    heights turns every tie into a near-tie ordered by the plane's tilt,
    which is the tie bias under another name. Other pairs are ordered by ``x``.
    """
    wx, wy = int(order[0]), int(order[1])
    arr = np.ascontiguousarray(x)
    if arr.dtype not in (np.float32, np.float64):
        arr = arr.astype(np.float64)
    ref = arr if raw is None else np.ascontiguousarray(raw)
    if ref.shape != arr.shape:
        raise ValueError("raw must have the shape of x")
    chunks = max(1, min(arr.shape[0], 4 * (os.cpu_count() or 1)))
    if offset and (wx, wy) != (2, 2):
        arr = arr + arr.dtype.type(offset)
        ref = arr if raw is None else ref + arr.dtype.type(offset)
    if (wx, wy) == (2, 2):
        ref = ref.astype(arr.dtype, copy=False)
        same = raw is None
        kernel = _ordinal_kernel_22_serial if serial else _ordinal_kernel_22
        hist, n_ties = kernel(
            arr,
            np.ascontiguousarray(ref),
            same,
            ties == "random",
            int(seed) & 0x7FFFFFFF,
            chunks,
            arr.dtype.type(offset),
        )
        by_bits = hist[:, : 4 * 64].reshape(-1, 64).sum(axis=0)
        counts = np.bincount(
            _LEHMER_22[_LEHMER_22 < 24], weights=by_bits[_LEHMER_22 < 24], minlength=24
        )
        return np.rint(counts).astype(np.int64), int(n_ties)
    counts, n_ties = _ordinal_kernel(
        arr, ref, wy, wx, ties == "random", int(seed) & 0x7FFFFFFF, chunks
    )
    return counts, int(n_ties)


# Phases 2 pi n / 2^24 (numpy's float32 uniforms are n / 2^24): cos and sin from
# two 4096-entry tables, cos(a + b) = cos a cos b - sin a sin b in float64, so each
# unit phasor is exact to float32 rounding without a transcendental call per mode.
_TURN = np.arange(4096, dtype=np.float64) * (2.0 * math.pi / 4096.0)
_COS_HI, _SIN_HI = np.cos(_TURN), np.sin(_TURN)
_COS_LO, _SIN_LO = np.cos(_TURN / 4096.0), np.sin(_TURN / 4096.0)


@njit(cache=True, parallel=True)
def _phasors(  # pragma: no cover - compiled
    u: NDArray[np.float32],
    amp: NDArray[np.float32],
    out: NDArray[np.complex64],
    cos_hi: NDArray[np.float64],
    sin_hi: NDArray[np.float64],
    cos_lo: NDArray[np.float64],
    sin_lo: NDArray[np.float64],
) -> None:
    """out = amp * exp(2 pi i u), u uniform float32 in [0, 1) (multiples of 2^-24)."""
    for i in prange(u.shape[0]):
        _phasor_row(u, amp, out, cos_hi, sin_hi, cos_lo, sin_lo, i)


@njit(cache=True, nogil=True)
def _phasors_serial(  # pragma: no cover - compiled
    u: NDArray[np.float32],
    amp: NDArray[np.float32],
    out: NDArray[np.complex64],
    cos_hi: NDArray[np.float64],
    sin_hi: NDArray[np.float64],
    cos_lo: NDArray[np.float64],
    sin_lo: NDArray[np.float64],
) -> None:
    """``_phasors`` on the calling thread, without the GIL."""
    for i in range(u.shape[0]):
        _phasor_row(u, amp, out, cos_hi, sin_hi, cos_lo, sin_lo, i)


@njit(cache=True, nogil=True)
def _phasor_row(  # pragma: no cover - compiled
    u: NDArray[np.float32],
    amp: NDArray[np.float32],
    out: NDArray[np.complex64],
    cos_hi: NDArray[np.float64],
    sin_hi: NDArray[np.float64],
    cos_lo: NDArray[np.float64],
    sin_lo: NDArray[np.float64],
    i: int,
) -> None:
    for j in range(u.shape[1]):
        n = np.int64(u[i, j] * np.float32(16777216.0))
        hi, lo = n >> 12, n & 4095
        ca, sa, cb, sb = cos_hi[hi], sin_hi[hi], cos_lo[lo], sin_lo[lo]
        a = amp[i, j]
        out[i, j] = complex(a * (ca * cb - sa * sb), a * (sa * cb + ca * sb))


def _phase_spectrum(
    amp: NDArray[np.float32],
    rng: np.random.Generator,
    ny: int,
    nx_even: bool,
    serial: bool = False,
    bufs: dict[str, Any] | None = None,
) -> NDArray[np.complex64]:
    """amp * exp(i phi) with phi uniform, Hermitian on the real columns.

    The uniforms are numpy's float32 stream of ``rng`` (the same surrogates
    whatever the speed-up); the phasors come from a table (``_phasors``).
    ``bufs``: arrays to reuse ("u", "spec"), kept there for the next call.
    """
    if bufs is None:
        u = rng.random(amp.shape, dtype=np.float32)
        out = np.empty(amp.shape, dtype=np.complex64)
    else:
        # Reused between surrogates: a fresh 4096^2 array costs its page faults
        # (the kernel zeroes every page) each time.
        u = bufs.setdefault("u", np.empty(amp.shape, dtype=np.float32))
        rng.random(amp.shape, dtype=np.float32, out=u)
        out = bufs.setdefault("spec", np.empty(amp.shape, dtype=np.complex64))
    (_phasors_serial if serial else _phasors)(u, amp, out, _COS_HI, _SIN_HI, _COS_LO, _SIN_LO)
    # Columns kx = 0 (and Nyquist for even nx) are transforms of real lines:
    # their -ky mode is the conjugate of +ky, and the self-mirrored modes are real.
    half = np.arange(1, (ny + 1) // 2)
    two_pi = np.float32(2.0 * math.pi)
    for col in (0, amp.shape[1] - 1) if nx_even else (0,):
        v = out[:, col]
        v[ny - half] = np.conj(v[half])
        selves = [0, ny // 2] if ny % 2 == 0 else [0]
        for r in selves:
            v[r] = amp[r, col] * (1.0 if u[r, col] * two_pi < math.pi else -1.0)
    out[0, 0] = 0.0
    return out


def _irfft2(
    f: NDArray[np.complex64],
    shape: tuple[int, ...],
    workers: int,
    out: NDArray[np.float32] | None = None,
) -> NDArray[np.float32]:
    """Inverse real 2-D FFT that may overwrite ``f`` (into ``out`` when given).

    ducc0's transform (when installed) works in place on the spectrum and
    is 1.5-2x faster here than scipy's on a 4096^2 grid; scipy otherwise.
    Both agree to float32 rounding (6e-8 relative).
    """
    try:
        import ducc0
    except ImportError:  # pragma: no cover - ducc0 is a declared dependency
        return sfft.irfft2(f, s=shape, workers=workers, overwrite_x=True)
    if out is None:
        out = np.empty(shape, dtype=np.float32)
    return ducc0.fft.c2r(  # type: ignore[no-any-return]
        f,
        axes=(0, 1),
        lastsize=shape[1],
        forward=False,
        inorm=2,
        out=out,
        nthreads=workers,
        allow_overwriting_input=True,
    )


def phase_surrogates(
    z: NDArray, seed: int, *, workers: int | None = None
) -> Callable[..., NDArray[np.float32]]:
    """A function k -> k-th surrogate of ``z`` (float32, same mean, same amplitude spectrum).

    The surrogates are fixed by ``seed`` and ``k`` alone, so they can be made
    in any order. Parallel inside each step (numba threads, FFT workers),
    one surrogate at a time, so peak memory is one surrogate's.
    """
    z32 = np.asarray(z, dtype=np.float32)
    shape = z32.shape
    spec = sfft.rfft2(z32, workers=workers or 1)
    amp = np.abs(spec).astype(np.float32)
    mean = float(np.mean(z32, dtype=np.float64))
    del spec
    base = int(seed) & 0xFFFFFFFF

    local = threading.local()

    def make(
        k: int, serial: bool = False, centred: bool = False, reuse: bool = False
    ) -> NDArray[np.float32]:
        # serial: on the calling thread only (the caller runs several at once).
        # centred: without the mean (``make.mean``, added as float32 by the caller).
        # reuse: the result lives in this thread's buffers, overwritten by its
        # next reuse call (for callers that are done with a surrogate by then).
        rng = np.random.default_rng([base, int(k)])
        bufs = None
        if reuse:
            bufs = getattr(local, "bufs", None)
            if bufs is None:
                bufs = local.bufs = {}
        f = _phase_spectrum(amp, rng, shape[0], shape[1] % 2 == 0, serial, bufs)
        dest = None
        if bufs is not None:
            dest = bufs.setdefault("out", np.empty(shape, dtype=np.float32))
        out = _irfft2(f, shape, 1 if serial else (workers or 1), dest)
        if not centred:
            out += np.float32(mean)
        return out

    make.mean = np.float32(mean)  # type: ignore[attr-defined]
    return make


@njit(cache=True, inline="always")
def _bin_of(v: float, edges: NDArray[np.float64]) -> int:
    """np.histogram's bin of v for sorted edges (last bin closed), -1 outside."""
    n = edges.size
    if v < edges[0] or v > edges[n - 1]:
        return -1
    lo, hi = 0, n - 1  # edges[lo] <= v, and v < edges[hi] unless v is the last edge
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if edges[mid] <= v:
            lo = mid
        else:
            hi = mid
    return min(lo, n - 2)


# Fast arctangent for the histogram passes: argument reduction to |y| <=
# tan(15 deg) (atan x = pi/6 + atan((x - 1/sqrt 3) / (1 + x/sqrt 3))) and the
# odd Taylor series to y**15; the first omitted term, y**17 / 17 <= 1.2e-11 rad,
# bounds the error (plus rounding, ~1e-16). Branch-free, so rows vectorise.
_TAN15 = 0.2679491924311227
_INV_SQRT3 = 0.5773502691896258
# A cell whose fast slope or aspect lies within this many degrees of a bin edge
# (or of the slope floor) is redone with the exact formula (1e-6 deg is ~1e5
# times the fast arctangent's error bound), so the counts are those of the
# exact formula (atan, hypot, atan2 from libm) cell for cell.
_EDGE_TOL_DEG = 1e-6


@njit(cache=True, inline="always")
def _atan01(x: float) -> float:
    """atan(x) for x in [0, 1], error <= 2e-11 rad."""
    big = x > _TAN15
    y = (x - _INV_SQRT3) / (1.0 + x * _INV_SQRT3) if big else x
    y2 = y * y
    p = -1.0 / 15.0
    p = p * y2 + 1.0 / 13.0
    p = p * y2 - 1.0 / 11.0
    p = p * y2 + 1.0 / 9.0
    p = p * y2 - 1.0 / 7.0
    p = p * y2 + 1.0 / 5.0
    p = p * y2 - 1.0 / 3.0
    p = p * y2 + 1.0
    return p * y + (math.pi / 6.0 if big else 0.0)


@njit(cache=True, inline="always")
def _exact_slope_aspect(gx: float, gy: float) -> tuple[float, float]:
    """Slope and aspect (degrees) as ``gradient_entropy`` computes them."""
    to_deg = 180.0 / math.pi
    slope = math.atan(math.hypot(gx, gy)) * to_deg
    aspect = (math.atan2(gy, gx) * to_deg + 180.0) % 360.0
    return slope, aspect


@njit(cache=True, inline="always")
def _sure_bin(v: float, edges: NDArray[np.float64], width: float) -> int:
    """Bin of v when every value within _EDGE_TOL_DEG of v has it; else -2."""
    if math.isnan(v):
        return -2
    n = edges.size
    g = v / width
    if g < 0.0 or g >= n - 1:
        return -2
    b = int(g)
    if edges[b] + _EDGE_TOL_DEG <= v and v < edges[b + 1] - _EDGE_TOL_DEG:
        return b
    return -2


@njit(cache=True, parallel=True)
def _gradient_kernel(  # pragma: no cover - compiled
    z: NDArray[np.float64],
    dy: float,
    dx: float,
    slope_edges: NDArray[np.float64],
    aspect_edges: NDArray[np.float64],
    floor: float,
    n_chunks: int,
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float64], np.int64]:
    ny, nx = z.shape
    s_cnt = np.zeros((n_chunks, slope_edges.size + 7), dtype=np.int64)
    a_cnt = np.zeros((n_chunks, aspect_edges.size + 7), dtype=np.int64)
    sums = np.zeros((n_chunks, 8))
    to_deg = 180.0 / math.pi
    half_pi = 0.5 * math.pi
    top = slope_edges[slope_edges.size - 1]
    s_w = slope_edges[1] - slope_edges[0]
    a_w = aspect_edges[1] - aspect_edges[0]
    per = (ny + n_chunks - 1) // n_chunks
    for c in prange(n_chunks):
        gxs = np.empty(nx)
        gys = np.empty(nx)
        g2s = np.empty(nx)
        sdrs = np.empty(nx)
        sl = np.empty(nx)
        asp = np.empty(nx)
        g2_sum = 0.0
        sdr_sum = 0.0
        n_exact = 0
        for i in range(c * per, min(ny, (c + 1) * per)):
            # numpy.gradient: central inside, one-sided first order at the edges
            i0, i1 = max(i - 1, 0), min(i + 1, ny - 1)
            hy_c = 2.0 * dy if i1 - i0 == 2 else dy
            for j in range(nx):
                gys[j] = (z[i1, j] - z[i0, j]) / hy_c
            gxs[0] = (z[i, 1] - z[i, 0]) / dx
            for j in range(1, nx - 1):
                gxs[j] = (z[i, j + 1] - z[i, j - 1]) / (2.0 * dx)
            gxs[nx - 1] = (z[i, nx - 1] - z[i, nx - 2]) / dx
            # Pass 1, branch-free (vectorised): |grad|^2, the Sdr term, fast slope and aspect.
            for j in range(nx):
                gx, gy = gxs[j], gys[j]
                g2 = gx * gx + gy * gy
                g2s[j] = g2
                sdrs[j] = g2 / (math.sqrt(1.0 + g2) + 1.0)
                g = math.sqrt(g2)
                inv = g > 1.0
                a = _atan01(1.0 / g if inv else g)
                sl[j] = (half_pi - a if inv else a) * to_deg
                ax, ay = abs(gx), abs(gy)
                hi, lo = max(ax, ay), min(ax, ay)
                t = _atan01(lo / hi if hi > 0.0 else 0.0)
                t = half_pi - t if ay > ax else t
                t = math.pi - t if gx < 0.0 else t
                t = -t if gy < 0.0 else t
                asp[j] = t * to_deg + 180.0
            # Pass 2, in row order as before (the sums are bit-identical): bins.
            for j in range(nx):
                g2_sum += g2s[j]
                sdr_sum += sdrs[j]
                v = sl[j]
                b = _sure_bin(min(v, top), slope_edges, s_w)
                sure_floor = abs(v - floor) > _EDGE_TOL_DEG
                steep = v > floor
                ab = -1
                if steep:
                    ab = _sure_bin(asp[j], aspect_edges, a_w)
                if b == -2 or not sure_floor or ab == -2:
                    n_exact += 1
                    slope, aspect = _exact_slope_aspect(gxs[j], gys[j])
                    b = _bin_of(min(slope, top), slope_edges)
                    steep = slope > floor
                    if steep:
                        ab = _bin_of(aspect, aspect_edges)
                if b >= 0:
                    s_cnt[c, b] += 1
                if steep:
                    if ab >= 0:
                        a_cnt[c, ab] += 1
                    sums[c, 2] += 1.0
        sums[c, 0] = g2_sum
        sums[c, 1] = sdr_sum
        sums[c, 3] = n_exact
    return (
        s_cnt.sum(axis=0)[: slope_edges.size - 1],
        a_cnt.sum(axis=0)[: aspect_edges.size - 1],
        sums.sum(axis=0)[:3],
        np.int64(sums[:, 3].sum()),
    )


def gradient_histograms(
    z: NDArray[np.float64],
    dx: float,
    dy: float,
    slope_edges: NDArray[np.float64],
    aspect_edges: NDArray[np.float64],
    floor: float,
) -> tuple[NDArray[np.int64], NDArray[np.int64], int, float, float]:
    """Slope and aspect histograms and gradient sums of a hole-free grid, one pass.

    What ``gradient_entropy`` histograms (numpy.gradient's differences,
    slope in degrees, aspect counter-clockwise from +x where the slope
    exceeds ``floor``, np.histogram's bins), plus sum |grad z|^2 and
    sum (sqrt(1 + |grad z|^2) - 1) for Sdq and Sdr, without a grid-sized
    temporary. Returns (slope counts, aspect counts, steep cells, sums).
    """
    arr = np.ascontiguousarray(z, dtype=np.float64)
    chunks = max(1, min(arr.shape[0], 4 * (os.cpu_count() or 1)))
    s, a, sums, _ = _gradient_kernel(
        arr, float(dy), float(dx), slope_edges, aspect_edges, float(floor), chunks
    )
    return s, a, round(float(sums[2])), float(sums[0]), float(sums[1])


@njit(cache=True, parallel=True)
def _moment_rows(z: NDArray[np.float64]) -> NDArray[np.float64]:  # pragma: no cover - compiled
    ny, nx = z.shape
    out = np.empty((ny, 6))
    for i in prange(ny):
        s1 = s2 = s3 = s4 = 0.0
        hi, lo = -np.inf, np.inf
        for j in range(nx):
            v = z[i, j]
            v2 = v**2
            s1 += abs(v)
            s2 += v2
            s3 += v**3
            s4 += v**4
            hi = max(hi, v)
            lo = min(lo, v)
        out[i, 0], out[i, 1], out[i, 2], out[i, 3], out[i, 4], out[i, 5] = s1, s2, s3, s4, hi, lo
    return out


def height_moments(z: NDArray[np.float64]) -> tuple[float, float, float, float, float, float]:
    """Means of |z|, z^2, z^3, z^4 and the max and min of a grid, one pass.

    Row sums in order, then numpy's pairwise sum over rows: the means agree
    with ``np.mean(z**p)`` to rounding (~1e-15 relative).
    """
    rows = _moment_rows(np.ascontiguousarray(z, dtype=np.float64))
    n = z.size
    s = rows[:, :4].sum(axis=0) / n
    return (
        float(s[0]),
        float(s[1]),
        float(s[2]),
        float(s[3]),
        float(rows[:, 4].max()),
        float(rows[:, 5].min()),
    )


@njit(cache=True, parallel=True)
def power_inplace(spec: NDArray[np.complex64]) -> None:  # pragma: no cover - compiled
    """spec = |spec|^2 + 0i in place, rounded as numpy's re*re + im*im in spec's dtype."""
    for i in prange(spec.shape[0]):
        row = spec[i]
        for j in range(row.size):
            re, im = row[j].real, row[j].imag
            re2 = re * re
            im2 = im * im
            row[j] = re2 + im2


@njit(cache=True, parallel=True, error_model="numpy")
def acf_full_normalised(  # pragma: no cover - compiled
    num: NDArray[np.float32], cols: NDArray[np.int64], ny: int, nx: int
) -> NDArray[np.float64]:
    """Centred ACF of a full grid from the kept rows of its circular correlation.

    ``num[:, cols]`` in float64, divided by the pairs per row lag (ny - |ty|),
    then per column lag (nx - |tx|), then by the zero lag so divided: the
    three in-place divisions of the numpy path, in the same order (same
    bits), in one pass; a flat grid gives NaN (0 / 0).
    """
    hy, hx = ny // 2, nx // 2
    out = np.empty((num.shape[0], cols.size))
    zero = np.float64(num[hy, cols[hx]]) / np.float64(ny) / np.float64(nx)
    for i in prange(num.shape[0]):
        dy = np.float64(ny - abs(i - hy))
        for j in range(cols.size):
            v = np.float64(num[i, cols[j]]) / dy
            v = v / np.float64(nx - abs(j - hx))
            out[i, j] = v / zero
    return out
