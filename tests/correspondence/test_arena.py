"""Arena-level inference: slope interval, exact Spearman p, estimability, folding.

Sources named beside each check: statsmodels OLS (reference library) for the arena-level
slope and its t interval; exact enumeration of all n! rank pairings for Spearman's p
(Good 2005, ch. 3; Phipson & Smyth 2010 for why a permutation p is never 0); coverage by
simulation for the crossed random-effects model (Searle, Casella & McCulloch 1992: for
balanced data the arena-means t interval is the exact REML/ANOVA interval, from memory;
Field & Welsh 2007 on why trial-level intervals are too narrow for clustered data).
"""

from __future__ import annotations

import itertools
import math
from functools import partial

import numpy as np
import pytest
import statsmodels.api as sm
from _testing import assert_allclose, crossed_study
from scipy import stats

from measures import (
    arena_movement_means,
    arena_permutation_test,
    arena_slope,
    fit_random_intercept,
    not_estimable_reason,
    redundancy_groups,
    spearman_test,
)

#: y = 1 + slope * terrain + arena offset + subject offset + noise (crossed, balanced).
_crossed = partial(
    crossed_study, n_arenas=8, n_subjects=4, trials=2, slope=0.0, arena_sd=0.5, noise_sd=0.5
)


def test_arena_slope_matches_statsmodels_ols(rng):
    # Reference: statsmodels OLS on the arena means (balanced: subject-adjusted = plain).
    terrain, y, arena, subject = _crossed(rng, slope=0.6)
    means = arena_movement_means(y, arena, subject)
    plain = np.array([y[arena == a].mean() for a in range(8)])
    assert_allclose(means.mean[:, 0], plain, rtol=1e-12)
    fit = arena_slope(terrain, means.mean)
    ols = sm.OLS(plain, sm.add_constant(terrain)).fit()
    assert_allclose(fit.slope[0, 0], ols.params[1], rtol=1e-10)
    assert_allclose(fit.se[0, 0], ols.bse[1], rtol=1e-10)
    assert_allclose([fit.ci_low[0, 0], fit.ci_high[0, 0]], ols.conf_int()[1], rtol=1e-10)
    assert_allclose(fit.p_value[0, 0], ols.pvalues[1], rtol=1e-8)
    assert fit.df == 6


def test_arena_means_interval_is_t_over_subjects(rng):
    # Per arena: t interval over the subject means (scipy.stats.t), analytic.
    _, y, arena, subject = _crossed(rng, n_arenas=3, n_subjects=5, trials=3)
    means = arena_movement_means(y, arena, subject)
    centred = y - np.array([y[subject == s].mean() for s in subject]) + y.mean()
    sub = np.array([centred[(arena == 0) & (subject == s)].mean() for s in range(5)])
    half = stats.t.ppf(0.975, 4) * sub.std(ddof=1) / math.sqrt(5)
    assert_allclose(
        [means.ci_low[0, 0], means.ci_high[0, 0]], [sub.mean() - half, sub.mean() + half]
    )


@pytest.mark.parametrize("n", [3, 4, 5, 6])
def test_spearman_exact_p_equals_enumeration(rng, n):
    # Exact permutation p (Good 2005): enumerate every pairing of ranks by hand.
    x, y = rng.normal(size=n), rng.normal(size=n) + 0.5 * np.arange(n)
    res = spearman_test(x, y)
    rho = stats.spearmanr(x, y).statistic
    null = [stats.spearmanr(x, y[list(p)]).statistic for p in itertools.permutations(range(n))]
    assert_allclose(res.rho, rho, rtol=1e-12)
    assert_allclose(res.p_value, np.mean(np.abs(null) >= abs(rho) - 1e-12))
    assert res.method.startswith("exact")


def test_spearman_three_points_is_one_third_not_zero():
    # The case: rho = -1 from 3 arenas; scipy's t approximation says p = 0,
    # the exact p is 2/3! = 1/3 (the two orders with |rho| = 1).
    res = spearman_test([0.1, 0.5, 0.9], [3.0, 2.0, 1.0])
    assert res.rho == pytest.approx(-1.0) and res.p_value == pytest.approx(1 / 3)
    assert stats.spearmanr([0.1, 0.5, 0.9], [3.0, 2.0, 1.0]).pvalue < 1e-6


