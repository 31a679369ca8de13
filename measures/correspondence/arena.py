"""Arena-level inference: one point per arena, the arena as the unit of replication.

Terrain is constant within an arena, so the information about a terrain slope is in the
arena means, not in the trials. This module fits the slope of subject-adjusted arena mean
movement on arena terrain (ordinary least squares, one point per arena) and gives its
t interval with ``n_arenas - 2 - k`` degrees of freedom (``k`` arena-level covariates).

Why this interval: for ``y_ast = mu + b t_a + u_a + s_s + e_ast`` (arena effect ``u``,
subject effect ``s``, crossed and balanced) the subject-centred arena means are
``b t_a + u_a + mean_e`` up to a constant, independent and equally variable across arenas,
so the OLS t interval on them is exact under normal errors: it is the REML answer of the
crossed random-effects model for balanced data, reached by the "summary statistics" route
(Searle, Casella & McCulloch 1992, ch. 4, balanced ANOVA estimators equal REML; from
memory). Unbalanced designs make it approximate; coverage is checked by simulation in
``tests/correspondence/test_arena.py``. The trial-level mixed model with a subject
intercept only (:func:`measures.fit_random_intercept`) treats trials of one arena as
independent draws of terrain and is far too narrow when arenas differ by more than
terrain; its interval is kept, labelled trial-level, for reference.

Also here: exact permutation p-values of Spearman's rho for small samples, the
"estimable" rule for measures that hardly vary, and the folding of redundant measures.

References
----------
Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley.
Good, P. (2005). Permutation, Parametric and Bootstrap Tests of Hypotheses, 3rd ed.
Springer (exact permutation distributions by enumeration).
Draper, N. R. & Smith, H. (1998). Applied Regression Analysis, 3rd ed. Wiley, sec. 3.1
(confidence band of a fitted line).
"""

from __future__ import annotations

import functools
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from measures._validation import InvalidParameterError, as_float_array
from measures.correspondence._adjusted import nuisance_basis, residualise

__all__ = [
    "EXACT_SPEARMAN_MAX_N",
    "MIN_RELATIVE_SPREAD",
    "REDUNDANT_ABS_R",
    "ArenaMeans",
    "ArenaSlope",
    "MeasureGroup",
    "SpearmanTest",
    "arena_movement_means",
    "arena_slope",
    "fit_band",
    "not_estimable_reason",
    "redundancy_groups",
    "spearman_test",
]

#: A measure whose arena values span less than this fraction of their largest magnitude
#: is treated as constant: its slope would be rounding noise (stated rule of our own).
MIN_RELATIVE_SPREAD = 1e-6
#: |Pearson r| across arenas at or above which two measures are one finding (common
#: practice for near duplicates, not a published threshold).
REDUNDANT_ABS_R = 0.95
#: Fewest shared arenas for folding two measures: with 4 arenas |r| >= 0.95 happens by
#: chance in about 5 % of unrelated pairs (t distribution of r, n - 2 = 2 df).
MIN_ARENAS_TO_FOLD = 5
#: Up to this many points Spearman's p is the exact enumeration of all n! rank pairings
#: (9! = 362,880); from 10 on scipy's t approximation.
EXACT_SPEARMAN_MAX_N = 9


@dataclass(frozen=True)
class ArenaMeans:
    """Subject-adjusted arena mean movement with per-arena 95 % intervals.

    Attributes
    ----------
    mean : ndarray, shape (n_arenas, n_movement)
        Arena mean of the movement values centred within subject, plus the grand mean of
        the trials (so it is on the measure's scale; in a balanced crossed design it is the
        plain arena mean).
    ci_low, ci_high : ndarray, shape (n_arenas, n_movement)
        t interval over the arena's subject means (over its trials when one subject walked
        it); NaN when fewer than two values.
    n_trials, n_subjects : ndarray of int, shape (n_arenas,)
    """

    mean: NDArray[np.float64]
    ci_low: NDArray[np.float64]
    ci_high: NDArray[np.float64]
    n_trials: NDArray[np.int64]
    n_subjects: NDArray[np.int64]


