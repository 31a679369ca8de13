"""Symbolisation of 1D series and 2D fields: ordinal patterns, bins, partitions.

Every function here maps real data onto small non-negative integer symbols,
with one convention for series ``(N,)`` and fields ``(ny, nx)``, so that the
block-entropy and ordinal estimators downstream run one code path for both.

Ordinal pattern codes
---------------------
A window of ``D`` values is summarised by the permutation that sorts it
(ascending, ties kept in order of appearance, i.e. a stable argsort). The code
of a window is the rank of that permutation in lexicographic order among all
``D!`` permutations (its Lehmer code read in the factorial number system), so
codes run over ``0 .. D! - 1`` and sorting the codes sorts the permutations
lexicographically. ``(0, 1, ..., D-1)`` (an increasing window) is code 0 and
``(D-1, ..., 1, 0)`` (a decreasing window) is code ``D! - 1``. 2D windows are
read row by row (``dy`` rows of ``dx`` columns) before sorting, after Ribeiro
et al. (2012).

Ties
----
Equal values in a window (quantised heights, integer DEMs, a scanner's
resolution steps) have no order. ``ties="stable"`` keeps them in order of
appearance (the earlier value ranks lower), which turns every tie into an
increasing run and biases the pattern distribution towards the monotone
patterns. ``ties="random"`` (seeded random tie-breaking) gives every sample
one uniform random key and breaks each tie by it, which is the same as adding
noise smaller than the resolution (a dither): tied windows spread over the
orders they are compatible with. The share of windows that contain a tie
(:func:`tie_fraction`) is reported by every ordinal function as a diagnostic;
when it is large the pixel-scale order is simply not in the data and no tie
rule recovers it (module tests: a smooth self-affine surface, Hurst 0.8,
rounded to 0.05 Sq has ties in 97 % of its 2 x 2 windows and its permutation
entropy moves by -0.13 with stable ties and +0.06 with random ones).
References: M. Zanin et al. (2012), Entropy 14:1553 and L. Zunino et al.
(2017), Phys. Lett. A 381:1883 discuss the bias of equal values (citations
from memory); C. Bian et al. (2012), Phys. Rev. E 85:021906, code tied
patterns as symbols of their own instead (not done here: it makes the
alphabet, and the score, depend on the resolution).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_positive_int,
)

__all__ = [
    "MIN_WINDOWS_PER_PATTERN",
    "STATE_CELL_COUNT",
    "TIE_RULES",
    "StateSymbols",
    "joint_symbols",
    "ordinal_patterns",
    "quantile_symbols",
    "state_symbols",
    "supported_word_length",
    "threshold_symbols",
    "tie_fraction",
]

#: Tie rules of the ordinal functions (module notes).
TIE_RULES = ("stable", "random")

#: Default number of windows required per possible pattern (n_windows >= 10 * D!).
#: With fewer, most patterns are seen a handful of times and the normalised
#: permutation entropy of pure noise drops visibly below 1: 512 x 512 noise with
#: 3 x 3 patches (9! > windows) scores H = 0.94 instead of 1. At 10 windows per
#: pattern the plug-in deficit (D! - 1) / (2 n ln D!) is below 0.01 for D >= 3.
MIN_WINDOWS_PER_PATTERN = 10.0

# D! must fit in int64 with room for the Horner accumulation below.
_MAX_PATTERN_LENGTH = 20


def _parse_order(order: object, ndim: int, function: str) -> tuple[int, int]:
    """Return (dx, dy): the window width along the last axis and height along the first."""
    if ndim == 1:
        return check_positive_int("order", order, function, minimum=2), 1
    if not isinstance(order, (tuple, list)) or len(order) != 2:
        raise InvalidParameterError("order", function, "a pair (dx, dy) for a 2D field", order)
    dx = check_positive_int("order", order[0], function)
    dy = check_positive_int("order", order[1], function)
    if dx * dy < 2:
        raise InvalidParameterError("order", function, "a patch of at least 2 sites", order)
    return dx, dy


def _parse_delay(delay: object, ndim: int, function: str) -> tuple[int, int]:
    """Return (delay_x, delay_y); an int applies to both axes of a field."""
    if ndim == 2 and isinstance(delay, (tuple, list)):
        if len(delay) != 2:
            raise InvalidParameterError("delay", function, "an int or a pair", delay)
        return (
            check_positive_int("delay", delay[0], function),
            check_positive_int("delay", delay[1], function),
        )
    d = check_positive_int("delay", delay, function)
    return d, d


def _window_columns(
    x: NDArray[np.float64], dx: int, dy: int, tx: int, ty: int
) -> list[NDArray[np.float64]]:
    """Views of the field, one per window element in row-major window order.

    Element ``(r, c)`` of every window, for all windows at once, is the slice
    of ``x`` shifted by ``(r * ty, c * tx)``; no window array is materialised.
    """
    x2 = x.reshape(1, -1) if x.ndim == 1 else x
    ny = x2.shape[0] - (dy - 1) * ty
    nx = x2.shape[1] - (dx - 1) * tx
    return [x2[r * ty : r * ty + ny, c * tx : c * tx + nx] for r in range(dy) for c in range(dx)]


def _lehmer_codes(
    columns: list[NDArray[np.float64]], keys: list[NDArray[np.float64]] | None = None
) -> NDArray[np.int64]:
    """Lexicographic rank of the argsort permutation of each window.

    For the sorting permutation pi, digit i of the Lehmer code is the number of
    later entries of pi smaller than pi_i. Written per window position q this
    is the number of earlier values strictly greater than x_q, placed at digit
    rank(q); with a strict order this needs only the D(D-1)/2 pairwise
    comparisons, no sort. Ties: the earlier value ranks lower (stable), or,
    with ``keys``, the value with the smaller key ranks lower.
    """
    d = len(columns)
    shape = columns[0].shape
    rank = [np.zeros(shape, dtype=np.int8) for _ in range(d)]
    inversions = [np.zeros(shape, dtype=np.int8) for _ in range(d)]
    for q in range(1, d):
        for p in range(q):
            if keys is None:
                earlier_not_greater = columns[p] <= columns[q]
            else:
                earlier_not_greater = columns[p] < columns[q]
                equal = columns[p] == columns[q]
                if equal.any():  # the keys matter only where values tie
                    equal &= keys[p] <= keys[q]
                    earlier_not_greater |= equal
            rank[q] += earlier_not_greater
            rank[p] += ~earlier_not_greater
            inversions[q] += ~earlier_not_greater
    weights = np.array([math.factorial(d - 1 - r) for r in range(d)], dtype=np.int64)
    code = np.zeros(shape, dtype=np.int64)
    for q in range(d):
        code += inversions[q] * weights[rank[q]]
    return code


def _tied_windows(columns: list[NDArray[np.float64]]) -> NDArray[np.bool_]:
    """True for windows holding at least two equal values."""
    tied = np.zeros(columns[0].shape, dtype=bool)
    for q in range(1, len(columns)):
        for p in range(q):
            tied |= columns[p] == columns[q]
    return tied


def _prepare_windows(
    x: ArrayLike,
    order: int | tuple[int, int],
    delay: int | tuple[int, int],
    min_windows_per_pattern: float,
    fn: str,
) -> tuple[NDArray[np.float64], list[NDArray[np.float64]], tuple[int, int, int, int]]:
    arr = as_float_array("x", x, fn, ndim=(1, 2))
    dx, dy = _parse_order(order, arr.ndim, fn)
    tx, ty = _parse_delay(delay, arr.ndim, fn)
    d = dx * dy
    if d > _MAX_PATTERN_LENGTH:
        raise InvalidParameterError("order", fn, f"at most {_MAX_PATTERN_LENGTH} sites", order)
    columns = _window_columns(arr, dx, dy, tx, ty)
    n_windows = columns[0].size
    needed = float(min_windows_per_pattern) * math.factorial(d)
    if n_windows < 1 or n_windows < needed:
        raise InsufficientDataError(
            "x",
            fn,
            f"long enough for >= {min_windows_per_pattern:g} windows per pattern "
            f"({needed:.0f} windows for {math.factorial(d)} patterns; got {n_windows})",
            arr,
        )
    return arr, columns, (dx, dy, tx, ty)


def _check_ties(ties: str, fn: str) -> str:
    if ties not in TIE_RULES:
        raise InvalidParameterError("ties", fn, f"one of {TIE_RULES!r}", ties)
    return ties


def _codes_with_rule(
    arr: NDArray[np.float64],
    columns: list[NDArray[np.float64]],
    geometry: tuple[int, int, int, int],
    ties: str,
    seed: int | None,
) -> NDArray[np.int64]:
    """Codes under a tie rule (random keys drawn per sample from ``seed``)."""
    if ties == "stable":
        return _lehmer_codes(columns)
    dx, dy, tx, ty = geometry
    keys = np.random.default_rng(seed).random(arr.shape)
    return _lehmer_codes(columns, _window_columns(keys, dx, dy, tx, ty))


def tie_fraction(
    x: ArrayLike, *, order: int | tuple[int, int], delay: int | tuple[int, int] = 1
) -> float:
    """Share of the ordinal windows of a series or field that contain equal values.

    Parameters
    ----------
    x, order, delay
        As for :func:`ordinal_patterns`.

    Returns
    -------
    float in [0, 1]
        Windows with at least one pair of equal values / all windows. A
        diagnostic of quantisation: the order inside such windows is not in
        the data (module notes).

    Examples
    --------
    >>> tie_fraction([1.0, 1.0, 2.0, 3.0, 3.0], order=2)
    0.5
    """
    _, columns, _ = _prepare_windows(x, order, delay, 0.0, "tie_fraction")
    return float(_tied_windows(columns).mean())


def ordinal_patterns(
    x: ArrayLike,
    *,
    order: int | tuple[int, int],
    delay: int | tuple[int, int] = 1,
    min_windows_per_pattern: float = MIN_WINDOWS_PER_PATTERN,
    ties: str = "stable",
    seed: int = 0,
) -> NDArray[np.int64]:
    """Ordinal pattern code of every overlapping window of a series or field.

    Parameters
    ----------
    x : array_like, shape (N,) or (ny, nx), float
        Series or field (e.g. a heightmap in m). NaN and Inf are rejected.
    order : int or (int, int)
        Pattern length ``D`` for a series (>= 2); patch size ``(dx, dy)``
        (columns, rows) for a field, with ``D = dx * dy``.
    delay : int or (int, int), default 1
        Spacing between window elements, in samples; for a field an int
        applies to both axes and a pair is ``(delay_x, delay_y)``.
    min_windows_per_pattern : float, default 10
        Require ``n_windows >= min_windows_per_pattern * D!`` (pass 0 to
        switch the check off, e.g. for worked examples).
    ties : {"stable", "random"}, default "stable"
        Tie rule (module notes): order of appearance, or seeded random
        tie-breaking (one uniform key per sample, drawn from ``seed``).
    seed : int, default 0
        Seed of the random keys (``ties="random"`` only).

    Returns
    -------
    ndarray of int64, shape (N - (D-1) delay,) or (ny - (dy-1) delay_y, nx - (dx-1) delay_x)
        Codes in ``0 .. D! - 1``: the lexicographic rank of the argsort of
        each window (module docstring). The share of windows with ties is
        :func:`tie_fraction`. The code order is the order of
        ordpy's ``ordinal_distribution(..., return_missing=True, ordered=True)``.

    Raises
    ------
    InsufficientDataError
        If there are fewer windows than ``min_windows_per_pattern * D!``.

    References
    ----------
    C. Bandt & B. Pompe (2002), Phys. Rev. Lett. 88:174102.
    H. V. Ribeiro et al. (2012), PLoS ONE 7(8):e40689 (2D patches).

    Examples
    --------
    >>> ordinal_patterns([4, 7, 9, 10, 6, 11, 3], order=2, min_windows_per_pattern=0)
    array([0, 0, 0, 1, 0, 1])
    """
    fn = "ordinal_patterns"
    _check_ties(ties, fn)
    arr, columns, geometry = _prepare_windows(x, order, delay, min_windows_per_pattern, fn)
    codes = _codes_with_rule(arr, columns, geometry, ties, seed)
    return codes.reshape(-1) if arr.ndim == 1 else codes


def quantile_symbols(x: ArrayLike, *, n_bins: int) -> NDArray[np.int64]:
    """Equiprobable binning: symbol ``j`` for values between the j-th and (j+1)-th quantile.

    Parameters
    ----------
    x : array_like, shape (N,) or (ny, nx), float
        Series or field; NaN and Inf are rejected.
    n_bins : int
        Number of symbols (>= 2).

    Returns
    -------
    ndarray of int64, same shape as ``x``
        Symbols in ``0 .. n_bins - 1``. Bin edges are the sample quantiles
        ``j / n_bins`` (numpy's linear rule); a value equal to an edge goes to
        the upper bin, and equal values always share a symbol, so heavy ties
        make the bins unequal rather than splitting one value across symbols.

    References
    ----------
    Equiprobable (maximum-entropy) partitions are common practice in symbolic
    dynamics of measured series, e.g. C. S. Daw, C. E. A. Finney & E. R.
    Tracy (2003), Rev. Sci. Instrum. 74:915 (citation from memory).

    Examples
    --------
    >>> quantile_symbols([0.1, 0.4, 0.3, 0.2], n_bins=2)
    array([0, 1, 1, 0])
    """
    fn = "quantile_symbols"
    arr = as_float_array("x", x, fn, ndim=(1, 2))
    k = check_positive_int("n_bins", n_bins, fn, minimum=2)
    edges = np.quantile(arr, np.arange(1, k) / k)
    if k > 8 or np.any(np.diff(edges) < 0):
        return np.searchsorted(edges, arr, side="right").astype(np.int64, copy=False)
    # The number of edges <= x (searchsorted's side="right" on sorted edges), by
    # one comparison per edge: about twice as fast for a few bins, same symbols.
    out = np.zeros(arr.shape, dtype=np.int64)
    for e in edges:
        out += arr >= e
    return out


def threshold_symbols(x: ArrayLike, *, thresholds: float | Sequence[float]) -> NDArray[np.int64]:
    """Partition by fixed thresholds: the symbol is the number of thresholds <= x.

    Parameters
    ----------
    x : array_like, shape (N,) or (ny, nx), float
        Series or field; NaN and Inf are rejected.
    thresholds : float or sequence of float
        Strictly increasing, finite cut points (in the units of ``x``).

    Returns
    -------
    ndarray of int64, same shape as ``x``
        Symbols in ``0 .. len(thresholds)``.

    References
    ----------
    For the logistic map x -> 4x(1-x) the cut at 1/2 is a generating
    partition; its symbolic dynamics is the fair-coin full shift (e.g.
    J. P. Crutchfield & D. P. Feldman 2003, Chaos 13:25).

    Examples
    --------
    >>> threshold_symbols([0.2, 0.5, 0.9], thresholds=0.5)
    array([0, 1, 1])
    """
    fn = "threshold_symbols"
    arr = as_float_array("x", x, fn, ndim=(1, 2))
    cuts = np.atleast_1d(np.asarray(thresholds, dtype=np.float64))
    if cuts.ndim != 1 or cuts.size == 0 or not np.all(np.isfinite(cuts)):
        raise InvalidParameterError("thresholds", fn, "one or more finite numbers", thresholds)
    if np.any(np.diff(cuts) <= 0):
        raise InvalidParameterError("thresholds", fn, "strictly increasing", thresholds)
    return np.searchsorted(cuts, arr, side="right").astype(np.int64)


def supported_word_length(symbols: ArrayLike) -> int:
    """Longest word length whose empirical distribution a sequence of N symbols supports.

    The largest w with

    * ``k**w <= N`` (k the number of distinct symbols, at least 2), and
    * ``W(w)**2 <= N``, where W(w) is the number of distinct words of length w
      observed in the sequence.

    Both are forms of the bound of Marton & Shields (1994): the empirical
    distribution of overlapping w-blocks converges to the true one (in
    variational distance, almost surely) when ``w <= log N / (h + eps)``, h the
    entropy rate, for weak Bernoulli processes (i.i.d., aperiodic Markov chains
    and functions of them; statement from memory). With
    ``h <= log k`` the first condition is the universal form of the bound. The
    second uses the words the data actually show: about ``2**(w h)`` typical
    words exist, so ``W(w)**2 <= N`` keeps w at or below ``log N / (2 h)``
    (the margin eps = h) and every observed word is seen about sqrt(N) times
    on average. A sequence of little entropy (a finely sampled rhythm, whose
    words are few) therefore supports longer words than ``k**w`` alone would
    allow; a fair coin of N symbols gets ``w = floor(log2 N / 2)``.

    Parameters
    ----------
    symbols : array_like, shape (N,)
        Any sortable labels.

    Returns
    -------
    int
        w >= 0; 0 when N < k**2 (k >= 2 distinct symbols), i.e. when even the
        single-symbol distribution is not supported.

    References
    ----------
    K. Marton & P. C. Shields (1994), "Entropy and the consistent estimation of
    joint distributions", Ann. Probab. 22:960-977.

    Examples
    --------
    >>> supported_word_length([0, 1, 2] * 300)  # W(w) = 3; 3**6 = 729 <= 900 < 3**7
    6
    """
    fn = "supported_word_length"
    raw = np.asarray(symbols)
    if raw.ndim != 1 or raw.size == 0:
        raise InvalidParameterError("symbols", fn, "a non-empty 1D sequence", raw)
    _, dense = np.unique(raw, return_inverse=True)
    dense = dense.astype(np.int64).ravel()
    n = dense.size
    k = max(int(dense.max()) + 1, 2)
    w = 0
    codes = np.zeros(n, dtype=np.int64)
    # Word codes in base k grow one symbol at a time (k**(w+1) <= N < 2**62).
    while k ** (w + 1) <= n:
        m = n - w  # windows of length w + 1
        codes = codes[:m] * k + dense[w:]
        if np.unique(codes).size ** 2 > n:
            break
        w += 1
    return w


def joint_symbols(symbol_arrays: Sequence[ArrayLike]) -> NDArray[np.int64]:
    """Combine several channels of symbols into one alphabet, site by site.

    Parameters
    ----------
    symbol_arrays : sequence of array_like, each the same shape
        One integer (or other sortable label) array per channel; an array of
        shape ``(n_channels, ...)`` works too (channels along axis 0).

    Returns
    -------
    ndarray of int64, the common shape
        Dense codes ``0 .. K - 1`` of the observed channel tuples, numbered in
        lexicographic order of the tuples (first channel most significant).

    Examples
    --------
    >>> joint_symbols([[0, 1, 0, 1], [5, 5, 7, 7]])
    array([0, 2, 1, 3])
    """
    fn = "joint_symbols"
    channels = [np.asarray(a) for a in symbol_arrays]
    if not channels:
        raise InvalidParameterError("symbol_arrays", fn, "at least one array", symbol_arrays)
    shape = channels[0].shape
    if any(c.shape != shape for c in channels) or channels[0].size == 0:
        raise InvalidParameterError(
            "symbol_arrays", fn, "non-empty arrays of one common shape", [c.shape for c in channels]
        )
    code = np.zeros(shape, dtype=np.int64)
    bound = 1
    for channel in channels:
        if channel.dtype.kind == "f" and not np.all(np.isfinite(channel)):
            raise InvalidParameterError("symbol_arrays", fn, "finite symbols", channel)
        values, dense = np.unique(channel, return_inverse=True)
        if bound * len(values) >= 2**62:
            # Re-number the observed tuples so far to keep the packed code in int64.
            _, code = np.unique(code, return_inverse=True)
            code = code.reshape(shape).astype(np.int64)
            bound = int(code.max()) + 1
        code = code * len(values) + dense.reshape(shape)
        bound *= len(values)
    _, out = np.unique(code, return_inverse=True)
    return out.reshape(shape).astype(np.int64)


#: Support rule of :func:`state_symbols`: an alphabet of K cells is allowed
#: when ``STATE_CELL_COUNT * K**3 <= n``, i.e. causal-state reconstruction on
#: the symbols can still use histories of length 2 under its own 50-counts
#: rule (:func:`measures.causal_states`).
STATE_CELL_COUNT = 50
_MAX_CELLS_PER_COMPONENT = 8


@dataclass(frozen=True)
class StateSymbols:
    """Symbols of a multichannel state and the parameters that made them.

    Attributes
    ----------
    symbols : ndarray of int64, shape (n,) (``"quantile"``) or
        (n - (order - 1) delay,) (``"ordinal"``)
        Codes ``0 .. alphabet_size - 1``.
    alphabet_size : int
        Number of possible symbols (cells or joint patterns), whether seen or not.
    method : str
        ``"quantile"`` or ``"ordinal"``.
    n_components : int
        Leading components used.
    cells_per_component : int
        Quantile cells per component (``"quantile"``), or ``order!`` patterns
        per component (``"ordinal"``).
    edges : tuple of tuple of float
        Per component, the inner quantile edges (``"quantile"``; empty for
        ``"ordinal"``).
    order, delay : int
        Ordinal pattern length and delay (``"ordinal"``; 0 for ``"quantile"``).
    tie_fraction : float
        Share of ordinal windows with ties over all components (``"ordinal"``),
        or of samples equal to a cell edge (``"quantile"``).
    rule : str
        How the parameters were chosen, in words.
    """

    symbols: NDArray[np.int64]
    alphabet_size: int
    method: str
    n_components: int
    cells_per_component: int
    edges: tuple[tuple[float, ...], ...]
    order: int
    delay: int
    tie_fraction: float
    rule: str


def state_symbols(
    state: ArrayLike,
    *,
    method: str = "quantile",
    n_components: int | None = None,
    cells_per_component: int | None = None,
    order: int = 2,
    delay: int = 1,
    seed: int = 0,
) -> StateSymbols:
    """Symbolise a multichannel state (n samples x d components) into one symbol per time.

    Parameters
    ----------
    state : array_like of float, shape (n, d)
        Components in order of importance (e.g. the leading components of a
        multichannel singular spectrum analysis); a 1D array is one component.
    method : {"quantile", "ordinal"}, default "quantile"
        ``"quantile"``: each of the leading components is cut into
        equiprobable cells (sample quantiles, :func:`quantile_symbols`) and the
        symbol is the cell of the joint partition (``q**m`` cells).
        ``"ordinal"``: multichannel ordinal patterns, the ordinal pattern of
        each leading component (random tie-breaking, :func:`ordinal_patterns`)
        joined into one symbol (``(order!)**m`` patterns).
    n_components : int, optional
        m, the leading components used. Default ``min(d, 2)``: oscillations of
        a state appear as pairs of components (common practice in singular
        spectrum analysis, Vautard & Ghil 1989, from memory).
    cells_per_component : int, optional
        q for ``"quantile"``. Default: the largest q in 2..8 with
        ``50 * (q**m)**3 <= n`` (:data:`STATE_CELL_COUNT`), so that causal-state
        reconstruction on the symbols still supports histories of length 2.
    order, delay : int
        Ordinal pattern length (default 2: up/down per component) and delay.
    seed : int
        Seed of the ordinal tie-breaking keys.

    Returns
    -------
    StateSymbols

    Raises
    ------
    InsufficientDataError
        When even q = 2 (or the ordinal alphabet) breaks the support rule.

    References
    ----------
    Quantile (equiprobable) partitions: C. S. Daw, C. E. A. Finney & E. R.
    Tracy (2003), Rev. Sci. Instrum. 74:915 (from memory). Joining the
    per-channel ordinal patterns of Bandt & Pompe (2002) into one symbol is
    common practice for multichannel data.

    Examples
    --------
    >>> t = np.arange(4000)
    >>> orbit = np.column_stack([np.cos(2 * np.pi * t / 40), np.sin(2 * np.pi * t / 40)])
    >>> out = state_symbols(orbit)
    >>> out.alphabet_size, out.cells_per_component
    (4, 2)
    """
    fn = "state_symbols"
    arr = as_float_array("state", state, fn, ndim=(1, 2))
    arr = arr.reshape(-1, 1) if arr.ndim == 1 else arr
    n, d = arr.shape
    if method not in ("quantile", "ordinal"):
        raise InvalidParameterError("method", fn, "'quantile' or 'ordinal'", method)
    m = min(d, 2) if n_components is None else check_positive_int("n_components", n_components, fn)
    if m > d:
        raise InvalidParameterError("n_components", fn, f"at most the {d} components given", m)
    lead = arr[:, :m]
    if method == "ordinal":
        order = check_positive_int("order", order, fn, minimum=2)
        delay = check_positive_int("delay", delay, fn)
        per = math.factorial(order)
        k = per**m
        if STATE_CELL_COUNT * float(k) ** 3 > n:
            raise InsufficientDataError(
                "state", fn, f"at least {STATE_CELL_COUNT * k**3} samples for {k} patterns", arr
            )
        codes = [
            ordinal_patterns(
                lead[:, j],
                order=order,
                delay=delay,
                min_windows_per_pattern=0,
                ties="random",
                seed=seed + j,
            )
            for j in range(m)
        ]
        ties = [tie_fraction(lead[:, j], order=order, delay=delay) for j in range(m)]
        symbols = np.zeros(codes[0].size, dtype=np.int64)
        for c in codes:
            symbols = symbols * per + c
        return StateSymbols(
            symbols=symbols,
            alphabet_size=k,
            method=method,
            n_components=m,
            cells_per_component=per,
            edges=(),
            order=order,
            delay=delay,
            tie_fraction=float(np.mean(ties)),
            rule=f"ordinal patterns of order {order} (delay {delay}) of the {m} leading "
            "components joined; ties broken at random (seeded)",
        )
    if cells_per_component is None:
        q = 1
        while q < _MAX_CELLS_PER_COMPONENT and STATE_CELL_COUNT * float(q + 1) ** (3 * m) <= n:
            q += 1
        if q < 2:
            raise InsufficientDataError(
                "state",
                fn,
                f"at least {STATE_CELL_COUNT * 2 ** (3 * m)} samples for 2 cells "
                f"on each of {m} components",
                arr,
            )
        rule = (
            f"largest q in 2..{_MAX_CELLS_PER_COMPONENT} with {STATE_CELL_COUNT} * (q**m)**3 "
            f"<= n, m = {m} leading components"
        )
    else:
        q = check_positive_int("cells_per_component", cells_per_component, fn, minimum=2)
        rule = "given"
    edges = []
    symbols = np.zeros(n, dtype=np.int64)
    on_edge = np.zeros(n, dtype=bool)
    for j in range(m):
        cut = np.quantile(lead[:, j], np.arange(1, q) / q)
        edges.append(tuple(float(v) for v in cut))
        symbols = symbols * q + np.searchsorted(cut, lead[:, j], side="right")
        on_edge |= np.isin(lead[:, j], cut)
    return StateSymbols(
        symbols=symbols.astype(np.int64),
        alphabet_size=q**m,
        method=method,
        n_components=m,
        cells_per_component=q,
        edges=tuple(edges),
        order=0,
        delay=0,
        tie_fraction=float(on_edge.mean()),
        rule=rule,
    )