def test_spearman_ten_points_uses_t_approximation(rng):
    x, y = rng.normal(size=10), rng.normal(size=10)
    res = spearman_test(x, y)
    assert_allclose(res.p_value, stats.spearmanr(x, y).pvalue)


def test_not_estimable_reasons():
    assert "constant" in not_estimable_reason([0.3, 0.3, 0.3, 0.3])
    assert "constant" in not_estimable_reason([1.0, 1.0 + 1e-9, 1.0, 1.0])
    assert "only 2 arena" in not_estimable_reason([1.0, 2.0, np.nan])
    assert not_estimable_reason([0.0, 1e-3, 2e-3]) is None  # small but real spread


def test_mirror_pair_is_one_group(rng):
    rough = rng.uniform(size=7)
    values = np.column_stack([rough, -3 * rough + 0.01 * rng.normal(size=7), rng.normal(size=7)])
    groups = redundancy_groups(values, ["sq_m", "mirror", "hurst"])
    assert [g.members for g in groups] == [("sq_m", "mirror"), ("hurst",)]
    assert groups[0].min_abs_r >= 0.95
    # Four shared arenas are too few to fold (chance |r| >= 0.95 is about 5 %).
    assert len(redundancy_groups(values[:4], ["sq_m", "mirror", "hurst"])) == 3


@pytest.mark.slow
def test_null_coverage_of_arena_interval_and_trial_interval_too_narrow():
    # Null studies with arena offsets (true slope 0): the arena-level 95 % interval covers
    # 0 in 93-97 % of 1,000 seeds; the trial-level subject-intercept interval does not.
    covered = trial_covered = 0
    n_seeds = 1000
    for seed in range(n_seeds):
        r = np.random.default_rng(seed)
        terrain, y, arena, subject = _crossed(r, slope=0.0, arena_sd=0.5)
        fit = arena_slope(terrain, arena_movement_means(y, arena, subject).mean)
        covered += fit.ci_low[0, 0] <= 0.0 <= fit.ci_high[0, 0]
        if seed < 200:
            trial = fit_random_intercept(y, terrain[arena], subject)
            trial_covered += trial.ci_low <= 0.0 <= trial.ci_high
    assert 0.93 <= covered / n_seeds <= 0.97, covered / n_seeds
    assert trial_covered / 200 < 0.85, trial_covered / 200


@pytest.mark.slow
def test_unbalanced_null_coverage():
    # A quarter of the subject x arena cells empty: approximately nominal still.
    covered, n_seeds = 0, 600
    for seed in range(n_seeds):
        r = np.random.default_rng(10_000 + seed)
        terrain, y, arena, subject = _crossed(r, n_subjects=6, slope=0.0)
        keep = r.random(8 * 6)[arena * 6 + subject] > 0.25
        keep[arena == arena[0]] = True
        for a in range(8):  # every arena keeps at least one trial
            keep[np.flatnonzero(arena == a)[0]] = True
        y, a_, s_ = y[keep], arena[keep], subject[keep]
        fit = arena_slope(terrain, arena_movement_means(y, a_, s_, n_arenas=8).mean)
        covered += fit.ci_low[0, 0] <= 0.0 <= fit.ci_high[0, 0]
    assert 0.92 <= covered / n_seeds <= 0.98, covered / n_seeds


@pytest.mark.slow
def test_effect_studies_interval_agrees_with_permutation_verdict():
    # With an effect, "interval excludes 0" and "arena permutation p < 0.05" agree in at
    # least 90 % of 200 seeds (both test the same arena-level hypothesis).
    agree, n_seeds, found = 0, 200, 0
    for seed in range(n_seeds):
        r = np.random.default_rng(20_000 + seed)
        terrain, y, arena, subject = _crossed(r, slope=0.5, arena_sd=0.4)
        fit = arena_slope(terrain, arena_movement_means(y, arena, subject).mean)
        perm = arena_permutation_test(
            terrain, y, arena, subject_index=subject, n_permutations=999, seed=seed
        )
        ci_says = not fit.ci_low[0, 0] <= 0.0 <= fit.ci_high[0, 0]
        perm_says = perm.p_value[0, 0] < 0.05
        agree += ci_says == perm_says
        found += ci_says
    assert agree / n_seeds >= 0.9, agree / n_seeds
    assert 0.2 < found / n_seeds < 0.95  # a real test: neither always nor never significant
