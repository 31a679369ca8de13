"""Confound checks and design summary of the correspondence.

Sources: statsmodels' variance_inflation_factor (VIF); scipy.stats.spearmanr / pearsonr;
pandas groupby for arena means and count tables; the power hint against a direct
simulation of an arena-level permutation test of Spearman's rho on bivariate normal data,
with Pearson r = 2 sin(pi rho_s / 6) giving population Spearman rho_s (Pearson 1907,
the normal-theory relation).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from _testing import assert_allclose
from scipy import stats
from statsmodels.stats.outliers_influence import variance_inflation_factor

from measures import (
    collinearity_check,
    confound_checks,
    design_summary,
    detectable_rank_correlation,
    subject_arena_balance,
    terrain_speed_check,
)


def test_vif_matches_statsmodels(rng):
    x = rng.normal(size=(30, 4))
    x[:, 3] = x[:, 0] + 0.3 * x[:, 1] + 0.2 * rng.normal(size=30)
    res = collinearity_check(x, terrain_names=list("abcd"))
    exog = np.column_stack([np.ones(30), x])  # statsmodels regresses on the columns given
    ref = [variance_inflation_factor(exog, j) for j in range(1, 5)]
    assert_allclose(res.vif, ref, rtol=1e-9)
    for i in range(4):
        for j in range(4):
            assert_allclose(res.correlation[i, j], stats.pearsonr(x[:, i], x[:, j])[0], rtol=1e-9)


def test_same_thing_twice_is_reported(rng):
    rough = rng.uniform(size=10)
    terrain = np.column_stack(
        [rough, 2.0 * rough + 1e-3 * rng.normal(size=10), rng.normal(size=10)]
    )
    names = ["sq_m", "sa_m", "hurst"]
    res = collinearity_check(terrain, terrain_names=names)
    assert [(a, b) for a, b, _ in res.same_pairs] == [("sq_m", "sa_m")]
    arena = np.repeat(np.arange(10), 2)
    checks = confound_checks(terrain, arena, np.tile([0, 1], 10), terrain_names=names)
    assert any("same thing twice" in w for w in checks.warnings)
    # An exact duplicate has an infinite VIF (R^2 = 1).
    exact = collinearity_check(np.column_stack([rough, 3 * rough]), terrain_names=["a", "b"])
    assert np.isinf(exact.vif).all()


def test_speed_check_matches_scipy_on_arena_means(rng):
    n_arenas = 7
    terrain = rng.uniform(size=n_arenas)
    arena = rng.integers(0, n_arenas, 60)
    arena[:n_arenas] = np.arange(n_arenas)
    speed = 0.4 - 0.2 * terrain[arena] + 0.02 * rng.normal(size=60)
    speed[5] = np.nan  # gaps are ignored in the arena mean
    (row,) = terrain_speed_check(terrain, speed, arena, terrain_names=["sq_m"])
    means = pd.Series(speed).groupby(arena).mean().sort_index()
    ref = stats.spearmanr(terrain, means.to_numpy())
    assert_allclose(row.rho, ref.statistic)
    # 7 arenas: the p-value is the exact permutation one (all 7! pairings; Good 2005).
    # Oracle: brute-force enumeration in integer arithmetic (ranks doubled and centred),
    # so ties between permutations are exact. (scipy's permutation_test on |rho| differed
    # here by one to two tied permutations from run to run: floating-point ties.)
    rx = (2 * stats.rankdata(terrain) - (n_arenas + 1)).astype(int)
    ry = (2 * stats.rankdata(means.to_numpy()) - (n_arenas + 1)).astype(int)
    observed = abs(int(rx @ ry))
    hits = sum(
        abs(int(rx @ ry[list(p)])) >= observed for p in itertools.permutations(range(n_arenas))
    )
    assert_allclose(row.p_value, hits / math.factorial(n_arenas), rtol=1e-12)
    assert row.confounded and row.rho < 0


def test_speed_check_three_arenas_is_exact():
    # Three arenas in perfect inverse order: asymptotically "p = 0", exactly 2/3! = 1/3.
    (row,) = terrain_speed_check(
        [0.1, 0.5, 0.9], [0.3, 0.3, 0.2, 0.2, 0.1, 0.1], [0, 0, 1, 1, 2, 2], terrain_names=["t"]
    )
    assert row.rho == pytest.approx(-1.0)
    assert row.p_value == pytest.approx(1 / 3)
    assert not row.confounded


def test_balance_flags_and_counts():
    arena = np.array([0, 0, 1, 1, 2, 2, 2])
    subject = np.array([10, 11, 10, 11, 10, 11, 11])
    res = subject_arena_balance(arena, subject)
    expected = pd.crosstab(arena, subject).to_numpy()  # pandas as the count reference
    assert (res.counts == expected).all()
    assert res.fully_crossed and not res.balanced and res.fill_fraction == 1.0
    nested = subject_arena_balance(np.array([0, 0, 1, 1]), np.array([0, 0, 1, 1]))
    assert not nested.fully_crossed and nested.fill_fraction == 0.5
    checks = confound_checks(
        np.array([0.1, 0.2]), np.array([0, 0, 1, 1]), np.array([0, 0, 1, 1]), terrain_names=["t"]
    )
    assert any("Unbalanced" in w for w in checks.warnings)


def test_detectable_rho_closed_form():
    # Fisher z with var 1.06/(n-3) (Fieller, Hartley & Pearson 1957): n = 28 gives
    # tanh((1.959964 + 0.841621) * sqrt(1.06 / 25)) by hand.
    assert_allclose(
        detectable_rank_correlation(28), math.tanh(2.801585 * math.sqrt(1.06 / 25)), rtol=1e-6
    )
    assert math.isnan(detectable_rank_correlation(4))  # 2/4! = 0.083 > 0.05: unreachable
    assert detectable_rank_correlation(50) < detectable_rank_correlation(10)


def _simulated_power(n_arenas, rho_s, *, n_sims, n_perm, seed):
    """Power of a two-sided arena-level permutation test of Spearman's rho, by simulation."""
    rng = np.random.default_rng(seed)
    r = 2 * math.sin(math.pi * rho_s / 6)  # Pearson r giving Spearman rho_s (normal theory)
    cov = [[1.0, r], [r, 1.0]]
    xy = rng.multivariate_normal([0, 0], cov, size=(n_sims, n_arenas))
    rx = stats.rankdata(xy[..., 0], axis=1) - (n_arenas + 1) / 2
    ry = stats.rankdata(xy[..., 1], axis=1) - (n_arenas + 1) / 2
    observed = np.abs(np.sum(rx * ry, axis=1))
    perms = np.argsort(rng.random((n_perm, n_arenas)), axis=1)
    hits = np.zeros(n_sims)
    for k in range(n_sims):
        null = np.abs(ry[k, perms] @ rx[k])
        hits[k] = np.sum(null >= observed[k] * (1 - 1e-12))
    p = (1 + hits) / (1 + n_perm)
    return float(np.mean(p <= 0.05))


