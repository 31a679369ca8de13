"""Correspondence between terrain and movement measures across arenas.

The arena is the unit of replication for terrain: every trial in one arena
shares that arena's terrain value. The functions here work on plain arrays:

- ``terrain``: ``(n_arenas, n_terrain_measures)``, one row per arena;
- ``movement``: ``(n_trials, n_movement_measures)``, one row per trial;
- ``arena_index``, ``subject_index``: ``(n_trials,)`` integer codes.

Every test statistic is computed for the whole measure grid at once, so a
study of 50 arenas, 2,000 trials and 20 x 20 measure pairs with 9,999
permutations takes seconds (``bench/bench_correspondence.py``).

References
----------
Laird, N. M. & Ware, J. H. (1982). Random-effects models for longitudinal
data. Biometrics 38, 963-974.
Patterson, H. D. & Thompson, R. (1971). Recovery of inter-block information
when block sizes are unequal. Biometrika 58, 545-554 (REML).
Good, P. (2005). Permutation, Parametric and Bootstrap Tests of Hypotheses,
3rd ed. Springer (restricted permutations of whole units).
Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be
zero. Stat. Appl. Genet. Mol. Biol. 9(1), 39.
Field, C. A. & Welsh, A. H. (2007). Bootstrapping clustered data. J. R.
Stat. Soc. B 69, 369-390 (resampling the top level, then within it).
Owen, A. B. (2007). The pigeonhole bootstrap. Ann. Appl. Stat. 1, 386-411
(crossed designs: resample both factors independently).
Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate.
J. R. Stat. Soc. B 57, 289-300.
Freedman, D. & Lane, D. (1983). A nonstochastic interpretation of reported
significance levels. J. Bus. Econ. Stat. 1, 292-298.
Anderson, M. J. & Legendre, P. (1999). An empirical comparison of permutation
methods for tests of partial regression coefficients in a linear model.
J. Stat. Comput. Simul. 62, 271-303.
Winkler, A. M. et al. (2014). Permutation inference for the general linear
model. NeuroImage 92, 381-397.
"""

from __future__ import annotations

import contextlib
import itertools
import math
import warnings
import warnings as warnings_module
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_positive_int,
)
from measures.correspondence._adjusted import (
    adjust_movement,
    arena_level_values,
    freedman_lane_statistics,
)
from measures.correspondence._confounds import (
    BalanceCheck,
    CollinearityCheck,
    ConfoundChecks,
    DesignSummary,
    SpeedCheck,
    collinearity_check,
    confound_checks,
    design_summary,
    detectable_rank_correlation,
    subject_arena_balance,
    terrain_speed_check,
)
from measures.correspondence.arena import (
    arena_movement_means,
    arena_slope,
    spearman_test,
)

__all__ = [
    "BalanceCheck",
    "CollinearityCheck",
    "ConfoundChecks",
    "CorrespondenceGrid",
    "CorrespondenceRow",
    "DesignSummary",
    "MixedFit",
    "PermutationGrid",
    "SpearmanBootstrap",
    "SpeedCheck",
    "arena_permutation_test",
    "benjamini_hochberg",
    "collinearity_check",
    "confound_checks",
    "correspondence_grid",
    "design_summary",
    "detectable_rank_correlation",
    "fit_random_intercept",
    "hierarchical_bootstrap_spearman",
    "random_intercept_columns",
    "subject_arena_balance",
    "terrain_speed_check",
]

# Below these counts the report warns that the arena-level statistics are
# fragile (an exact permutation test with 4 arenas cannot reach p < 0.05 two-sided:
# 2/4! = 0.083). Common practice, not a published threshold.
MIN_ARENAS = 5
MIN_SUBJECTS = 3


@dataclass(frozen=True)
class MixedFit:
    """Random-intercept linear mixed model ``y ~ x + covariates + (1 | group)``.

    Attributes
    ----------
    slope, se : float
        Fixed-effect estimate for ``x`` and its standard error (REML).
    ci_low, ci_high : float
        Wald 95 % interval (normal quantile, as statsmodels' MixedLM reports).
    p_value : float
        Two-sided Wald p-value.
    group_variance, residual_variance : float
        REML variance components.
    n, n_groups : int
        Observations and groups used.
    """

    slope: float
    se: float
    ci_low: float
    ci_high: float
    p_value: float
    intercept: float
    group_variance: float
    residual_variance: float
    n: int
    n_groups: int


