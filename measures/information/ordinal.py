"""Ordinal-pattern distribution, permutation entropy and the complexity-entropy plane.

The same functions take a series ``(N,)`` with ``order=int`` and a field
``(ny, nx)`` with ``order=(dx, dy)``; pattern codes come from
:func:`measures.ordinal_patterns` (lexicographic codes).

Ties: every function here takes ``ties="stable" | "random"`` (see
:mod:`measures.information.symbolic`) and reports the share of windows with
ties. :func:`complexity_entropy` keeps ``ties="stable"`` as its default (its
documented contract); the movement and terrain summaries pass
``ties="random"``, which makes the score far less sensitive to quantisation.
With ``ties="random"``, ``n_draws`` distributions from independent keys are
averaged; one draw is the default because the draw-to-draw spread of the
frequencies is about sqrt(p / n_windows), far below the estimation error, for
any input long enough for the 10-windows-per-pattern rule.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import InvalidParameterError, check_positive_int
from measures.information.symbolic import (
    MIN_WINDOWS_PER_PATTERN,
    _check_ties,
    _codes_with_rule,
    _prepare_windows,
    _tied_windows,
)

__all__ = [
    "ComplexityEntropy",
    "ComplexityEntropyBounds",
    "OrdinalDistribution",
    "complexity_entropy",
    "complexity_entropy_bounds",
    "jensen_shannon_complexity",
    "ordinal_distribution",
]


@dataclass(frozen=True)
class OrdinalDistribution:
    """Relative frequencies of all ``D!`` ordinal patterns.

    Attributes
    ----------
    probabilities : ndarray, shape (D!,)
        Entry c is the frequency of pattern code c (zeros for absent patterns).
    n_windows : int
    order : int or (int, int)
    delay : int or (int, int)
    tie_fraction : float
        Share of windows holding equal values (a quantisation diagnostic).
    ties : str
        The tie rule used, ``"stable"`` or ``"random"``.
    n_draws : int
        Random tie-breaking draws averaged (1 for stable ties).
    """

    probabilities: NDArray[np.float64]
    n_windows: int
    order: int | tuple[int, int]
    delay: int | tuple[int, int]
    tie_fraction: float = 0.0
    ties: str = "stable"
    n_draws: int = 1

    @property
    def n_patterns(self) -> int:
        """D!, the number of possible patterns."""
        return len(self.probabilities)


def ordinal_distribution(
    x: ArrayLike,
    *,
    order: int | tuple[int, int],
    delay: int | tuple[int, int] = 1,
    min_windows_per_pattern: float = MIN_WINDOWS_PER_PATTERN,
    ties: str = "stable",
    n_draws: int = 1,
    seed: int = 0,
) -> OrdinalDistribution:
    """Probability vector of ordinal patterns of a series or field.

    Parameters
    ----------
    x, order, delay, min_windows_per_pattern, ties
        As for :func:`measures.ordinal_patterns`.
    n_draws : int, default 1
        With ``ties="random"``: number of independent tie-breaking draws whose
        frequencies are averaged (draws are skipped when nothing is tied).
    seed : int, default 0
        Seed of the draws (seeds of the draws are spawned from it).

    Returns
    -------
    OrdinalDistribution
        ``probabilities[c]`` for every code c in ``0 .. D! - 1``; the order
        is lexicographic in the sorting permutation, as in ordpy's
        ``ordinal_distribution(..., return_missing=True, ordered=True)``.

    References
    ----------
    C. Bandt & B. Pompe (2002), Phys. Rev. Lett. 88:174102.

    Examples
    --------
    >>> ordinal_distribution(np.arange(100.0), order=3).probabilities
    array([1., 0., 0., 0., 0., 0.])
    """
    fn = "ordinal_distribution"
    _check_ties(ties, fn)
    n_draws = check_positive_int("n_draws", n_draws, fn)
    arr, columns, geometry = _prepare_windows(x, order, delay, min_windows_per_pattern, fn)
    d = geometry[0] * geometry[1]
    tied = float(_tied_windows(columns).mean())
    if ties == "stable" or tied == 0.0:
        draw_seeds: list = [None]
        ties_used, draws = ties, 1
    else:
        draw_seeds = np.random.SeedSequence(seed).spawn(n_draws) if n_draws > 1 else [seed]
        ties_used, draws = ties, n_draws
    counts = np.zeros(math.factorial(d))
    n_windows = columns[0].size
    for draw_seed in draw_seeds:
        rule = "stable" if draw_seed is None else "random"
        codes = _codes_with_rule(arr, columns, geometry, rule, draw_seed)
        counts += np.bincount(codes.ravel(), minlength=counts.size)
    return OrdinalDistribution(
        probabilities=counts / (n_windows * len(draw_seeds)),
        n_windows=int(n_windows),
        order=order,
        delay=delay,
        tie_fraction=tied,
        ties=ties_used,
        n_draws=draws,
    )


def _shannon_nats(p: NDArray[np.float64]) -> NDArray[np.float64]:
    """Row-wise Shannon entropy in nats, with 0 log 0 = 0."""
    safe = np.where(p > 0, p, 1.0)
    return -np.sum(p * np.log(safe), axis=-1)


def jensen_shannon_complexity(
    probabilities: ArrayLike,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Normalised Shannon entropy H and Jensen-Shannon complexity C of distributions.

    Parameters
    ----------
    probabilities : array_like, shape (M,) or (n, M)
        One distribution per row over all M states (absent states as zeros);
        rows are normalised to sum 1.

    Returns
    -------
    H, C : ndarray (0-d for one distribution)
        H = S[P] / ln M and C = Q_J[P, U] H, with
        Q_J = Q0 (S[(P + U)/2] - S[P]/2 - S[U]/2),
        Q0 = -2 / ((M+1)/M ln(M+1) - 2 ln(2M) + ln M), U the uniform law.

    References
    ----------
    O. A. Rosso et al. (2007), Phys. Rev. Lett. 99:154102;
    P. W. Lamberti, M. T. Martín, A. Plastino & O. A. Rosso (2004),
    Physica A 334:119 (Q0).
    """
    p = np.asarray(probabilities, dtype=np.float64)
    if p.ndim not in (1, 2) or p.shape[-1] < 2 or np.any(p < 0) or not np.all(np.isfinite(p)):
        raise InvalidParameterError(
            "probabilities", "jensen_shannon_complexity", "non-negative rows of >= 2 states", p
        )
    p = p / p.sum(axis=-1, keepdims=True)
    m = p.shape[-1]
    h = _shannon_nats(p) / math.log(m)
    js = _shannon_nats((p + 1.0 / m) / 2.0) - _shannon_nats(p) / 2.0 - math.log(m) / 2.0
    q0 = -2.0 / ((m + 1.0) / m * math.log(m + 1.0) - 2.0 * math.log(2.0 * m) + math.log(m))
    # Round-off can leave tiny negative values at the uniform distribution.
    # ``+ 0.0`` turns -0.0 (from 0 * log 1) into 0.0.
    return np.clip(h, 0.0, 1.0) + 0.0, np.clip(q0 * js * h, 0.0, 1.0) + 0.0


