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


@njit(cache=True, inline="always")
def _digit_weight(rank: int | np.integer[Any] | np.bool_) -> int:
    # (D - 1 - rank)! for D = 4
    if rank == 0:
        return 6
    if rank == 1:
        return 2
    return 1


@njit(cache=True, parallel=True)
def _ordinal_kernel_22(  # pragma: no cover - compiled
    x: NDArray[np.floating[Any]],
    raw: NDArray[np.floating[Any]],
    use_key: bool,
    seed: int,
    n_chunks: int,
) -> tuple[NDArray[np.int64], np.int64]:
    """The 2 x 2 case of ``_ordinal_kernel`` written out (6 comparisons, no arrays)."""
    ny, nx = x.shape
    oy, ox = ny - 1, nx - 1
    counts = np.zeros((n_chunks, 24 * 8), dtype=np.int64)  # padded rows: no false sharing
    ties = np.zeros(n_chunks * 8, dtype=np.int64)
    rows_per = (oy + n_chunks - 1) // n_chunks
    s = np.uint64(seed) * _GOLDEN
    for c in prange(n_chunks):
        n_tie = 0
        for i in range(c * rows_per, min(oy, (c + 1) * rows_per)):
            c0 = i * nx
            c2 = c0 + nx
            for j in range(ox):
                v0, v1, v2, v3 = x[i, j], x[i, j + 1], x[i + 1, j], x[i + 1, j + 1]
                r0, r1, r2, r3 = raw[i, j], raw[i, j + 1], raw[i + 1, j], raw[i + 1, j + 1]
                tied_0 = (r0 == r1) | (r0 == r2) | (r0 == r3)
                tied = tied_0 | (r1 == r2) | (r1 == r3) | (r2 == r3)
                if tied:
                    n_tie += 1
                    b01 = _below(v0, v1, r0, r1, c0 + j, c0 + j + 1, use_key, s)[0]
                    b02 = _below(v0, v2, r0, r2, c0 + j, c2 + j, use_key, s)[0]
                    b03 = _below(v0, v3, r0, r3, c0 + j, c2 + j + 1, use_key, s)[0]
                    b12 = _below(v1, v2, r1, r2, c0 + j + 1, c2 + j, use_key, s)[0]
                    b13 = _below(v1, v3, r1, r3, c0 + j + 1, c2 + j + 1, use_key, s)[0]
                    b23 = _below(v2, v3, r2, r3, c2 + j, c2 + j + 1, use_key, s)[0]
                else:  # the common case on measured ground: plain comparisons
                    b01, b02, b03 = v0 <= v1, v0 <= v2, v0 <= v3
                    b12, b13, b23 = v1 <= v2, v1 <= v3, v2 <= v3
                k1 = 1 - b01
                k2 = (1 - b02) + (1 - b12)
                k3 = (1 - b03) + (1 - b13) + (1 - b23)
                rk1 = b01 + (1 - b12) + (1 - b13)
                rk2 = b02 + b12 + (1 - b23)
                rk3 = b03 + b13 + b23
                code = k1 * _digit_weight(rk1) + k2 * _digit_weight(rk2) + k3 * _digit_weight(rk3)
                counts[c, code] += 1
        ties[c * 8] = n_tie
    return counts[:, :24].sum(axis=0), ties.sum()


def ordinal_counts(
    x: NDArray,
    order: tuple[int, int],
    *,
    ties: str = "stable",
    seed: int = 0,
    raw: NDArray | None = None,
) -> tuple[NDArray[np.int64], int]:
    """Histogram over all D! patterns of ``order = (dx, dy)`` windows, and the tied-window count.

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
    if (wx, wy) == (2, 2):
        ref = ref.astype(arr.dtype, copy=False)
        counts, n_ties = _ordinal_kernel_22(
            arr, np.ascontiguousarray(ref), ties == "random", int(seed) & 0x7FFFFFFF, chunks
        )
        return counts, int(n_ties)
    counts, n_ties = _ordinal_kernel(
        arr, ref, wy, wx, ties == "random", int(seed) & 0x7FFFFFFF, chunks
    )
    return counts, int(n_ties)


def _phase_spectrum(
    amp: NDArray[np.float32], rng: np.random.Generator, ny: int, nx_even: bool
) -> NDArray[np.complex64]:
    """amp * exp(i phi) with phi uniform, Hermitian on the real columns.

    numpy's float32 generator and SIMD cos/sin: 4x faster here than a fused
    numba loop with a hash per mode.
    """
    phi = rng.random(amp.shape, dtype=np.float32)
    phi *= np.float32(2.0 * math.pi)
    out = np.empty(amp.shape, dtype=np.complex64)
    np.cos(phi, out=out.real)
    np.sin(phi, out=out.imag)
    out *= amp
    # Columns kx = 0 (and Nyquist for even nx) are transforms of real lines:
    # their -ky mode is the conjugate of +ky, and the self-mirrored modes are real.
    half = np.arange(1, (ny + 1) // 2)
    for col in (0, amp.shape[1] - 1) if nx_even else (0,):
        v = out[:, col]
        v[ny - half] = np.conj(v[half])
        selves = [0, ny // 2] if ny % 2 == 0 else [0]
        for r in selves:
            v[r] = amp[r, col] * (1.0 if phi[r, col] < math.pi else -1.0)
    out[0, 0] = 0.0
    return out


def phase_surrogates(
    z: NDArray, seed: int, *, workers: int | None = None
) -> Callable[[int], NDArray[np.float32]]:
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

    def make(k: int) -> NDArray[np.float32]:
        rng = np.random.default_rng([base, int(k)])
        f = _phase_spectrum(amp, rng, shape[0], shape[1] % 2 == 0)
        out = sfft.irfft2(f, s=shape, workers=workers or 1, overwrite_x=True)
        out += np.float32(mean)
        return out

    return make