def arena_movement_means(
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    n_arenas: int | None = None,
    level: float = 0.95,
) -> ArenaMeans:
    """Subject-adjusted arena means of trial-level movement values.

    Parameters
    ----------
    movement : array_like, shape (n_trials,) or (n_trials, n_movement)
        Finite values.
    arena_index, subject_index : array_like of int, shape (n_trials,)
    n_arenas : int, optional
        Number of arenas (default: largest code + 1).
    level : float, default 0.95

    Returns
    -------
    ArenaMeans
    """
    fn = "arena_movement_means"
    m = as_float_array("movement", movement, fn, ndim=(1, 2), min_length=2)
    m = m.reshape(m.shape[0], -1)
    arena = np.asarray(arena_index, dtype=np.intp)
    _, subject = np.unique(np.asarray(subject_index), return_inverse=True)
    if arena.shape != (m.shape[0],) or subject.shape != arena.shape:
        raise InvalidParameterError("arena_index", fn, "one arena and subject per trial", arena)
    n_a = int(arena.max()) + 1 if n_arenas is None else int(n_arenas)
    centred = residualise(m, nuisance_basis(m.shape[0], subject, None)) + m.mean(axis=0)
    mean = np.full((n_a, m.shape[1]), np.nan)
    lo, hi = np.full_like(mean, np.nan), np.full_like(mean, np.nan)
    n_trials = np.bincount(arena, minlength=n_a).astype(np.int64)
    n_subjects = np.zeros(n_a, dtype=np.int64)
    for a in range(n_a):
        rows = arena == a
        if not rows.any():
            continue
        subs = np.unique(subject[rows])
        n_subjects[a] = subs.size
        # Subject means inside the arena are the replicates; one subject: its trials.
        reps = (
            np.vstack([centred[rows & (subject == s)].mean(axis=0) for s in subs])
            if subs.size > 1
            else centred[rows]
        )
        mean[a] = reps.mean(axis=0) if subs.size > 1 else centred[rows].mean(axis=0)
        if reps.shape[0] >= 2:
            half = (
                stats.t.ppf(0.5 + level / 2, reps.shape[0] - 1)
                * reps.std(axis=0, ddof=1)
                / math.sqrt(reps.shape[0])
            )
            lo[a], hi[a] = mean[a] - half, mean[a] + half
    return ArenaMeans(mean, lo, hi, n_trials, n_subjects)


@dataclass(frozen=True)
class ArenaSlope:
    """Arena-level slope of every terrain x movement pair.

    Attributes
    ----------
    slope, se, ci_low, ci_high, p_value, intercept : ndarray, shape (n_terrain, n_movement)
        OLS slope of arena mean movement on arena terrain (given arena covariate means),
        its standard error, t interval, two-sided t p-value and intercept (NaN with
        covariates: the line is then a partial one).
    df : int
        Residual degrees of freedom ``n_arenas - 2 - k``.
    n_arenas : int
    level : float
    """

    slope: NDArray[np.float64]
    se: NDArray[np.float64]
    ci_low: NDArray[np.float64]
    ci_high: NDArray[np.float64]
    p_value: NDArray[np.float64]
    intercept: NDArray[np.float64]
    df: int
    n_arenas: int
    level: float


def arena_slope(
    terrain: ArrayLike,
    arena_movement: ArrayLike,
    *,
    arena_covariates: ArrayLike | None = None,
    level: float = 0.95,
) -> ArenaSlope:
    """OLS slope of arena movement on arena terrain with its t interval.

    With ``arena_covariates`` (arena means of trial covariates) the slope is the partial
    one from ``ybar ~ 1 + t + Zbar`` (Frisch-Waugh: both sides residualised on
    ``[1, Zbar]``), matching the arena-level Freedman-Lane permutation test.

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,) or (n_arenas, n_terrain)
    arena_movement : array_like, shape (n_arenas,) or (n_arenas, n_movement)
        e.g. :attr:`ArenaMeans.mean`.
    arena_covariates : array_like, shape (n_arenas, k), optional
    level : float, default 0.95

    Returns
    -------
    ArenaSlope
        NaN entries where a side is constant or ``df < 1``.

    Examples
    --------
    >>> fit = arena_slope([0.0, 1.0, 2.0, 3.0], [1.0, 3.1, 4.9, 7.0])
    >>> round(float(fit.slope[0, 0]), 2), fit.df
    (1.98, 2)
    """
    fn = "arena_slope"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), min_length=2)
    y = as_float_array("arena_movement", arena_movement, fn, ndim=(1, 2), min_length=2)
    t, y = t.reshape(t.shape[0], -1), y.reshape(y.shape[0], -1)
    if t.shape[0] != y.shape[0]:
        raise InvalidParameterError("arena_movement", fn, f"{t.shape[0]} rows", y)
    z = None
    if arena_covariates is not None:
        z = as_float_array("arena_covariates", arena_covariates, fn, ndim=(1, 2))
        z = z.reshape(z.shape[0], -1)
    n = t.shape[0]
    basis = nuisance_basis(n, None, z)
    df = n - 1 - basis.shape[1]
    rt, ry = residualise(t, basis), residualise(y, basis)
    sxx = np.sum(rt**2, axis=0)[:, None]  # (T, 1)
    sxy = rt.T @ ry  # (T, M)
    syy = np.sum(ry**2, axis=0)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = sxy / sxx
        rss = np.maximum(syy - slope * sxy, 0.0)
        se = np.sqrt(rss / df / sxx) if df >= 1 else np.full_like(slope, np.nan)
        q = stats.t.ppf(0.5 + level / 2, df) if df >= 1 else np.nan
        p = 2 * stats.t.sf(np.abs(slope / se), df) if df >= 1 else np.full_like(slope, np.nan)
    flat = (sxx <= 0) | (syy <= 0)
    slope, se, p = (np.where(flat, np.nan, v) for v in (slope, se, p))
    p = np.where(se == 0, 0.0, p)  # an exact line: no residual spread
    if z is None:
        intercept = y.mean(axis=0)[None, :] - slope * t.mean(axis=0)[:, None]
    else:
        intercept = np.full_like(slope, np.nan)
    return ArenaSlope(slope, se, slope - q * se, slope + q * se, p, intercept, df, n, level)