@pytest.mark.parametrize("n_arenas", [12, 30])
def test_power_hint_agrees_with_simulation(n_arenas):
    rho = detectable_rank_correlation(n_arenas)
    power = _simulated_power(n_arenas, rho, n_sims=1500, n_perm=499, seed=n_arenas)
    # Tolerance 0.05: Monte Carlo SE sqrt(0.8 * 0.2 / 1500) = 0.010 plus the Fisher-z
    # approximation's own error at small n (a few percent; Fieller et al. 1957).
    assert abs(power - 0.8) < 0.05, power


def test_design_summary_counts(rng):
    arena = rng.integers(0, 6, 80)
    subject = rng.integers(0, 4, 80)
    arena[:6] = np.arange(6)
    res = design_summary(arena, subject)
    assert (res.counts == pd.crosstab(arena, subject).to_numpy()).all()
    assert res.n_trials == 80 and res.n_arenas == 6 and res.n_subjects == 4
    assert_allclose(res.detectable_rho, detectable_rank_correlation(6))


def test_vif_undefined_when_arenas_do_not_exceed_measures(rng):
    # A regression with k coefficients fits k points exactly (any data): R^2 = 1 by
    # construction, so with n <= k arenas the VIF is undefined, not "above 10".
    names = [f"m{j}" for j in range(5)]
    terrain = rng.normal(size=(5, 5))  # independent columns; 5 arenas, 5 measures
    res = collinearity_check(terrain, terrain_names=names)
    assert res.n_arenas == 5 and not res.vif_defined and np.isnan(res.vif).all()
    checks = confound_checks(terrain, np.arange(5), np.zeros(5, int), terrain_names=names)
    assert any("undefined" in w for w in checks.warnings)
    assert not any("above 10" in w for w in checks.warnings)
    # One arena more: defined, and equal to statsmodels' (1 residual df: flagged as rough).
    six = rng.normal(size=(6, 5))
    res = collinearity_check(six, terrain_names=names)
    exog = np.column_stack([np.ones(6), six])
    assert_allclose(res.vif, [variance_inflation_factor(exog, j) for j in range(1, 6)], rtol=1e-9)


def test_pairwise_r_of_terrain_measures_is_reported(rng):
    # Reference: scipy's Pearson r for the extreme pairs the note names.
    x = rng.normal(size=(12, 3))
    x[:, 1] = x[:, 0] + 0.1 * rng.normal(size=12)
    names = ["a", "b", "c"]
    coll = collinearity_check(x, terrain_names=names)
    pairs = coll.pairs_by_abs_r()
    assert pairs[0][:2] == ("a", "b")
    assert_allclose(pairs[0][2], stats.pearsonr(x[:, 0], x[:, 1])[0], rtol=1e-9)
    low = min(((i, j) for i in range(3) for j in range(i + 1, 3)),
              key=lambda ij: abs(stats.pearsonr(x[:, ij[0]], x[:, ij[1]])[0]))  # fmt: skip
    assert (pairs[-1][0], pairs[-1][1]) == (names[low[0]], names[low[1]])
    checks = confound_checks(x, np.arange(12), np.zeros(12, int), terrain_names=names)
    (note,) = [w for w in checks.warnings if "ranges from" in w]
    assert f"to {abs(pairs[0][2]):.2f} ('a' vs 'b')" in note and "over 12 arenas" in note