def _group_sums(
    design: NDArray[np.float64], y: NDArray[np.float64], groups: NDArray[np.intp]
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    n_groups = int(groups.max()) + 1
    counts = np.bincount(groups, minlength=n_groups).astype(np.float64)
    sum_x = np.zeros((n_groups, design.shape[1]))
    np.add.at(sum_x, groups, design)
    # Weighted bincount is float64; numpy's stubs say intp, so say it (no copy is made).
    sum_y = np.bincount(groups, weights=y, minlength=n_groups).astype(np.float64, copy=False)
    return counts, sum_x, sum_y


def _reml_pieces(
    log_ratio: float,
    xtx: NDArray[np.float64],
    xty: NDArray[np.float64],
    yty: float,
    counts: NDArray[np.float64],
    sum_x: NDArray[np.float64],
    sum_y: NDArray[np.float64],
) -> tuple[float, NDArray[np.float64], NDArray[np.float64], float]:
    # V = I + lam * Z Z' per group has inverse I - c_g 11' with c_g = lam / (1 + n_g lam)
    # (Sherman-Morrison), so every GLS product needs only per-group sums.
    lam = math.exp(log_ratio)
    c = lam / (1.0 + counts * lam)
    a: NDArray[np.float64] = xtx - (sum_x * c[:, None]).T @ sum_x
    b = xty - (sum_x * (c * sum_y)[:, None]).sum(axis=0)
    ryy = yty - float(np.sum(c * sum_y**2))
    beta = np.linalg.solve(a, b)
    rss = ryy - float(b @ beta)
    n, p = float(counts.sum()), int(a.shape[0])
    sigma2 = max(rss, 1e-300) / (n - p)
    logdet_v = float(np.sum(np.log1p(counts * lam)))
    _, logdet_a = np.linalg.slogdet(a)
    neg_reml = 0.5 * ((n - p) * math.log(sigma2) + logdet_v + float(logdet_a))
    # The inverse of a float64 matrix is float64 (numpy's stubs say floating; no copy made).
    return neg_reml, beta, np.linalg.inv(a).astype(np.float64, copy=False), sigma2


def fit_random_intercept(
    y: ArrayLike,
    x: ArrayLike,
    groups: ArrayLike,
    *,
    covariates: ArrayLike | None = None,
) -> MixedFit:
    """Fit ``y ~ 1 + x + covariates + (1 | group)`` by REML.

    The variance ratio ``lambda = sigma_group^2 / sigma^2`` is profiled out and
    found by a bounded one-dimensional search on ``log lambda``; the fixed
    effects are then the GLS estimates. Agrees with statsmodels' ``MixedLM``
    (REML) to optimiser precision; tested in ``tests/test_correspondence.py``.

    Parameters
    ----------
    y, x : array_like, shape (n,)
        Response and the predictor of interest.
    groups : array_like of int, shape (n,)
        Group (subject) of each observation.
    covariates : array_like, shape (n, k), optional
        Further fixed effects.

    Returns
    -------
    MixedFit

    References
    ----------
    Laird & Ware (1982); Patterson & Thompson (1971).
    """
    fn = "fit_random_intercept"
    y_arr = as_float_array("y", y, fn, ndim=1, min_length=4)
    x_arr = as_float_array("x", x, fn, ndim=1, min_length=4)
    if x_arr.shape != y_arr.shape:
        raise InvalidParameterError("x", fn, f"an array of shape {y_arr.shape}", x_arr)
    _, g = np.unique(np.asarray(groups), return_inverse=True)
    cols = [np.ones_like(y_arr), x_arr]
    if covariates is not None:
        cov = as_float_array("covariates", covariates, fn, ndim=(1, 2))
        cols.extend(np.atleast_2d(cov.T) if cov.ndim == 2 else [cov])
    design = np.column_stack(cols)
    if np.linalg.matrix_rank(design) < design.shape[1]:
        raise InvalidParameterError("x", fn, "a predictor that is not constant or collinear", x)
    counts, sum_x, sum_y = _group_sums(design, y_arr, g)
    xtx, xty, yty = design.T @ design, design.T @ y_arr, float(y_arr @ y_arr)

    def objective(log_ratio: float) -> float:
        return _reml_pieces(log_ratio, xtx, xty, yty, counts, sum_x, sum_y)[0]

    # Search log(lambda) on [-20, 12]; the lower end is a group variance of
    # ~2e-9 of the residual one, which is the boundary fit for practical purposes.
    grid = np.linspace(-20.0, 12.0, 33)
    start = grid[int(np.argmin([objective(v) for v in grid]))]
    res = optimize.minimize_scalar(
        objective, bounds=(max(-20.0, start - 1.0), min(12.0, start + 1.0)), method="bounded"
    )
    _, beta, a_inv, sigma2 = _reml_pieces(res.x, xtx, xty, yty, counts, sum_x, sum_y)
    se = math.sqrt(sigma2 * a_inv[1, 1])
    z = stats.norm.ppf(0.975)
    return MixedFit(
        slope=float(beta[1]),
        se=se,
        ci_low=float(beta[1] - z * se),
        ci_high=float(beta[1] + z * se),
        p_value=float(2 * stats.norm.sf(abs(beta[1]) / se)) if se > 0 else float("nan"),
        intercept=float(beta[0]),
        group_variance=float(sigma2 * math.exp(res.x)),
        residual_variance=float(sigma2),
        n=int(y_arr.size),
        n_groups=int(counts.size),
    )


def _reml_columns(
    log_ratio: NDArray[np.float64],
    xtx: NDArray[np.float64],
    xty: NDArray[np.float64],
    yty: NDArray[np.float64],
    counts: NDArray[np.float64],
    sum_x: NDArray[np.float64],
    sum_y: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    # _reml_pieces for J responses sharing one design, each at its own log ratio:
    # log_ratio (J,), xty (J, p), yty (J,), sum_y (G, J). Same algebra, batched.
    lam = np.exp(log_ratio)
    c = lam[:, None] / (1.0 + counts[None, :] * lam[:, None])  # (J, G)
    a = xtx[None] - np.einsum("jg,gi,gk->jik", c, sum_x, sum_x)
    b = xty - np.einsum("jg,gi,gj->ji", c, sum_x, sum_y)
    ryy = yty - np.einsum("jg,gj->j", c, sum_y**2)
    beta = np.linalg.solve(a, b[:, :, None])[:, :, 0]
    rss = ryy - np.einsum("ji,ji->j", b, beta)
    n, p = float(counts.sum()), xtx.shape[0]
    sigma2 = np.maximum(rss, 1e-300) / (n - p)
    logdet_v = np.log1p(counts[None, :] * lam[:, None]).sum(axis=1)
    logdet_a = np.linalg.slogdet(a)[1]
    neg_reml = 0.5 * ((n - p) * np.log(sigma2) + logdet_v + logdet_a)
    return neg_reml, beta, np.linalg.inv(a), sigma2


#: Golden-section steps of the batched REML search: the bracket of width 2 shrinks by
#: 0.618 per step, to ~4e-7 in log lambda (finer than scipy's bounded default, 1e-5).
_GOLDEN_STEPS = 32


def random_intercept_columns(
    y: ArrayLike,
    x: ArrayLike,
    groups: ArrayLike,
    *,
    covariates: ArrayLike | None = None,
) -> tuple[NDArray[np.float64], ...]:
    """:func:`fit_random_intercept` for many responses sharing one predictor, batched.

    Every column of ``y`` is fitted by REML with the same design (intercept, ``x``,
    covariates) and groups; the search on ``log lambda`` is the same grid then a
    golden-section refinement, run for all columns at once.

    Parameters
    ----------
    y : array_like, shape (n, J)
    x : array_like, shape (n,)
    groups : array_like of int, shape (n,)
    covariates : array_like, shape (n, k), optional

    Returns
    -------
    slope, ci_low, ci_high, p_value : ndarray, shape (J,)
        As in :class:`MixedFit` (Wald, normal quantiles); NaN when the design is
        rank-deficient.
    """
    fn = "random_intercept_columns"
    y_arr = as_float_array("y", y, fn, ndim=(1, 2), min_length=4)
    y_arr = y_arr.reshape(y_arr.shape[0], -1)
    x_arr = as_float_array("x", x, fn, ndim=1, min_length=4)
    if x_arr.shape[0] != y_arr.shape[0]:
        raise InvalidParameterError("x", fn, f"{y_arr.shape[0]} values", x_arr)
    n_cols = y_arr.shape[1]
    _, g = np.unique(np.asarray(groups), return_inverse=True)
    cols = [np.ones_like(x_arr), x_arr]
    if covariates is not None:
        cov = as_float_array("covariates", covariates, fn, ndim=(1, 2))
        cols.extend(np.atleast_2d(cov.T) if cov.ndim == 2 else [cov])
    design = np.column_stack(cols)
    if np.linalg.matrix_rank(design) < design.shape[1]:
        nan = np.full(n_cols, np.nan)
        return nan, nan.copy(), nan.copy(), nan.copy()
    counts, sum_x, _ = _group_sums(design, y_arr[:, 0], g)
    sum_y = np.zeros((counts.size, n_cols))
    np.add.at(sum_y, g, y_arr)
    xtx, xty = design.T @ design, y_arr.T @ design
    yty = np.einsum("nj,nj->j", y_arr, y_arr)
    pieces = (xtx, xty, yty, counts, sum_x, sum_y)

    def objective(log_ratio: NDArray[np.float64]) -> NDArray[np.float64]:
        return _reml_columns(log_ratio, *pieces)[0]

    grid = np.linspace(-20.0, 12.0, 33)
    values = np.vstack([objective(np.full(n_cols, v)) for v in grid])
    start = grid[np.argmin(values, axis=0)]
    lo, hi = np.maximum(-20.0, start - 1.0), np.minimum(12.0, start + 1.0)
    ratio = (math.sqrt(5.0) - 1.0) / 2.0
    c1, c2 = hi - ratio * (hi - lo), lo + ratio * (hi - lo)
    f1, f2 = objective(c1), objective(c2)
    for _ in range(_GOLDEN_STEPS):
        left = f1 < f2  # the minimum lies in [lo, c2]
        hi = np.where(left, c2, hi)
        lo = np.where(left, lo, c1)
        new = np.where(left, hi - ratio * (hi - lo), lo + ratio * (hi - lo))
        f_new = objective(new)
        c2, f2, c1, f1 = (
            np.where(left, c1, new),
            np.where(left, f1, f_new),
            np.where(left, new, c2),
            np.where(left, f_new, f2),
        )
    _, beta, a_inv, sigma2 = _reml_columns((lo + hi) / 2, *pieces)
    se = np.sqrt(sigma2 * a_inv[:, 1, 1])
    z = stats.norm.ppf(0.975)
    slope = beta[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        p = np.where(se > 0, 2 * stats.norm.sf(np.abs(slope) / se), np.nan)
    return slope, slope - z * se, slope + z * se, p


@dataclass(frozen=True)
class PermutationGrid:
    """Arena-level permutation test for every terrain x movement pair.

    Attributes
    ----------
    statistic : ndarray, shape (n_terrain, n_movement)
        Trial-level correlation between the arena's terrain value and the
        subject-centred movement value.
    p_value : ndarray, shape (n_terrain, n_movement)
        Two-sided p-value. Exact enumeration includes the identity; Monte Carlo
        uses (1 + b) / (1 + B) (Phipson & Smyth 2010).
    n_permutations : int
        Number of permutations evaluated (``n_arenas!`` when exact).
    exact : bool
        Whether every permutation of the arenas was enumerated.
    """

    statistic: NDArray[np.float64]
    p_value: NDArray[np.float64]
    n_permutations: int
    exact: bool


def _centre_within(values: NDArray[np.float64], index: NDArray[np.intp]) -> NDArray[np.float64]:
    n_groups = int(index.max()) + 1
    counts = np.bincount(index, minlength=n_groups).astype(np.float64)
    sums = np.zeros((n_groups, values.shape[1]))
    np.add.at(sums, index, values)
    return values - (sums / counts[:, None])[index]


def _arena_permutations(n_arenas: int, n_permutations: int, seed: int) -> tuple[NDArray, bool]:
    if math.factorial(n_arenas) <= n_permutations + 1:
        return np.array(list(itertools.permutations(range(n_arenas))), dtype=np.intp), True
    rng = np.random.default_rng(seed)
    perms = np.argsort(rng.random((n_permutations, n_arenas)), axis=1)
    return perms, False


def _codes(index: ArrayLike, name: str, fn: str, n: int) -> NDArray[np.intp]:
    arr = np.asarray(index)
    if arr.shape != (n,) or not np.issubdtype(arr.dtype, np.integer) or (arr < 0).any():
        raise InvalidParameterError(name, fn, f"non-negative integer codes of shape ({n},)", arr)
    return arr.astype(np.intp)


def arena_permutation_test(
    terrain: ArrayLike,
    movement: ArrayLike,
    arena_index: ArrayLike,
    *,
    subject_index: ArrayLike | None = None,
    covariates: ArrayLike | None = None,
    n_permutations: int = 9999,
    seed: int = 0,
) -> PermutationGrid:
    """Permute terrain values across arenas, keeping each arena's trials together.

    The statistic is the Pearson correlation, over trials, between the
    arena's terrain value and the movement value centred within subject
    (so stable subject offsets do not dilute the test). Under the null of no
    terrain effect the arena labels of terrain values are exchangeable, which
    is what the permutation uses (Good 2005, ch. 3). When ``n_arenas!`` does not
    exceed ``n_permutations + 1`` every permutation is enumerated.

    With ``covariates`` the test is Freedman-Lane (1983) at the arena level.
    Movement and each covariate are centred within subject (when
    ``subject_index`` is given) and averaged per arena, every arena weighing
    the same. The reduced model ``arena movement ~ 1 + arena covariates`` is
    fitted; its residuals are permuted across arenas and added back to its
    fitted values; the statistic is the partial correlation of terrain with
    that response given the covariates. Why the arena level: terrain is
    constant within an arena, so the arenas, not the trials, are what is
    exchangeable under the null, and arena-level residuals carry any
    arena-to-arena variation the covariates leave (permuting trial-level
    residuals would need equal-sized arenas with matching subject layouts).
    Why not permuting terrain and re-residualising at the trial level (the
    Draper-Stoneman scheme of Winkler et al. 2014, Table 2): with speed
    correlated with terrain, our simulations found it liberal without arena
    noise and very conservative with it, while the arena-level Freedman-Lane
    p-values were uniform (``tests/test_covariates.py``). A covariate constant
    within subject (body length) is absorbed by the subject centring and
    drops out of the test; it still enters the mixed model. ``statistic`` is
    then the arena-level partial correlation.

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,) or (n_arenas, n_terrain)
    movement : array_like, shape (n_trials,) or (n_trials, n_movement)
    arena_index : array_like of int, shape (n_trials,)
        Row of ``terrain`` that each trial belongs to.
    subject_index : array_like of int, shape (n_trials,), optional
    covariates : array_like, shape (n_trials,) or (n_trials, k), optional
        Trial-level covariates (finite); switches to arena-level Freedman-Lane.
    n_permutations : int, default 9999
    seed : int, default 0

    Returns
    -------
    PermutationGrid

    References
    ----------
    Freedman & Lane (1983); Anderson & Legendre (1999); Winkler et al. (2014).
    """
    fn = "arena_permutation_test"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), min_length=2)
    m = as_float_array("movement", movement, fn, ndim=(1, 2), min_length=3)
    t = t.reshape(t.shape[0], -1)
    m = m.reshape(m.shape[0], -1)
    arena = _codes(arena_index, "arena_index", fn, m.shape[0])
    if arena.max() >= t.shape[0]:
        raise InvalidParameterError("arena_index", fn, f"codes below {t.shape[0]}", arena)
    check_positive_int("n_permutations", n_permutations, fn)
    if covariates is not None:
        z = as_float_array("covariates", covariates, fn, ndim=(1, 2))
        z = z.reshape(z.shape[0], -1)
        if z.shape[0] != m.shape[0]:
            raise InvalidParameterError("covariates", fn, f"{m.shape[0]} rows", z)
        subject = (
            None
            if subject_index is None
            else _codes(subject_index, "subject_index", fn, m.shape[0])
        )
        n_arenas = t.shape[0]
        if np.bincount(arena, minlength=n_arenas).min() == 0:
            raise InsufficientDataError("arena_index", fn, "at least one trial per arena", arena)
        z_bar = arena_level_values(z, arena, subject, n_arenas)
        if n_arenas < 3 + np.linalg.matrix_rank(z_bar - z_bar.mean(axis=0)):
            raise InsufficientDataError(
                "covariates", fn, "more arenas than covariates + 2", n_arenas
            )
        perms, exact = _arena_permutations(n_arenas, n_permutations, seed)
        stat, hits = freedman_lane_statistics(
            t, arena_level_values(m, arena, subject, n_arenas), z_bar, perms
        )
        p = hits / len(perms) if exact else (1 + hits) / (1 + len(perms))
        return _undefined_where_constant(PermutationGrid(stat, p, len(perms), exact), t, m)
    if subject_index is not None:
        m = _centre_within(m, _codes(subject_index, "subject_index", fn, m.shape[0]))
    m = m - m.mean(axis=0)
    n_arenas = t.shape[0]
    n_a = np.bincount(arena, minlength=n_arenas).astype(np.float64)
    s_a = np.zeros((n_arenas, m.shape[1]))
    np.add.at(s_a, arena, m)
    ss_m = np.sum(m**2, axis=0)
    perms, exact = _arena_permutations(n_arenas, n_permutations, seed)

    def corr(tv: NDArray[np.float64]) -> NDArray[np.float64]:
        # tv: (P, n_arenas) terrain value given to each arena.
        num = tv @ s_a
        den = tv**2 @ n_a - (tv @ n_a) ** 2 / n_a.sum()
        with np.errstate(divide="ignore", invalid="ignore"):
            return num / np.sqrt(np.maximum(den, 0.0)[:, None] * ss_m[None, :])

    stat = np.empty((t.shape[1], m.shape[1]))
    p = np.empty_like(stat)
    for k in range(t.shape[1]):
        observed = corr(t[None, :, k])[0]
        null = np.abs(corr(t[perms, k]))
        # A relative tolerance keeps permutations that tie the observed value
        # (by symmetry of the design) on the "as extreme" side.
        hits = (null >= np.abs(observed) * (1 - 1e-12)).sum(axis=0)
        stat[k] = observed
        p[k] = hits / len(perms) if exact else (1 + hits) / (1 + len(perms))
    return _undefined_where_constant(PermutationGrid(stat, p, len(perms), exact), t, m)


def _undefined_where_constant(
    grid: PermutationGrid, terrain: NDArray[np.float64], movement: NDArray[np.float64]
) -> PermutationGrid:
    # A measure with no spread has no correlation to test: its statistic and
    # p-value are NaN (never 0), so it cannot top a ranking or enter BH.
    flat = np.ptp(terrain, axis=0)[:, None] == 0
    flat = flat | (np.ptp(movement, axis=0)[None, :] == 0)
    if not flat.any():
        return grid
    stat = np.where(flat, np.nan, grid.statistic)
    p = np.where(flat, np.nan, grid.p_value)
    return PermutationGrid(stat, p, grid.n_permutations, grid.exact)


@dataclass(frozen=True)
class SpearmanBootstrap:
    """Spearman correlation of arena means with a hierarchical bootstrap CI.

    Attributes
    ----------
    rho, ci_low, ci_high : ndarray, shape (n_terrain, n_movement)
        Observed rank correlation and the percentile interval.
    n_boot : int
    level : float
    """

    rho: NDArray[np.float64]
    ci_low: NDArray[np.float64]
    ci_high: NDArray[np.float64]
    n_boot: int
    level: float


def _rank_standardise(values: NDArray[np.float64], axis: int) -> NDArray[np.float64]:
    ranks = stats.rankdata(values, axis=axis)
    ranks -= ranks.mean(axis=axis, keepdims=True)
    norm = np.sqrt((ranks**2).sum(axis=axis, keepdims=True))
    with np.errstate(invalid="ignore", divide="ignore"):
        return ranks / norm


def _cell_means(
    m: NDArray[np.float64], arena: NDArray[np.intp], subject: NDArray[np.intp], n_arenas: int
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Mean movement of each (arena, subject) cell: (A, S, M), and which cells exist."""
    n_subjects = int(subject.max()) + 1
    cell = arena * n_subjects + subject
    counts = np.bincount(cell, minlength=n_arenas * n_subjects).astype(np.float64)
    sums = np.zeros((n_arenas * n_subjects, m.shape[1]))
    np.add.at(sums, cell, m)
    present = counts > 0
    means = np.where(present[:, None], sums / np.maximum(counts, 1.0)[:, None], 0.0)
    return means.reshape(n_arenas, n_subjects, -1), present.reshape(n_arenas, n_subjects)


def hierarchical_bootstrap_spearman(
    terrain: ArrayLike,
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    n_boot: int = 1999,
    level: float = 0.95,
    seed: int = 0,
) -> SpearmanBootstrap:
    """Rank correlation of arena terrain with arena mean movement, and its CI.

    An arena's movement value is the mean of its subjects' mean trial values.
    Each bootstrap replicate resamples arenas with replacement and, as weights,
    subjects with replacement; one subject draw serves every arena, so a
    crossed design (every animal on every tray) keeps each animal's offset
    shared across arenas, as in the two-way "pigeonhole" bootstrap (Owen 2007).
    An arena none of whose drawn subjects walked it (nested designs) falls back
    to resampling its own subjects (Field & Welsh 2007). The interval is the
    percentile interval.

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,) or (n_arenas, n_terrain)
    movement : array_like, shape (n_trials,) or (n_trials, n_movement)
    arena_index, subject_index : array_like of int, shape (n_trials,)
    n_boot : int, default 1999
    level : float, default 0.95
    seed : int, default 0

    Returns
    -------
    SpearmanBootstrap

    References
    ----------
    Owen, A. B. (2007). The pigeonhole bootstrap. Ann. Appl. Stat. 1, 386-411.
    Field, C. A. & Welsh, A. H. (2007). J. R. Stat. Soc. B 69, 369-390.
    """
    fn = "hierarchical_bootstrap_spearman"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), min_length=3)
    m = as_float_array("movement", movement, fn, ndim=(1, 2), min_length=3)
    t = t.reshape(t.shape[0], -1)
    m = m.reshape(m.shape[0], -1)
    arena = _codes(arena_index, "arena_index", fn, m.shape[0])
    subject = _codes(subject_index, "subject_index", fn, m.shape[0])
    n_arenas = t.shape[0]
    if np.bincount(arena, minlength=n_arenas).min() == 0:
        raise InsufficientDataError("arena_index", fn, "at least one trial per arena", arena)
    means, present = _cell_means(m, arena, subject, n_arenas)
    arena_means = np.einsum("asm,as->am", means, present) / present.sum(axis=1)[:, None]
    rho = np.einsum("at,am->tm", _rank_standardise(t, 0), _rank_standardise(arena_means, 0))

    rng = np.random.default_rng(seed)
    n_subjects = present.shape[1]
    drawn = rng.integers(0, n_arenas, size=(n_boot, n_arenas))
    weights = rng.multinomial(n_subjects, np.full(n_subjects, 1.0 / n_subjects), size=n_boot)
    w = weights[:, None, :] * present[drawn]  # (B, A, S): weight of each subject in each slot
    total = w.sum(axis=2)
    boot_m = np.einsum("bas,basm->bam", w, means[drawn]) / np.maximum(total, 1)[..., None]
    for b, a in zip(*np.nonzero(total == 0), strict=True):
        own = np.flatnonzero(present[drawn[b, a]])
        pick = rng.choice(own, size=own.size)
        boot_m[b, a] = means[drawn[b, a], pick].mean(axis=0)
    boot_rho = np.einsum(
        "bat,bam->btm", _rank_standardise(t[drawn], 1), _rank_standardise(boot_m, 1)
    )
    tail = 100 * (1 - level) / 2
    with warnings.catch_warnings():
        # A constant measure has no ranks: its interval is NaN, and the grid's
        # design warnings already say "zero variance".
        warnings.simplefilter("ignore", RuntimeWarning)
        lo, hi = np.nanpercentile(boot_rho, [tail, 100 - tail], axis=0)
    return SpearmanBootstrap(rho, lo, hi, n_boot, level)


def _subject_mean_arena_means(
    m: NDArray[np.float64], arena: NDArray[np.intp], subject: NDArray[np.intp], n_arenas: int
) -> NDArray[np.float64]:
    # Mean of subject means per arena: the values the bootstrap Spearman ranks.
    _, sub = np.unique(subject, return_inverse=True)
    means, present = _cell_means(m, arena, sub, n_arenas)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.einsum("asm,as->am", means, present) / present.sum(axis=1)[:, None]


def benjamini_hochberg(p_values: ArrayLike) -> NDArray[np.float64]:
    """Benjamini-Hochberg q-values (NaN entries are left NaN and not counted).

    References
    ----------
    Benjamini & Hochberg (1995).
    """
    p = np.asarray(p_values, dtype=np.float64)
    q = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    if ok.any():
        q[ok] = stats.false_discovery_control(p[ok], method="bh")
    return q


@dataclass(frozen=True)
class CorrespondenceRow:
    """One terrain x movement pair (the contract row of the HTTP API).

    ``slope``, ``ci_low``, ``ci_high``: the arena-level slope and its t interval
    (:func:`measures.arena_slope`, ``slope_df`` degrees of freedom). ``trial_slope``,
    ``trial_ci_low``, ``trial_ci_high``, ``mixed_p_value``: the trial-level mixed model
    with a subject intercept only, which treats trials of one arena as independent
    replicates of terrain (too narrow when arenas differ by more than terrain); kept for
    reference, never the main interval. ``spearman_p_value``: exact permutation p-value
    below 10 arenas (:func:`measures.spearman_test`).
    """

    terrain_measure: str
    movement_measure: str
    slope: float
    ci_low: float
    ci_high: float
    p_value: float
    q_value: float
    spearman_rho: float
    spearman_ci_low: float
    spearman_ci_high: float
    mixed_p_value: float
    n_arenas: int
    n_subjects: int
    n_trials: int
    slope_se: float = math.nan
    slope_df: int = 0
    spearman_p_value: float = math.nan
    trial_slope: float = math.nan
    trial_ci_low: float = math.nan
    trial_ci_high: float = math.nan


@dataclass(frozen=True)
class CorrespondenceGrid:
    """Every pair's row, the study counts and plain-language warnings."""

    rows: tuple[CorrespondenceRow, ...]
    warnings: tuple[str, ...]
    n_arenas: int
    n_subjects: int
    n_trials: int
    n_permutations: int
    exact_permutations: bool
    covariate_names: tuple[str, ...] = ()


def _design_warnings(
    t: NDArray[np.float64],
    m: NDArray[np.float64],
    arena: NDArray[np.intp],
    subject: NDArray[np.intp],
    terrain_names: Sequence[str],
    movement_names: Sequence[str],
) -> list[str]:
    warnings = []
    n_arenas, n_subjects = t.shape[0], np.unique(subject).size
    if n_arenas < MIN_ARENAS:
        warnings.append(
            f"Only {n_arenas} arenas: the arena is the unit of replication for terrain, and "
            f"fewer than {MIN_ARENAS} give fragile slopes and coarse permutation p-values "
            f"(smallest possible two-sided p = {2 / math.factorial(n_arenas):.3g})."
        )
    if n_subjects < MIN_SUBJECTS:
        warnings.append(
            f"Only {n_subjects} subjects: subject effects are poorly estimated and results "
            "may not generalise beyond these animals."
        )
    arenas_per_subject = [np.unique(arena[subject == s]).size for s in np.unique(subject)]
    if max(arenas_per_subject) <= 1:
        warnings.append(
            "Every subject walked a single arena: subject and arena are confounded, so a "
            "terrain effect cannot be told apart from differences between animals."
        )
    for name, col in zip(terrain_names, t.T, strict=True):
        if np.ptp(col) == 0:
            warnings.append(f"Terrain measure {name!r} is the same in every arena.")
    for name, col in zip(movement_names, m.T, strict=True):
        if np.ptp(col) == 0:
            warnings.append(f"Movement measure {name!r} has zero variance across trials.")
    return warnings


def correspondence_grid(
    terrain: ArrayLike,
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    terrain_names: Sequence[str],
    movement_names: Sequence[str],
    n_permutations: int = 9999,
    n_boot: int = 1999,
    seed: int = 0,
    covariates: ArrayLike | None = None,
    covariate_names: Sequence[str] = (),
    trial_level: bool = True,
) -> CorrespondenceGrid:
    """Fit every terrain x movement pair and correct across the grid.

    Per pair: the arena-level slope (subject-adjusted arena means on terrain, one point
    per arena) with its t interval (``slope``, ``ci_low``, ``ci_high``; the arena is the
    unit of replication), the arena-level permutation p-value (``p_value``, the one the
    q-values are computed from), the Spearman correlation of arena means with a
    hierarchical bootstrap CI and an exact p-value below 10 arenas, Benjamini-Hochberg
    q-values across the whole grid, and for reference the trial-level random-intercept
    mixed model ``movement ~ terrain + (1 | subject)`` (``trial_slope``,
    ``trial_ci_low``, ``trial_ci_high``, ``mixed_p_value``).

    With ``covariates`` the arena-level slope is the partial slope given the arena means
    of the covariates, the mixed model is ``movement ~ terrain + covariates +
    (1 | subject)``, the permutation test is the arena-level Freedman-Lane test
    of :func:`arena_permutation_test`, and the Spearman correlation uses the
    covariate-adjusted movement ``movement - covariates @ g``, ``g`` from the
    reduced model ``movement ~ covariates + subject`` (within-subject least
    squares; the adjustment gives the covariates every shared share, as the
    Freedman-Lane reduced model does).

    Parameters
    ----------
    terrain : array_like, shape (n_arenas, n_terrain)
    movement : array_like, shape (n_trials, n_movement)
    arena_index, subject_index : array_like of int, shape (n_trials,)
    terrain_names, movement_names : sequence of str
    n_permutations, n_boot, seed : int
    covariates : array_like, shape (n_trials, k), optional
        Trial-level covariates (finite), e.g. mean speed in m/s.
    covariate_names : sequence of str, length k
    trial_level : bool, default True
        Fit the trial-level reference model; False leaves ``trial_*`` and
        ``mixed_p_value`` NaN (it is a labelled reference, and the costliest part
        of a large grid).

    Returns
    -------
    CorrespondenceGrid
    """
    fn = "correspondence_grid"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), min_length=2)
    m = as_float_array("movement", movement, fn, ndim=(1, 2), min_length=3)
    t = t.reshape(t.shape[0], -1)
    m = m.reshape(m.shape[0], -1)
    if len(terrain_names) != t.shape[1] or len(movement_names) != m.shape[1]:
        raise InvalidParameterError(
            "terrain_names", fn, "one name per column of terrain and movement", terrain_names
        )
    arena = _codes(arena_index, "arena_index", fn, m.shape[0])
    subject = _codes(subject_index, "subject_index", fn, m.shape[0])
    z = None
    if covariates is not None:
        z = as_float_array("covariates", covariates, fn, ndim=(1, 2))
        z = z.reshape(z.shape[0], -1)
        if z.shape[0] != m.shape[0] or len(covariate_names) != z.shape[1]:
            raise InvalidParameterError(
                "covariates", fn, f"{m.shape[0]} rows and one name per column", covariate_names
            )
    warnings = _design_warnings(t, m, arena, subject, terrain_names, movement_names)
    perm = arena_permutation_test(
        t, m, arena, subject_index=subject, covariates=z, n_permutations=n_permutations, seed=seed
    )
    m_boot = m if z is None else adjust_movement(m, subject, z)
    if t.shape[0] >= 3:
        boot = hierarchical_bootstrap_spearman(t, m_boot, arena, subject, n_boot=n_boot, seed=seed)
        rho, rho_lo, rho_hi = boot.rho, boot.ci_low, boot.ci_high
    else:
        rho = rho_lo = rho_hi = np.full((t.shape[1], m.shape[1]), np.nan)
    q = benjamini_hochberg(perm.p_value)
    n_subjects = int(np.unique(subject).size)
    n_arenas = t.shape[0]
    z_bar = None if z is None else arena_level_values(z, arena, subject, n_arenas)
    a_means = arena_movement_means(m, arena, subject, n_arenas=n_arenas).mean
    with warnings_module.catch_warnings():
        warnings_module.simplefilter("ignore", RuntimeWarning)
        # Constant sides give NaN rows here; the caller lists them as not estimable.
        slope_fit = arena_slope(t, a_means, arena_covariates=z_bar)
    rank_means = _subject_mean_arena_means(m_boot, arena, subject, n_arenas)
    rows = []
    nan_row = np.full(m.shape[1], np.nan)
    for i, t_name in enumerate(terrain_names):
        # The trial-level reference: all movement measures of one terrain column at once.
        trial_fit: tuple[NDArray[np.float64], ...] = (nan_row,) * 4
        if trial_level:
            with contextlib.suppress(InvalidParameterError, np.linalg.LinAlgError):
                trial_fit = random_intercept_columns(m, t[arena, i], subject, covariates=z)
        for j, m_name in enumerate(movement_names):
            mixed = tuple(float(v[j]) for v in trial_fit)
            sp = spearman_test(t[:, i], rank_means[:, j])
            rows.append(
                CorrespondenceRow(
                    terrain_measure=t_name,
                    movement_measure=m_name,
                    slope=float(slope_fit.slope[i, j]),
                    ci_low=float(slope_fit.ci_low[i, j]),
                    ci_high=float(slope_fit.ci_high[i, j]),
                    p_value=float(perm.p_value[i, j]),
                    q_value=float(q[i, j]),
                    spearman_rho=float(rho[i, j]),
                    spearman_ci_low=float(rho_lo[i, j]),
                    spearman_ci_high=float(rho_hi[i, j]),
                    mixed_p_value=mixed[3],
                    n_arenas=int(n_arenas),
                    n_subjects=n_subjects,
                    n_trials=int(m.shape[0]),
                    slope_se=float(slope_fit.se[i, j]),
                    slope_df=int(slope_fit.df),
                    spearman_p_value=sp.p_value,
                    trial_slope=mixed[0],
                    trial_ci_low=mixed[1],
                    trial_ci_high=mixed[2],
                )
            )
    return CorrespondenceGrid(
        tuple(rows),
        tuple(warnings),
        int(t.shape[0]),
        n_subjects,
        int(m.shape[0]),
        perm.n_permutations,
        perm.exact,
        tuple(covariate_names) if z is not None else (),
    )