def fit_band(
    terrain: ArrayLike,
    arena_movement: ArrayLike,
    *,
    n_points: int = 25,
    level: float = 0.95,
) -> dict[str, list[float] | float] | None:
    """The arena-level line of one pair and its confidence band, for a figure.

    Band: ``yhat(x) +- t_{n-2} s sqrt(1/n + (x - xbar)^2 / Sxx)`` (Draper & Smith 1998,
    sec. 3.1), at ``n_points`` values from the smallest to the largest terrain value.

    Returns
    -------
    dict or None
        ``intercept``, ``slope``, ``x``, ``y``, ``band_low``, ``band_high`` (lists); None
        with fewer than 3 finite points or no spread in terrain.
    """
    x = np.asarray(terrain, dtype=np.float64).ravel()
    y = np.asarray(arena_movement, dtype=np.float64).ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    n = x.size
    if n < 3 or np.ptp(x) == 0:
        return None
    xbar, sxx = x.mean(), float(np.sum((x - x.mean()) ** 2))
    slope = float(np.sum((x - xbar) * (y - y.mean())) / sxx)
    intercept = float(y.mean() - slope * xbar)
    s = math.sqrt(float(np.sum((y - intercept - slope * x) ** 2)) / (n - 2))
    grid = np.linspace(x.min(), x.max(), n_points)
    fit = intercept + slope * grid
    half = (
        stats.t.ppf(0.5 + level / 2, max(n - 2, 1)) * s * np.sqrt(1 / n + (grid - xbar) ** 2 / sxx)
    )
    return {
        "intercept": intercept,
        "slope": slope,
        "x": grid.tolist(),
        "y": fit.tolist(),
        "band_low": (fit - half).tolist(),
        "band_high": (fit + half).tolist(),
    }


def not_estimable_reason(
    values: ArrayLike, *, min_arenas: int = 3, min_relative_spread: float = MIN_RELATIVE_SPREAD
) -> str | None:
    """Why a measure's arena values cannot carry a slope, or None when they can.

    Reasons: fewer than ``min_arenas`` finite values; a spread ``max - min`` at or below
    ``min_relative_spread`` times the largest magnitude (zero included).

    Examples
    --------
    >>> not_estimable_reason([2.0, 2.0, 2.0 + 1e-12, 2.0])
    'constant across arenas (spread 1e-12 is below 1e-06 of its size 2)'
    >>> not_estimable_reason([1.0, 2.0, 3.0]) is None
    True
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    v = v[np.isfinite(v)]
    if v.size < min_arenas:
        return f"defined in only {v.size} arena(s); at least {min_arenas} are needed"
    spread, size = float(np.ptp(v)), float(np.max(np.abs(v)))
    if spread <= min_relative_spread * size or spread == 0:
        return (
            f"constant across arenas (spread {spread:.3g} is below {min_relative_spread:.3g} "
            f"of its size {size:.3g})"
        )
    return None


@dataclass(frozen=True)
class SpearmanTest:
    """Spearman's rho with its two-sided p-value and how the p-value was found."""

    rho: float
    p_value: float
    n: int
    method: str