class ComplexityEntropy(tuple):
    """``(H, C)`` as a plain pair, with the tie diagnostic as attributes.

    Unpacks and compares like the tuple ``(H, C)`` (the documented return of
    :func:`complexity_entropy`); ``tie_fraction``, ``ties`` and ``n_windows``
    ride along.
    """

    tie_fraction: float
    ties: str
    n_windows: int

    def __new__(
        cls, h: float, c: float, *, tie_fraction: float, ties: str, n_windows: int
    ) -> ComplexityEntropy:
        obj = super().__new__(cls, (h, c))
        obj.tie_fraction = tie_fraction
        obj.ties = ties
        obj.n_windows = n_windows
        return obj

    def __getnewargs_ex__(self) -> tuple[tuple[float, float], dict]:
        # Pickle support (results cross process pools).
        kwargs = {"tie_fraction": self.tie_fraction, "ties": self.ties, "n_windows": self.n_windows}
        return (self[0], self[1]), kwargs

    @property
    def entropy(self) -> float:
        """H, the normalised permutation entropy."""
        return self[0]

    @property
    def complexity(self) -> float:
        """C, the Jensen-Shannon statistical complexity."""
        return self[1]


def complexity_entropy(
    x: ArrayLike,
    *,
    order: int | tuple[int, int],
    delay: int | tuple[int, int] = 1,
    ties: str = "stable",
    n_draws: int = 1,
    seed: int = 0,
) -> ComplexityEntropy:
    """Normalised permutation entropy and Jensen-Shannon statistical complexity.

    Parameters
    ----------
    x : array_like, shape (N,) or (ny, nx)
        Series, or field such as a heightmap.
    order : int or (int, int)
        Pattern length D for a series; patch ``(dx, dy)`` for a field.
    delay : int or (int, int), default 1
        Embedding delay in samples (a pair ``(delay_x, delay_y)`` for fields).
    ties : {"stable", "random"}, default "stable"
        ``"stable"``: ties keep order of appearance (stable sort), the
        documented default. ``"random"``: seeded random tie-breaking, far less
        sensitive to quantisation (see :mod:`measures.information.symbolic`);
        the summaries use it.
    n_draws, seed
        Random tie-breaking draws averaged, and their seed (``ties="random"``).

    Returns
    -------
    ComplexityEntropy
        The pair ``(H, C)``, both in [0, 1]: H = S[P] / ln D!,
        C = Q_J[P, U] H (see :func:`jensen_shannon_complexity`); attributes
        ``tie_fraction`` (share of windows with equal values), ``ties`` and
        ``n_windows``. Requires at least 10 windows per possible pattern
        (:data:`measures.MIN_WINDOWS_PER_PATTERN`).

    References
    ----------
    C. Bandt & B. Pompe (2002), Phys. Rev. Lett. 88:174102; O. A. Rosso,
    H. A. Larrondo, M. T. Martín, A. Plastino & M. A. Fuentes (2007),
    "Distinguishing noise from chaos", Phys. Rev. Lett. 99:154102; H. V.
    Ribeiro et al. (2012), PLoS ONE 7:e40689 (2D).

    Examples
    --------
    >>> complexity_entropy(np.arange(100.0), order=3)
    (0.0, 0.0)
    """
    dist = ordinal_distribution(x, order=order, delay=delay, ties=ties, n_draws=n_draws, seed=seed)
    h, c = jensen_shannon_complexity(dist.probabilities)
    return ComplexityEntropy(
        float(h),
        float(c),
        tie_fraction=dist.tie_fraction,
        ties=dist.ties,
        n_windows=dist.n_windows,
    )


