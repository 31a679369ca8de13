"""Word counting and entropy estimation shared by the 1D and 2D estimators.

A "word" is the tuple of symbols read at a fixed set of offsets from an
anchor site: offsets ``(0,), (1,), ..., (L-1,)`` give the length-L blocks of
a series; a causal neighbourhood plus ``(0, 0)`` gives the 2D templates of
Feldman & Crutchfield (2003). Words are packed into int64 codes one offset at
a time (code * k + symbol), so a growing template costs one vectorised pass
per added site, and counted with ``bincount`` (or ``np.unique`` when the code
range is sparse). Block entropies and 2D conditional entropies both come out
of :func:`prefix_entropies`; there is no second copy of this logic.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import InsufficientDataError, InvalidParameterError

ESTIMATORS = ("miller_madow", "plugin")

# Above this code range the packed codes are renumbered densely (np.unique) so
# that one more multiplication by k cannot overflow int64.
_MAX_CODE = 2**62


def dense_symbols(
    symbols: ArrayLike, function: str, *, ndim: int | tuple[int, ...]
) -> tuple[NDArray[np.int64], int]:
    """Relabel arbitrary symbols to ``0 .. k-1`` (sorted order); return them and k."""
    arr = np.asarray(symbols)
    dims = (ndim,) if isinstance(ndim, int) else ndim
    if arr.ndim not in dims:
        raise InvalidParameterError("symbols", function, f"an array with ndim in {dims}", arr)
    if arr.size == 0:
        raise InsufficientDataError("symbols", function, "a non-empty array", arr)
    if arr.dtype.kind in "biu":
        # Fast path for integer symbols with a modest range: a lookup table
        # instead of a full sort.
        lo, hi = int(arr.min()), int(arr.max())
        if hi - lo <= 4 * arr.size + 1024:
            # No copy of int64 labels from 0 (callers only read the dense labels).
            shifted = arr.astype(np.int64, copy=lo != 0)
            if lo:
                shifted -= lo
            present = np.bincount(shifted.ravel(), minlength=hi - lo + 1) > 0
            if present.all():
                # Already dense (lo .. hi all present): the labels are the values - lo.
                return shifted, int(present.size)
            table = np.cumsum(present) - 1
            return table[shifted].astype(np.int64), int(present.sum())
    elif arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)):
            raise InvalidParameterError("symbols", function, "finite symbols (no NaN)", arr)
    elif arr.dtype.kind not in "USO":
        raise InvalidParameterError("symbols", function, "integer or label symbols", arr)
    values, dense = np.unique(arr, return_inverse=True)
    return dense.reshape(arr.shape).astype(np.int64), len(values)


def check_estimator(estimator: str, function: str) -> str:
    """Return ``estimator`` if it is a known entropy estimator, else raise."""
    if estimator not in ESTIMATORS:
        raise InvalidParameterError("estimator", function, f"one of {ESTIMATORS!r}", estimator)
    return estimator


def entropy_of_counts(counts: NDArray[np.int64], estimator: str) -> float:
    """Shannon entropy (bits) of occupied-bin counts.

    ``"plugin"`` is the maximum-likelihood estimate; ``"miller_madow"`` adds
    the first-order bias correction (K - 1) / (2 N ln 2) bits, K the number of
    occupied bins and N the number of samples (G. A. Miller 1955, "Note on the
    bias of information estimates"; citation from memory, formula textbook).
    """
    n = int(counts.sum())
    p = counts / n
    h = float(-np.sum(p * np.log2(p)))
    if estimator == "miller_madow":
        h += (len(counts) - 1) / (2.0 * n * np.log(2.0))
    return max(h, 0.0)


def _counts(codes: NDArray[np.int64], bound: int) -> NDArray[np.int64]:
    flat = codes.ravel()
    if bound <= max(2**20, 4 * flat.size):
        counts = np.bincount(flat, minlength=1)
        return counts[counts > 0]
    return np.unique(flat, return_counts=True)[1]


def prefix_entropies(
    dense: NDArray[np.int64],
    k: int,
    offsets: Sequence[tuple[int, ...]],
    estimator: str,
) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Entropy of the words read at each prefix ``offsets[:j]``, j = 1 .. len(offsets).

    Parameters
    ----------
    dense : ndarray of int64, any shape
        Symbols ``0 .. k-1``.
    k : int
        Alphabet size.
    offsets : sequence of int tuples, each of length ``dense.ndim``
        Template sites relative to the anchor, in the order they are added.
    estimator : {"miller_madow", "plugin"}

    Returns
    -------
    entropies : ndarray, shape (len(offsets),), bits
        Entry j-1 is the entropy of the j-site word, estimated over every
        anchor at which all j sites fall inside the array.
    n_words : ndarray of int64, shape (len(offsets),)
        Number of anchors (samples) behind each entry; 0 once the template no
        longer fits (the entropy is then NaN).
    """
    shape = np.array(dense.shape)
    lo = np.zeros(dense.ndim, dtype=np.int64)
    hi = shape.copy()
    codes = np.zeros(dense.shape, dtype=np.int64)
    bound = 1
    entropies = np.full(len(offsets), np.nan)
    n_words = np.zeros(len(offsets), dtype=np.int64)
    for j, offset in enumerate(offsets):
        off = np.asarray(offset, dtype=np.int64)
        new_lo = np.maximum(lo, -off)
        new_hi = np.minimum(hi, shape - off)
        if np.any(new_hi <= new_lo):
            break
        keep = tuple(slice(a - b, c - b) for a, b, c in zip(new_lo, lo, new_hi, strict=True))
        read = tuple(slice(a + o, c + o) for a, o, c in zip(new_lo, off, new_hi, strict=True))
        if bound * k >= _MAX_CODE:
            cropped = codes[keep]
            _, inverse = np.unique(cropped, return_inverse=True)
            codes = inverse.reshape(cropped.shape).astype(np.int64) * k + dense[read]
            bound = (int(inverse.max()) + 1) * k
        else:
            codes = codes[keep] * k + dense[read]
            bound *= k
        lo, hi = new_lo, new_hi
        entropies[j] = entropy_of_counts(_counts(codes, bound), estimator)
        n_words[j] = codes.size
    return entropies, n_words


def excess_from_conditionals(conditional: NDArray[np.float64]) -> float:
    """Finite-template excess entropy: sum over the profile of (h(m) - h(last)).

    The 1D form E(L) = H(L) - L h(L) and the 2D form of Feldman & Crutchfield
    (2003) are both this sum over the conditional-entropy profile.
    """
    return float(np.sum(conditional) - len(conditional) * conditional[-1])


# Largest histogram the compiled 2-D path allocates per row chunk (bins).
_KERNEL_MAX_BINS = 2**22


def _site_kernel() -> Any:
    """Compiled counting of :func:`site_and_neighbour_entropies` (numba, built on first use)."""
    from numba import njit, prange

    @njit(cache=True, parallel=True)
    def count(  # pragma: no cover - compiled
        dense: NDArray[np.uint8],
        k: int,
        offs: NDArray[np.int64],
        box: NDArray[np.int64],
        jt_base: NDArray[np.int64],
        mult: NDArray[np.int64],
        n_jt: int,
        n_chunks: int,
    ) -> NDArray[np.int64]:
        # Site-major: each anchor builds its word one neighbour at a time while it
        # lies in that prefix's anchor box (boxes shrink as neighbours are added)
        # and counts only its longest site-plus-neighbour word; the shorter words
        # and the neighbour words are marginals of these (see the caller), so one
        # increment per site instead of two per prefix.
        n_steps = offs.shape[0]
        jt = np.zeros((n_chunks, n_jt), dtype=np.int64)
        lo0, hi0 = box[0, 0], box[0, 2]
        per = (hi0 - lo0 + n_chunks - 1) // n_chunks
        last_s = n_steps - 1
        top = jt_base[last_s]
        for c in prange(n_chunks):
            for i in range(lo0 + c * per, min(hi0, lo0 + (c + 1) * per)):
                # Sites inside the last (smallest) box reach every prefix: their
                # words are built without the per-step box test (boxes are nested).
                j_in0, j_in1 = box[0, 1], box[0, 1]
                if box[last_s, 0] <= i < box[last_s, 2]:
                    j_in0, j_in1 = box[last_s, 1], box[last_s, 3]
                for j in range(j_in0, j_in1):
                    code = 0
                    for s in range(n_steps):
                        code = code * k + dense[i + offs[s, 0], j + offs[s, 1]]
                    jt[c, top + dense[i, j] * mult[last_s] + code] += 1
                for j in range(box[0, 1], box[0, 3]):
                    if j_in0 <= j < j_in1:
                        continue
                    site = dense[i, j]
                    code = 0
                    last = 0
                    for s in range(n_steps):
                        if i < box[s, 0] or i >= box[s, 2] or j < box[s, 1] or j >= box[s, 3]:
                            break
                        code = code * k + dense[i + offs[s, 0], j + offs[s, 1]]
                        last = s
                    jt[c, jt_base[last] + site * mult[last] + code] += 1
        return jt.sum(axis=0)

    return count


_COUNT: Any = None


def site_and_neighbour_entropies(
    dense: NDArray[np.int64],
    k: int,
    offsets: Sequence[tuple[int, int]],
    estimator: str,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Both ``prefix_entropies`` of a 2-D field's entropy density in one compiled pass.

    Returns ``(joint, neighbours)``: ``prefix_entropies(dense, k, [(0, 0),
    *offsets])`` and ``prefix_entropies(dense, k, offsets)``. The word of the
    site and its first j neighbours is the site's symbol times ``k**j`` plus
    the neighbours' word, over the same anchors (the site itself crops
    nothing), so one pass over the sites builds every word and counts both.
    The counts, hence the entropies, are those of the two calls, bit for bit;
    large alphabets or templates take the two calls.
    """
    global _COUNT
    n_off = len(offsets)
    bins = sum(k ** (j + 1) + k ** (j + 2) for j in range(n_off))
    if dense.ndim != 2 or n_off == 0 or k > 255 or bins > _KERNEL_MAX_BINS:
        joint, _ = prefix_entropies(dense, k, [(0, 0), *offsets], estimator)
        nbs, _ = prefix_entropies(dense, k, offsets, estimator) if n_off else (np.array([]), 0)
        return joint, nbs
    if _COUNT is None:
        _COUNT = _site_kernel()
    ny, nx = dense.shape
    joint = np.full(n_off + 1, np.nan)
    nbs = np.full(n_off, np.nan)
    joint[0] = entropy_of_counts(_counts(dense, k), estimator)
    # Anchor box of each prefix (rows lo, cols lo, rows hi, cols hi), as prefix_entropies crops.
    boxes = []
    lo0, lo1, hi0, hi1 = 0, 0, ny, nx
    for o0, o1 in offsets:
        n0, n1 = max(lo0, -o0), max(lo1, -o1)
        m0, m1 = min(hi0, ny - o0), min(hi1, nx - o1)
        if m0 <= n0 or m1 <= n1:
            break
        lo0, lo1, hi0, hi1 = n0, n1, m0, m1
        boxes.append((lo0, lo1, hi0, hi1))
    steps = len(boxes)
    if steps == 0:
        return joint, nbs
    size_nb = np.array([k ** (j + 1) for j in range(steps)], dtype=np.int64)
    jt_base = np.concatenate([[0], np.cumsum(size_nb * k)[:-1]]).astype(np.int64)
    ends = _COUNT(
        np.ascontiguousarray(dense, dtype=np.uint8),
        k,
        np.array(offsets[:steps], dtype=np.int64).reshape(steps, 2),
        np.array(boxes, dtype=np.int64),
        jt_base,
        size_nb,
        int((size_nb * k).sum()),
        max(1, min(8, boxes[0][2] - boxes[0][0])),
    )
    # Words ending at prefix j, plus the marginal of prefix j + 1's words over
    # their last neighbour (the word at j + 1 is the word at j times k plus that
    # neighbour's symbol, over a subset of j's anchors): every anchor of prefix
    # j once. The neighbour words are the marginals over the site's symbol (the
    # site crops nothing, so both share the anchors). Integer sums: exact.
    longer = None
    for j in range(steps - 1, -1, -1):
        b = ends[jt_base[j] : jt_base[j] + size_nb[j] * k]
        if longer is not None:
            b = b + longer.reshape(-1, k).sum(axis=1)
        longer = b
        a = b.reshape(k, -1).sum(axis=0)
        nbs[j] = entropy_of_counts(a[a > 0], estimator)
        joint[j + 1] = entropy_of_counts(b[b > 0], estimator)
    return joint, nbs
