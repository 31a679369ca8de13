"""Block entropies, entropy rate, excess entropy and their 2D analogues; LZ76.

1D: H(L) is the entropy of length-L words, h(L) = H(L) - H(L-1) the entropy
gain (the entropy of the next symbol given the L-1 before it), E(L) = H(L) -
L h(L) the finite-L excess entropy and Delta^2 H(L) = h(L) - h(L-1) the
predictability gain (Crutchfield & Feldman 2003).

2D: h(m) is the entropy of a site given its m nearest causal neighbours (sites
earlier in raster order: above, or on the same row to the left), the entropy
density h is its value at the largest supported m and the excess entropy is
the sum of h(m) - h (Feldman & Crutchfield 2003). Both sides count words with
the one shared routine in :mod:`measures.information._counting`.

All quantities are in bits (log2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import InsufficientDataError, check_choice, check_positive_int
from measures.information._counting import (
    check_estimator,
    dense_symbols,
    excess_from_conditionals,
    prefix_entropies,
    site_and_neighbour_entropies,
)

__all__ = [
    "SAMPLES_PER_WORD",
    "BlockEntropies",
    "EntropyDensity2D",
    "LempelZivComplexity",
    "block_entropies",
    "causal_neighbourhood",
    "entropy_density_2d",
    "entropy_rate",
    "excess_entropy",
    "lz76_complexity",
    "predictability_gain",
]

#: Support rule for word lengths: the largest template of w sites used by
#: default satisfies ``k**w * SAMPLES_PER_WORD <= n`` (k the alphabet size,
#: at least 2; n the number of symbols), i.e. at least 100 samples per possible
#: word. With fewer, rare words of a skewed distribution are undersampled, the
#: Miller-Madow correction falls short and E(L) = H(L) - L h(L), which
#: multiplies the bias of h(L) by L, drifts upward (about 0.03 bit at 20 samples
#: per word for a biased coin). The same order as the rule k**(L+1) * 50 <= n
#: used for causal-state reconstruction (CHECKS A8b).
SAMPLES_PER_WORD = 100

_LENGTH_RULE = "largest L with max(k, 2)**L * 100 <= N (k alphabet size, N symbols)"
_NEIGHBOURHOOD_RULE = (
    "largest m with max(k, 2)**(m + 1) * 100 <= n_sites that fits the field "
    "(k alphabet size, m causal neighbours)"
)

# Causal neighbours are drawn from this radius (sites); 2**(m+1) * 100 <= n
# caps m near 20 for any field that fits in memory, well inside the ~60 sites.
_NEIGHBOURHOOD_RADIUS = 6


@dataclass(frozen=True)
class BlockEntropies:
    """Block-entropy profile of a symbol sequence (all arrays indexed by L-1).

    Attributes
    ----------
    lengths : ndarray of int, shape (L_max,)
        Word lengths 1 .. L_max.
    block_entropy : ndarray, bits
        H(L).
    entropy_gain : ndarray, bits/symbol
        h(L) = H(L) - H(L-1), with H(0) = 0.
    excess_entropy : ndarray, bits
        E(L) = H(L) - L h(L).
    predictability_gain : ndarray, bits/symbol
        Delta^2 H(L) = h(L) - h(L-1), with h(0) = log2 k.
    alphabet_size : int
        k, the number of distinct symbols observed.
    n_symbols : int
        N.
    estimator : str
        ``"miller_madow"`` or ``"plugin"``.
    max_length_rule : str
        How L_max was chosen (or ``"given"``).
    """

    lengths: NDArray[np.int64]
    block_entropy: NDArray[np.float64]
    entropy_gain: NDArray[np.float64]
    excess_entropy: NDArray[np.float64]
    predictability_gain: NDArray[np.float64]
    alphabet_size: int
    n_symbols: int
    estimator: str
    max_length_rule: str

    @property
    def entropy_rate(self) -> float:
        """h(L_max), bits/symbol: the estimate of h_mu."""
        return float(self.entropy_gain[-1])

    @property
    def excess_entropy_estimate(self) -> float:
        """E(L_max), bits: a lower estimate of E for finite-order processes."""
        return float(self.excess_entropy[-1])


def _supported_size(n: int, k: int) -> int:
    """Largest w with max(k, 2)**w * SAMPLES_PER_WORD <= n (0 if none)."""
    base = max(k, 2)
    w = 0
    while base ** (w + 1) * SAMPLES_PER_WORD <= n:
        w += 1
    return w


def block_entropies(
    symbols: ArrayLike,
    *,
    max_length: int | None = None,
    estimator: str = "miller_madow",
) -> BlockEntropies:
    """Block entropies H(L), entropy gains h(L) and excess entropies E(L).

    Parameters
    ----------
    symbols : array_like, shape (N,)
        Symbol sequence (integers or any sortable labels).
    max_length : int, optional
        Largest word length. Default: the largest L with
        ``max(k, 2)**L * 100 <= N`` (:data:`SAMPLES_PER_WORD`).
    estimator : {"miller_madow", "plugin"}, default "miller_madow"
        Word-entropy estimator (plug-in, or plug-in + (K-1)/(2 N ln 2)).

    Returns
    -------
    BlockEntropies

    Raises
    ------
    InsufficientDataError
        If even L = 1 is not supported (N < 100 max(k, 2)).

    References
    ----------
    J. P. Crutchfield & D. P. Feldman (2003), "Regularities unseen, randomness
    observed: Levels of entropy convergence", Chaos 13(1):25-54.

    Examples
    --------
    >>> b = block_entropies([0, 1] * 500, estimator="plugin")
    >>> [round(float(v), 3) for v in b.block_entropy[:3]]
    [1.0, 1.0, 1.0]
    """
    fn = "block_entropies"
    check_estimator(estimator, fn)
    dense, k = dense_symbols(symbols, fn, ndim=1)
    n = dense.size
    if max_length is None:
        length = _supported_size(n, k)
        rule = _LENGTH_RULE
        if length < 1:
            raise InsufficientDataError(
                "symbols", fn, f"at least {SAMPLES_PER_WORD * max(k, 2)} symbols", dense
            )
    else:
        length = check_positive_int("max_length", max_length, fn)
        rule = "given"
        if length > n:
            raise InsufficientDataError("symbols", fn, f"at least {length} symbols", dense)
    h_words, _ = prefix_entropies(dense, k, [(i,) for i in range(length)], estimator)
    gains = np.diff(h_words, prepend=0.0)
    lengths = np.arange(1, length + 1)
    return BlockEntropies(
        lengths=lengths,
        block_entropy=h_words,
        entropy_gain=gains,
        excess_entropy=h_words - lengths * gains,
        predictability_gain=np.diff(gains, prepend=math.log2(k) if k > 1 else 0.0),
        alphabet_size=k,
        n_symbols=n,
        estimator=estimator,
        max_length_rule=rule,
    )


def entropy_rate(
    symbols: ArrayLike,
    *,
    method: str = "block",
    max_length: int | None = None,
    estimator: str = "miller_madow",
) -> float:
    """Entropy rate h_mu of a symbol sequence, in bits per symbol.

    Parameters
    ----------
    symbols : array_like, shape (N,)
        Symbol sequence.
    method : {"block", "lz76"}, default "block"
        ``"block"``: the entropy gain h(L) = H(L) - H(L-1) at the largest
        supported L (see :func:`block_entropies` for the rule; ``max_length``
        and ``estimator`` are passed on). ``"lz76"``: c(N) log2(N) / N from
        the Lempel-Ziv phrase count, which converges slowly and from above
        (``max_length`` and ``estimator`` are ignored).

    Returns
    -------
    float, bits/symbol

    References
    ----------
    J. P. Crutchfield & D. P. Feldman (2003), Chaos 13:25 (block entropies);
    A. Lempel & J. Ziv (1976), IEEE Trans. Inf. Theory 22:75 (LZ76).

    Examples
    --------
    >>> round(entropy_rate([0, 1, 1] * 1000, estimator="plugin"), 6)
    0.0
    """
    check_choice("method", method, "entropy_rate", ("block", "lz76"))
    if method == "lz76":
        lz = lz76_complexity(symbols)
        return lz.normalised * math.log2(max(lz.alphabet_size, 2))
    return block_entropies(symbols, max_length=max_length, estimator=estimator).entropy_rate


def excess_entropy(
    symbols: ArrayLike, *, max_length: int | None = None, estimator: str = "miller_madow"
) -> float:
    """Excess entropy estimate E(L) = H(L) - L h(L) at the largest supported L, in bits.

    For a process of Markov order R this equals E once L > R; for
    infinite-order processes E(L) approaches E from below (slowly for the
    even process). Parameters as for :func:`block_entropies`.

    References
    ----------
    J. P. Crutchfield & D. P. Feldman (2003), Chaos 13:25.

    Examples
    --------
    >>> round(excess_entropy([0, 1] * 500, estimator="plugin"), 3)
    1.0
    """
    return block_entropies(
        symbols, max_length=max_length, estimator=estimator
    ).excess_entropy_estimate


def predictability_gain(
    symbols: ArrayLike, *, max_length: int | None = None, estimator: str = "miller_madow"
) -> NDArray[np.float64]:
    """Predictability gains Delta^2 H(L) = h(L) - h(L-1) for L = 1 .. L_max, bits/symbol.

    With h(0) = log2 k, the gains sum to the total predictability
    G = h(L_max) - log2 k <= 0. Parameters as for :func:`block_entropies`.

    References
    ----------
    J. P. Crutchfield & D. P. Feldman (2003), Chaos 13:25 (the h(0) = log2|A|
    convention is recalled from that paper).
    """
    return block_entropies(symbols, max_length=max_length, estimator=estimator).predictability_gain


@dataclass(frozen=True)
class LempelZivComplexity:
    """Lempel-Ziv (1976) complexity of a sequence.

    Attributes
    ----------
    phrases : int
        c(n), the number of phrases of the LZ76 parsing.
    normalised : float
        c(n) log_k(n) / n, which tends to h_mu / log2 k for a stationary
        ergodic source (k = max(alphabet_size, 2)).
    n_symbols : int
    alphabet_size : int
    """

    phrases: int
    normalised: float
    n_symbols: int
    alphabet_size: int


def _suffix_array(dense: NDArray[np.int64], k: int) -> NDArray[np.int64]:
    from pydivsufsort import divsufsort

    dtype = np.uint8 if k <= 256 else np.uint32
    return np.asarray(divsufsort(np.ascontiguousarray(dense, dtype=dtype)), dtype=np.int64)


def _lz76_phrases_quadratic(dense: NDArray[np.int64]) -> int:
    """Phrase count by the quadratic Kaspar-Schuster loop (reference for tests and bench)."""
    # The kernels' module imports numba: on first use, so importing measures stays cheap.
    from measures.information._lz76_kernel import phrases_quadratic

    return int(phrases_quadratic(np.ascontiguousarray(dense, dtype=np.int64)))


def lz76_complexity(symbols: ArrayLike) -> LempelZivComplexity:
    """Lempel-Ziv (1976) complexity: phrase count and normalised value.

    Parameters
    ----------
    symbols : array_like, shape (N,)
        Symbol sequence (integers or labels).

    Returns
    -------
    LempelZivComplexity
        ``phrases`` = c(N) and ``normalised`` = c(N) log_k(N) / N.

    Notes
    -----
    The parsing is Kaspar & Schuster's (each phrase is the longest prefix of
    the rest that also starts earlier, overlap allowed, plus one symbol),
    computed in O(n log n) from a suffix array (libdivsufsort through
    pydivsufsort) and a longest-previous-factor pass instead of their
    quadratic loop; the phrase counts are identical (tested).

    References
    ----------
    A. Lempel & J. Ziv (1976), "On the complexity of finite sequences", IEEE
    Trans. Inf. Theory IT-22(1):75-81; parsing algorithm of F. Kaspar &
    H. G. Schuster (1987), Phys. Rev. A 36:842.

    Examples
    --------
    >>> lz76_complexity([int(c) for c in "0001101001000101"]).phrases
    6
    """
    dense, k = dense_symbols(symbols, "lz76_complexity", ndim=1)
    n = dense.size
    s = np.ascontiguousarray(dense.ravel())
    from measures.information._lz76_kernel import phrases_from_suffix_array

    c = int(phrases_from_suffix_array(s, _suffix_array(s, k))) if n > 1 else n
    base = max(k, 2)
    normalised = c * math.log(n, base) / n if n > 1 else float(c)
    return LempelZivComplexity(phrases=c, normalised=normalised, n_symbols=n, alphabet_size=k)


@dataclass(frozen=True)
class EntropyDensity2D:
    """Conditional-entropy profile of a 2D symbol field.

    Attributes
    ----------
    neighbourhood_sizes : ndarray of int, shape (M + 1,)
        m = 0 .. M causal neighbours.
    conditional_entropy : ndarray, bits/site
        h(m) = H[site | its first m causal neighbours]; h(0) is the single-site
        entropy.
    entropy_density : float, bits/site
        h(M), the estimate of the entropy density.
    excess_entropy : float, bits
        sum_{m=0}^{M-1} (h(m) - h(M)).
    offsets : tuple of (int, int)
        The causal neighbours (row, column) relative to the site, in the order
        they join the neighbourhood.
    alphabet_size : int
    n_sites : int
    estimator : str
    max_neighbourhood_rule : str
    """

    neighbourhood_sizes: NDArray[np.int64]
    conditional_entropy: NDArray[np.float64]
    entropy_density: float
    excess_entropy: float
    offsets: tuple[tuple[int, int], ...]
    alphabet_size: int
    n_sites: int
    estimator: str
    max_neighbourhood_rule: str


def causal_neighbourhood(size: int) -> tuple[tuple[int, int], ...]:
    """The first ``size`` causal neighbours (row, column) of a site, nearest first.

    Causal sites come earlier in raster order: any row above, or the same row
    to the left. They are ordered by squared distance, then by row distance,
    then by column, so the sequence starts left (0, -1), up (-1, 0), up-left
    (-1, -1), up-right (-1, 1), (0, -2), (-2, 0), ... This ordering is ours;
    Feldman & Crutchfield (2003) grow comparable templates.

    Examples
    --------
    >>> causal_neighbourhood(4)
    ((0, -1), (-1, 0), (-1, -1), (-1, 1))
    """
    size = check_positive_int("size", size, "causal_neighbourhood", minimum=0)
    r = _NEIGHBOURHOOD_RADIUS
    sites = [
        (dy, dx)
        for dy in range(-r, 1)
        for dx in range(-r, r + 1)
        if (dy < 0 or dx < 0) and dy * dy + dx * dx <= r * r
    ]
    sites.sort(key=lambda s: (s[0] ** 2 + s[1] ** 2, abs(s[0]), s[1]))
    if size > len(sites):
        raise InsufficientDataError(
            "size", "causal_neighbourhood", f"at most {len(sites)} neighbours", size
        )
    return tuple(sites[:size])


def _fits(offsets: tuple[tuple[int, int], ...], shape: tuple[int, ...]) -> bool:
    if not offsets:
        return True
    rows = [o[0] for o in offsets] + [0]
    cols = [o[1] for o in offsets] + [0]
    return max(rows) - min(rows) < shape[0] and max(cols) - min(cols) < shape[1]


def entropy_density_2d(
    field_symbols: ArrayLike,
    *,
    max_neighbourhood: int | None = None,
    estimator: str = "miller_madow",
) -> EntropyDensity2D:
    """Entropy density and excess entropy of a 2D symbol field.

    Parameters
    ----------
    field_symbols : array_like, shape (ny, nx)
        Symbols on a grid, e.g. from :func:`measures.quantile_symbols` or
        :func:`measures.ordinal_patterns` applied to a heightmap.
    max_neighbourhood : int, optional
        Largest number M of causal neighbours. Default: the largest m with
        ``max(k, 2)**(m + 1) * 100 <= ny * nx`` whose template fits the field.
    estimator : {"miller_madow", "plugin"}, default "miller_madow"

    Returns
    -------
    EntropyDensity2D
        h(m) for m = 0 .. M, each estimated as H(site and N_m) - H(N_m) over
        the sites whose whole neighbourhood N_m lies inside the field; the
        entropy density h(M); the excess entropy sum_m (h(m) - h(M)).

    References
    ----------
    D. P. Feldman & J. P. Crutchfield (2003), "Structural information in
    two-dimensional patterns: Entropy convergence and excess entropy",
    Phys. Rev. E 67:051104.

    Examples
    --------
    >>> board = np.indices((40, 40)).sum(axis=0) % 2
    >>> r = entropy_density_2d(board, estimator="plugin")
    >>> round(r.entropy_density, 6), round(r.excess_entropy, 6)
    (0.0, 1.0)
    """
    fn = "entropy_density_2d"
    check_estimator(estimator, fn)
    dense, k = dense_symbols(field_symbols, fn, ndim=2)
    n_sites = dense.size
    if max_neighbourhood is None:
        size = _supported_size(n_sites, k) - 1
        if size < 0:
            raise InsufficientDataError(
                "field_symbols", fn, f"at least {SAMPLES_PER_WORD * max(k, 2)} sites", dense
            )
        while size > 0 and not _fits(causal_neighbourhood(size), dense.shape):
            size -= 1
        rule = _NEIGHBOURHOOD_RULE
    else:
        size = check_positive_int("max_neighbourhood", max_neighbourhood, fn, minimum=0)
        if not _fits(causal_neighbourhood(size), dense.shape):
            raise InsufficientDataError(
                "field_symbols", fn, f"large enough for {size} causal neighbours", dense
            )
        rule = "given"
    offsets = causal_neighbourhood(size)
    # Site and neighbour words counted in one pass (same counts as two
    # prefix_entropies calls).
    joint, neighbours = site_and_neighbour_entropies(dense, k, offsets, estimator)
    conditional = joint.copy()
    if size:
        conditional[1:] = joint[1:] - neighbours
    conditional = np.maximum(conditional, 0.0)
    return EntropyDensity2D(
        neighbourhood_sizes=np.arange(size + 1),
        conditional_entropy=conditional,
        entropy_density=float(conditional[-1]),
        excess_entropy=excess_from_conditionals(conditional),
        offsets=offsets,
        alphabet_size=k,
        n_sites=n_sites,
        estimator=estimator,
        max_neighbourhood_rule=rule,
    )