@functools.lru_cache(maxsize=EXACT_SPEARMAN_MAX_N + 1)
def _all_orders(n: int) -> NDArray[np.intp]:
    return np.array(list(itertools.permutations(range(n))), dtype=np.intp)


def spearman_test(x: ArrayLike, y: ArrayLike) -> SpearmanTest:
    """Spearman's rank correlation; exact permutation p-value up to 9 points.

    Up to :data:`EXACT_SPEARMAN_MAX_N` points, every one of the ``n!`` pairings of the
    ranks is enumerated and ``p = #{|rho_pi| >= |rho|} / n!`` (ties handled by average
    ranks; Good 2005, ch. 3). From 10 points on, scipy's t approximation. Pairs with a
    NaN are dropped; fewer than 3 pairs or a constant side give NaN.

    Examples
    --------
    >>> res = spearman_test([1, 2, 3], [3, 2, 1])
    >>> res.rho, round(res.p_value, 4), res.method
    (-1.0, 0.3333, 'exact permutation (3! pairings)')
    """
    xa = np.asarray(x, dtype=np.float64).ravel()
    ya = np.asarray(y, dtype=np.float64).ravel()
    ok = np.isfinite(xa) & np.isfinite(ya)
    xa, ya = xa[ok], ya[ok]
    n = int(xa.size)
    if n < 3 or np.ptp(xa) == 0 or np.ptp(ya) == 0:
        return SpearmanTest(math.nan, math.nan, n, "not defined")
    rx, ry = stats.rankdata(xa), stats.rankdata(ya)
    rx, ry = rx - rx.mean(), ry - ry.mean()
    norm = math.sqrt(float(rx @ rx) * float(ry @ ry))
    rho = float(rx @ ry) / norm
    if n <= EXACT_SPEARMAN_MAX_N:
        null = ry[_all_orders(n)] @ rx / norm
        p = float(np.mean(np.abs(null) >= abs(rho) * (1 - 1e-12)))
        return SpearmanTest(rho, p, n, f"exact permutation ({n}! pairings)")
    res = stats.spearmanr(xa, ya)
    return SpearmanTest(rho, float(res.pvalue), n, "t approximation (n >= 10)")


@dataclass(frozen=True)
class MeasureGroup:
    """Measures that are one thing across these arenas (|r| >= threshold)."""

    representative: str
    members: tuple[str, ...]
    min_abs_r: float
    n_arenas: int


def redundancy_groups(
    values: ArrayLike,
    names: Sequence[str],
    *,
    threshold: float = REDUNDANT_ABS_R,
    min_arenas: int = MIN_ARENAS_TO_FOLD,
) -> tuple[MeasureGroup, ...]:
    """Fold measures whose arena values correlate with |r| >= ``threshold``.

    In the order given, each measure not yet folded becomes a representative and takes
    every later unfolded measure with |Pearson r| >= ``threshold`` to it over the arenas
    where both are finite (at least ``min_arenas``). Every member is thus close to its
    representative itself (no chaining). Every measure is in exactly one group.

    Parameters
    ----------
    values : array_like, shape (n_arenas, n_measures)
        NaN allowed.
    names : sequence of str
    threshold : float, default 0.95
    min_arenas : int, default 5

    Returns
    -------
    tuple of MeasureGroup, in the order of their representatives
    """
    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 2 or len(names) != v.shape[1]:
        raise InvalidParameterError("names", "redundancy_groups", "one name per column", names)
    k = v.shape[1]
    folded = np.zeros(k, dtype=bool)
    groups = []
    for i in range(k):
        if folded[i]:
            continue
        members, rs = [names[i]], []
        n_i = int(np.isfinite(v[:, i]).sum())
        for j in range(i + 1, k):
            if folded[j]:
                continue
            ok = np.isfinite(v[:, i]) & np.isfinite(v[:, j])
            if ok.sum() < min_arenas or np.ptp(v[ok, i]) == 0 or np.ptp(v[ok, j]) == 0:
                continue
            r = float(np.corrcoef(v[ok, i], v[ok, j])[0, 1])
            if abs(r) >= threshold:
                folded[j] = True
                members.append(names[j])
                rs.append(abs(r))
        groups.append(MeasureGroup(names[i], tuple(members), min(rs) if rs else 1.0, n_i))
    return tuple(groups)