def _grouped_complexity(
    values: list[NDArray[np.float64]], counts: list[NDArray[np.float64]], m: int
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """(H, C) of distributions given as groups of equal entries (value, multiplicity).

    The boundary laws have at most three distinct entries, so their entropies
    are sums over groups; no (n, M) array is built, which matters for M = 9!.
    """

    def s_nats(vals: list[NDArray[np.float64]]) -> NDArray[np.float64]:
        total = np.zeros_like(vals[0])
        for v, n in zip(vals, counts, strict=True):
            total -= n * np.where(v > 0, v * np.log(np.where(v > 0, v, 1.0)), 0.0)
        return total

    s_p = s_nats(values)
    s_mix = s_nats([(v + 1.0 / m) / 2.0 for v in values])
    js = s_mix - s_p / 2.0 - math.log(m) / 2.0
    q0 = -2.0 / ((m + 1.0) / m * math.log(m + 1.0) - 2.0 * math.log(2.0 * m) + math.log(m))
    h = s_p / math.log(m)
    return np.clip(h, 0.0, 1.0) + 0.0, np.clip(q0 * js * h, 0.0, 1.0) + 0.0


@dataclass(frozen=True)
class ComplexityEntropyBounds:
    """Upper and lower boundary curves of the complexity-entropy plane.

    Attributes
    ----------
    entropy_max, complexity_max : ndarray
        Points (H, C) of the maximum-complexity curve, sorted by H.
    entropy_min, complexity_min : ndarray
        Points of the minimum-complexity curve, sorted by H.
    n_patterns : int
        Number of states M (D! for ordinal patterns).
    """

    entropy_max: NDArray[np.float64]
    complexity_max: NDArray[np.float64]
    entropy_min: NDArray[np.float64]
    complexity_min: NDArray[np.float64]
    n_patterns: int


def complexity_entropy_bounds(n_patterns: int, *, n_points: int = 1000) -> ComplexityEntropyBounds:
    """Theoretical C_max(H) and C_min(H) curves for M = ``n_patterns`` states.

    The minimum curve is traced by P = (p, q, ..., q), p from 1/M to 1. The
    maximum curve is a chain of M - 1 segments: segment n has n zero entries,
    one entry p in [0, 1/(M - n)] and M - n - 1 entries (1 - p)/(M - n - 1);
    consecutive segments meet at the uniform laws on M - n - 1 states, which
    are always included exactly.

    Parameters
    ----------
    n_patterns : int
        M >= 2, e.g. ``math.factorial(order)`` or ``math.factorial(dx * dy)``.
    n_points : int, default 1000
        Points on the minimum curve; the maximum curve gets at least this many
        in total and at least 2 per segment.

    Returns
    -------
    ComplexityEntropyBounds

    References
    ----------
    M. T. Martín, A. Plastino & O. A. Rosso (2006), "Generalized statistical
    complexity measures: Geometrical and analytical properties", Physica A
    369:439 (citation from memory).

    Examples
    --------
    >>> b = complexity_entropy_bounds(6, n_points=50)
    >>> float(b.entropy_min[0]), float(b.entropy_min[-1])
    (0.0, 1.0)
    """
    fn = "complexity_entropy_bounds"
    m = check_positive_int("n_patterns", n_patterns, fn, minimum=2)
    n_points = check_positive_int("n_points", n_points, fn, minimum=2)

    p_big = np.linspace(1.0 / m, 1.0, n_points)
    h_min, c_min = _grouped_complexity(
        [p_big, (1.0 - p_big) / (m - 1)], [np.ones(n_points), np.full(n_points, m - 1.0)], m
    )

    # All segments at once: row r of segment n = zeros has support m - n.
    per_segment = max(2, math.ceil(n_points / (m - 1)))
    support = np.repeat(np.arange(m, 1, -1, dtype=np.float64), per_segment)
    p = np.tile(np.linspace(0.0, 1.0, per_segment), m - 1) / support
    h_max, c_max = _grouped_complexity(
        [p, (1.0 - p) / (support - 1.0), np.zeros_like(p)],
        [np.ones_like(p), support - 1.0, m - support],
        m,
    )
    order_max, order_min = np.argsort(h_max, kind="stable"), np.argsort(h_min, kind="stable")
    return ComplexityEntropyBounds(
        entropy_max=h_max[order_max],
        complexity_max=c_max[order_max],
        entropy_min=h_min[order_min],
        complexity_min=c_min[order_min],
        n_patterns=m,
    )
