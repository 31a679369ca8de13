"""Covariates in the correspondence: arena-level Freedman-Lane test and adjusted mixed model.

Sources: Freedman & Lane (1983), J. Bus. Econ. Stat. 1:292 (the permutation scheme);
Anderson & Legendre (1999), J. Stat. Comput. Simul. 62:271 and Winkler et al. (2014),
NeuroImage 92:381 (Table 2, the scheme's algebra); statsmodels OLS / MixedLM as the
reference fits; scipy.stats.kstest for uniformity of null p-values.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from _testing import assert_allclose
from scipy import stats

from measures import arena_permutation_test, correspondence_grid, fit_random_intercept
from measures._validation import InsufficientDataError


def confounded_study(seed, *, n_arenas=12, n_subjects=5, reps=3, arena_sd=0.03, effect=0.0):
    """Roughness lowers speed; speed alone (plus ``effect`` x roughness) drives movement.

    Invented data for the checks (no published values exist for this design).
    """
    rng = np.random.default_rng(seed)
    rough = rng.uniform(0.0, 1.0, n_arenas)
    arena = np.repeat(np.arange(n_arenas), n_subjects * reps)
    subject = np.tile(np.repeat(np.arange(n_subjects), reps), n_arenas)
    v_arena = 0.45 - 0.2 * rough + 0.03 * rng.normal(size=n_arenas)
    speed = (
        v_arena[arena]
        + 0.04 * rng.normal(size=arena.size)
        + 0.03 * rng.normal(size=n_subjects)[subject]
    )
    movement = (
        2.0 * speed
        + effect * rough[arena]
        + 0.2 * rng.normal(size=n_subjects)[subject]
        + arena_sd * rng.normal(size=n_arenas)[arena]
        + 0.05 * rng.normal(size=arena.size)
    )
    return rough, movement, arena, subject, speed


def _p(seed, *, covariate, n_permutations=999, **kwargs):
    rough, move, arena, subject, speed = confounded_study(seed, **kwargs)
    res = arena_permutation_test(
        rough,
        move,
        arena,
        subject_index=subject,
        covariates=speed if covariate else None,
        n_permutations=n_permutations,
        seed=seed,
    )
    return float(res.p_value[0, 0])


def test_speed_confound_appears_without_covariate_and_vanishes_with_it():
    # 20 seeds in the default run; the slow test below reports the rate over 300.
    seeds = range(20)
    without = np.array([_p(s, covariate=False) for s in seeds])
    with_cov = np.array([_p(s, covariate=True) for s in seeds])
    assert (without < 0.05).mean() >= 0.9
    assert (with_cov > 0.05).mean() >= 0.8


def test_true_effect_beyond_speed_is_still_found():
    # Power check: a terrain effect on top of speed survives the adjustment.
    p = [_p(s, covariate=True, effect=0.3) for s in range(10)]
    assert np.mean(np.array(p) < 0.05) >= 0.8


def _reference_freedman_lane(rough, move, arena, subject, speed):
    """Freedman-Lane by brute force with statsmodels OLS on pandas arena means."""
    df = pd.DataFrame({"arena": arena, "subject": subject, "y": move, "v": speed})
    for col in ("y", "v"):
        df[col] = df[col] - df.groupby("subject")[col].transform("mean")
    means = df.groupby("arena")[["y", "v"]].mean().sort_index()
    reduced = sm.OLS(means["y"].to_numpy(), sm.add_constant(means["v"].to_numpy())).fit()
    full_x = np.column_stack([np.ones(len(means)), means["v"].to_numpy(), rough])
    t_obs = sm.OLS(means["y"].to_numpy(), full_x).fit().tvalues[2]
    hits, n = 0, 0
    for perm in itertools.permutations(range(len(means))):
        y_star = reduced.fittedvalues + reduced.resid[list(perm)]
        t_star = sm.OLS(y_star, full_x).fit().tvalues[2]
        hits += abs(t_star) >= abs(t_obs) * (1 - 1e-9)
        n += 1
    df_resid = len(means) - 3
    return hits / n, t_obs / np.sqrt(t_obs**2 + df_resid)


def test_exact_freedman_lane_equals_brute_force_statsmodels():
    # 6 arenas: all 720 permutations, so p-values must agree exactly (Freedman & Lane 1983).
    rough, move, arena, subject, speed = confounded_study(3, n_arenas=6, effect=0.1)
    ours = arena_permutation_test(
        rough, move, arena, subject_index=subject, covariates=speed, n_permutations=9999
    )
    p_ref, r_ref = _reference_freedman_lane(rough, move, arena, subject, speed)
    assert ours.exact and ours.n_permutations == 720
    assert_allclose(ours.p_value[0, 0], p_ref)
    # Partial correlation from the t statistic: r = t / sqrt(t^2 + df) (any regression text).
    assert_allclose(ours.statistic[0, 0], r_ref, rtol=1e-9)


def test_grid_of_measures_equals_pairwise_calls(rng):
    rough, move, arena, subject, speed = confounded_study(5, effect=0.2)
    terrain = np.column_stack([rough, rng.normal(size=rough.size)])
    movement = np.column_stack([move, rng.normal(size=move.size), move + speed])
    covs = np.column_stack([speed, rng.normal(size=move.size)])
    grid = arena_permutation_test(
        terrain, movement, arena, subject_index=subject, covariates=covs, n_permutations=499
    )
    for i in range(2):
        for j in range(3):
            one = arena_permutation_test(
                terrain[:, i],
                movement[:, j],
                arena,
                subject_index=subject,
                covariates=covs,
                n_permutations=499,
            )
            assert_allclose(grid.p_value[i, j], one.p_value[0, 0])
            assert_allclose(grid.statistic[i, j], one.statistic[0, 0], rtol=1e-10)


def test_subject_level_covariate_drops_out_of_the_test(rng):
    # Body length is constant within subject, so subject centring absorbs it: the test
    # must equal the one without it (and not fail on a zero column).
    rough, move, arena, subject, speed = confounded_study(7)
    body = rng.uniform(0.05, 0.1, 5)[subject]
    a = arena_permutation_test(
        rough, move, arena, subject_index=subject, covariates=speed, n_permutations=499
    )
    b = arena_permutation_test(
        rough,
        move,
        arena,
        subject_index=subject,
        covariates=np.column_stack([speed, body]),
        n_permutations=499,
    )
    assert_allclose(a.p_value, b.p_value)


def test_too_many_covariates_for_the_arenas():
    rough, move, arena, subject, speed = confounded_study(1, n_arenas=4)
    covs = np.column_stack([speed, speed**2])
    with pytest.raises(InsufficientDataError):
        arena_permutation_test(rough, move, arena, subject_index=subject, covariates=covs)


def test_adjusted_mixed_slope_matches_statsmodels_formula():
    # movement ~ terrain + speed + (1 | subject), REML: statsmodels MixedLM fitted directly.
    rough, move, arena, subject, speed = confounded_study(11, effect=0.25)
    grid = correspondence_grid(
        rough[:, None],
        move[:, None],
        arena,
        subject,
        terrain_names=["roughness"],
        movement_names=["movement"],
        covariates=speed[:, None],
        covariate_names=["speed_m_s"],
        n_permutations=199,
        n_boot=99,
    )
    df = pd.DataFrame({"y": move, "t": rough[arena], "v": speed, "g": subject})
    ref = smf.mixedlm("y ~ t + v", df, groups=df["g"]).fit(reml=True)
    row = grid.rows[0]
    # The trial-level (reference) fit. Optimiser precision of two different REML
    # searches (statsmodels' own tolerance).
    assert_allclose(row.trial_slope, ref.params["t"], rtol=1e-4)
    assert_allclose(row.trial_ci_low, ref.conf_int().loc["t", 0], rtol=1e-3)
    assert grid.covariate_names == ("speed_m_s",)
    direct = fit_random_intercept(move, rough[arena], subject, covariates=speed)
    assert_allclose(row.trial_slope, direct.slope)
    # The main (arena-level) slope: statsmodels OLS of subject-centred arena means of
    # movement on terrain and the subject-centred arena means of speed.
    df["yc"] = df["y"] - df.groupby("g")["y"].transform("mean")
    df["vc"] = df["v"] - df.groupby("g")["v"].transform("mean")
    df["a"] = arena
    means = df.groupby("a")[["yc", "vc", "t"]].mean()
    ols = smf.ols("yc ~ t + vc", means).fit()
    assert_allclose(row.slope, ols.params["t"], rtol=1e-9)
    assert_allclose(row.ci_low, ols.conf_int().loc["t", 0], rtol=1e-9)
    assert row.slope_df == ols.df_resid


def test_grid_adjusted_spearman_loses_the_confound():
    rough, move, arena, subject, speed = confounded_study(2)
    kwargs = dict(
        terrain_names=["roughness"], movement_names=["movement"], n_permutations=199, n_boot=99
    )
    plain = correspondence_grid(rough, move[:, None], arena, subject, **kwargs)
    adjusted = correspondence_grid(
        rough, move[:, None], arena, subject, covariates=speed, covariate_names=["v"], **kwargs
    )
    assert plain.rows[0].spearman_rho < -0.7  # slower on rough ground shows as an "effect"
    assert abs(adjusted.rows[0].spearman_rho) < abs(plain.rows[0].spearman_rho)


@pytest.mark.slow
def test_rate_over_seeds_confound_vanishes():
    seeds = range(300)
    without = np.array([_p(s, covariate=False) for s in seeds])
    with_cov = np.array([_p(s, covariate=True) for s in seeds])
    print(
        f"rate p<0.05 without covariate {np.mean(without < 0.05):.3f}; "
        f"rate p>0.05 with covariate {np.mean(with_cov > 0.05):.3f}"
    )
    assert np.mean(without < 0.05) >= 0.95
    # Under the null the rejection rate should be about alpha = 0.05; 300 seeds give a
    # binomial SE of 0.013, so 0.9 leaves a wide margin.
    assert np.mean(with_cov > 0.05) >= 0.9


@pytest.mark.slow
@pytest.mark.parametrize("arena_sd", [0.0, 0.05])
def test_freedman_lane_null_p_values_are_uniform(arena_sd):
    # KS against U(0, 1) over 500 seeds (scipy.stats.kstest). Monte Carlo p-values are
    # multiples of 1/1000; that discreteness is far below the KS resolution at n = 500.
    p = np.array([_p(s, covariate=True, arena_sd=arena_sd) for s in range(500)])
    res = stats.kstest(p, "uniform")
    print(f"arena_sd={arena_sd}: KS p = {res.pvalue:.3f}, rejection rate {np.mean(p < 0.05):.3f}")
    assert res.pvalue > 0.01
