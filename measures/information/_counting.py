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
            shifted = arr.astype(np.int64) - lo
            present = np.bincount(shifted.ravel(), minlength=hi - lo + 1) > 0
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
