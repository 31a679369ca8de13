"""Checks of measures.correspondence.inference against statsmodels, scipy and exact enumeration."""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from _testing import assert_allclose
from scipy import stats
from statsmodels.stats.multitest import multipletests

from measures import (
    InvalidParameterError,
    arena_permutation_test,
    benjamini_hochberg,
    correspondence_grid,
    fit_random_intercept,
    hierarchical_bootstrap_spearman,
    random_intercept_columns,
)


def _study(rng, *, n_arenas=8, n_subjects=5, trials=3, slope=0.0, subject_sd=1.0, noise=0.5):
    """Crossed design: every subject walks every arena ``trials`` times."""
    terrain = np.sort(rng.uniform(0.0, 2.0, n_arenas))
    arena = np.repeat(np.arange(n_arenas), n_subjects * trials)
    subject = np.tile(np.repeat(np.arange(n_subjects), trials), n_arenas)
    offsets = rng.normal(0, subject_sd, n_subjects)
    y = 1.0 + slope * terrain[arena] + offsets[subject] + rng.normal(0, noise, arena.size)
    return terrain, y, arena, subject


def test_mixed_model_matches_statsmodels(rng):
    # Reference: statsmodels MixedLM, REML, fitted directly on the same table.
    terrain, y, arena, subject = _study(rng, slope=0.7)
    x = terrain[arena]
    ours = fit_random_intercept(y, x, subject)
    ref = sm.MixedLM(y, sm.add_constant(x), groups=subject).fit(reml=True)
    # Both optimise the same REML surface; 1e-4 relative is optimiser precision.
    assert_allclose(ours.slope, ref.fe_params[1], rtol=1e-4)
    assert_allclose(ours.se, ref.bse_fe[1], rtol=1e-3)
    assert_allclose(ours.group_variance, float(np.asarray(ref.cov_re)[0, 0]), rtol=1e-3)
    assert_allclose(ours.residual_variance, ref.scale, rtol=1e-4)
    assert_allclose(ours.p_value, ref.pvalues[1], rtol=1e-2, atol=1e-12)


def test_mixed_model_with_covariate_matches_statsmodels(rng):
    terrain, y, arena, subject = _study(rng, slope=0.3)
    speed = rng.normal(0.2, 0.05, y.size)
    y = y + 4.0 * speed
    x = terrain[arena]
    ours = fit_random_intercept(y, x, subject, covariates=speed[:, None])
    exog = np.column_stack([np.ones_like(x), x, speed])
    ref = sm.MixedLM(y, exog, groups=subject).fit(reml=True)
    assert_allclose(ours.slope, ref.fe_params[1], rtol=1e-4)
    assert_allclose(ours.se, ref.bse_fe[1], rtol=1e-3)


def test_batched_mixed_model_matches_statsmodels_per_column(rng):
    # Reference: statsmodels MixedLM (REML) column by column; the columns differ in
    # slope and in how much the subjects differ (boundary fit included: subject_sd 0).
    terrain, _, arena, subject = _study(rng)
    x = terrain[arena]
    speed = rng.normal(0.2, 0.05, x.size)
    cols = []
    for slope, sd in ((0.0, 0.0), (0.7, 1.0), (-0.3, 3.0)):
        offsets = rng.normal(0, sd, subject.max() + 1)
        cols.append(1.0 + slope * x + offsets[subject] + 2.0 * speed + rng.normal(0, 0.5, x.size))
    y = np.column_stack(cols)
    slope, lo, hi, p = random_intercept_columns(y, x, subject, covariates=speed[:, None])
    exog = np.column_stack([np.ones_like(x), x, speed])
    for j in range(y.shape[1]):
        with warnings.catch_warnings():  # statsmodels' boundary notice on the sd-0 column
            warnings.simplefilter("ignore")
            ref = sm.MixedLM(y[:, j], exog, groups=subject).fit(reml=True)
        lo_ref, hi_ref = ref.conf_int()[1]
        assert_allclose(slope[j], ref.fe_params[1], rtol=1e-4, atol=1e-6)
        assert_allclose([lo[j], hi[j]], [lo_ref, hi_ref], rtol=1e-3, atol=1e-5)
        assert_allclose(p[j], ref.pvalues[1], rtol=1e-2, atol=1e-12)
        one = fit_random_intercept(y[:, j], x, subject, covariates=speed[:, None])
        assert_allclose(slope[j], one.slope, rtol=1e-6)  # same surface, one code per column
    flat = random_intercept_columns(y, np.ones_like(x), subject)
    assert np.isnan(flat[0]).all()  # a constant predictor: no slope


def test_known_effect_is_found(rng):
    true_slope = 0.8
    terrain, y, arena, subject = _study(rng, n_arenas=10, slope=true_slope)
    fit = fit_random_intercept(y, terrain[arena], subject)
    assert fit.ci_low < true_slope < fit.ci_high
    perm = arena_permutation_test(terrain, y, arena, subject_index=subject, seed=1)
    assert perm.p_value[0, 0] < 0.01


def test_exact_permutation_equals_brute_force(rng):
    # Four arenas: 4! = 24 relabellings, enumerated by hand here.
    terrain, y, arena, subject = _study(rng, n_arenas=4, slope=0.5)
    res = arena_permutation_test(terrain, y, arena, subject_index=subject)
    assert res.exact and res.n_permutations == 24
    centred = y - np.array([y[subject == s].mean() for s in subject])

    def stat(tv):
        return abs(stats.pearsonr(tv[arena], centred).statistic)

    observed = stat(terrain)
    null = [stat(terrain[list(p)]) for p in itertools.permutations(range(4))]
    expected = np.mean([v >= observed * (1 - 1e-12) for v in null])
    assert_allclose(res.p_value[0, 0], expected)
    assert_allclose(abs(res.statistic[0, 0]), observed, rtol=1e-10)


def test_permutation_grid_is_vectorised_consistently(rng):
    terrain, y, arena, subject = _study(rng, n_arenas=9)
    t2 = np.column_stack([terrain, rng.normal(size=terrain.size)])
    m2 = np.column_stack([y, rng.normal(size=y.size)])
    grid = arena_permutation_test(t2, m2, arena, subject_index=subject, n_permutations=999)
    single = arena_permutation_test(
        t2[:, 1], m2[:, 0], arena, subject_index=subject, n_permutations=999
    )
    assert_allclose(grid.p_value[1, 0], single.p_value[0, 0])


@pytest.mark.slow
def test_null_false_positive_rate(rng):
    # Under the null, p-values are valid: the rejection rate at alpha = 0.05
    # over 400 seeds lies within the 99 % binomial interval around 0.05.
    rejections = 0
    n_seeds = 400
    for seed in range(n_seeds):
        r = np.random.default_rng(seed)
        terrain, y, arena, subject = _study(r, n_arenas=8, slope=0.0)
        p = arena_permutation_test(
            terrain, y, arena, subject_index=subject, n_permutations=999, seed=seed
        ).p_value[0, 0]
        rejections += p <= 0.05
    lo, hi = stats.binomtest(int(0.05 * n_seeds), n_seeds).proportion_ci(0.99)
    assert lo <= rejections / n_seeds <= hi, rejections / n_seeds


def test_spearman_matches_scipy_on_arena_means(rng):
    # Reference: scipy.stats.spearmanr on the arena means.
    terrain, y, arena, subject = _study(rng, n_arenas=15, slope=0.4)
    res = hierarchical_bootstrap_spearman(terrain, y, arena, subject, n_boot=499)
    # Balanced design: the mean of subject means equals the plain arena mean.
    means = np.array([y[arena == a].mean() for a in range(15)])
    assert_allclose(res.rho[0, 0], stats.spearmanr(terrain, means).statistic, rtol=1e-12)
    # A percentile interval need not contain the estimate (arenas drawn twice
    # tie, which pulls replicate rho towards 0), so check order and sign only.
    assert -1 <= res.ci_low[0, 0] < res.ci_high[0, 0] <= 1
    assert res.ci_low[0, 0] > 0  # strong effect over 15 arenas: the interval excludes zero


def test_bootstrap_keeps_crossed_subject_offsets(rng):
    # Crossed design with large subject offsets and no noise: every animal's
    # offset is shared by all arenas, so it cannot blur the arena ranking. A
    # pigeonhole bootstrap (Owen 2007) keeps that; resampling subjects
    # independently inside each arena would not.
    terrain, y, arena, subject = _study(rng, n_arenas=10, slope=1.0, subject_sd=3.0, noise=0.0)
    res = hierarchical_bootstrap_spearman(terrain, y, arena, subject, n_boot=499)
    assert_allclose(res.rho[0, 0], 1.0)
    assert res.ci_low[0, 0] > 0.5


def test_bootstrap_nested_design_falls_back_within_arena(rng):
    # Each subject walks one arena only (nested): replicates must still be finite.
    terrain = np.linspace(0, 1, 6)
    arena = np.repeat(np.arange(6), 6)
    subject = np.repeat(np.arange(18), 2)
    y = terrain[arena] + rng.normal(0, 0.1, arena.size)
    res = hierarchical_bootstrap_spearman(terrain, y, arena, subject, n_boot=199)
    assert np.isfinite(res.ci_low[0, 0]) and np.isfinite(res.ci_high[0, 0])


def test_benjamini_hochberg_matches_statsmodels():
    # Reference: statsmodels.stats.multitest.multipletests(method="fdr_bh").
    p = np.array([0.001, 0.01, 0.02, 0.04, 0.3, 0.5, np.nan])
    expected = multipletests(p[:-1], method="fdr_bh")[1]
    q = benjamini_hochberg(p)
    assert_allclose(q[:-1], expected)
    assert np.isnan(q[-1])


def test_grid_rows_and_warnings(rng):
    terrain, y, arena, subject = _study(rng, n_arenas=4, n_subjects=2)
    grid = correspondence_grid(
        terrain[:, None],
        y[:, None],
        arena,
        subject,
        terrain_names=["sq_m"],
        movement_names=["rqa_det"],
        n_permutations=99,
        n_boot=99,
    )
    row = grid.rows[0]
    assert (row.terrain_measure, row.movement_measure) == ("sq_m", "rqa_det")
    assert (row.n_arenas, row.n_subjects, row.n_trials) == (4, 2, y.size)
    text = " ".join(grid.warnings)
    assert "Only 4 arenas" in text and "Only 2 subjects" in text


def test_confounded_design_is_flagged(rng):
    terrain = np.array([0.1, 0.5, 0.9, 1.3, 1.7])
    arena = np.repeat(np.arange(5), 4)
    subject = arena.copy()  # each animal walked one arena only
    y = rng.normal(size=arena.size)
    grid = correspondence_grid(
        terrain,
        y,
        arena,
        subject,
        terrain_names=["a"],
        movement_names=["b"],
        n_permutations=99,
        n_boot=99,
    )
    assert any("confounded" in w for w in grid.warnings)


def test_bad_codes_rejected():
    with pytest.raises(InvalidParameterError, match="arena_index"):
        arena_permutation_test([1.0, 2.0], [1.0, 2.0, 3.0], [0, 1, 2])


@pytest.mark.parametrize("with_covariate", [False, True])
def test_constant_measure_has_no_p_value(rng, with_covariate):
    # A measure with zero variance has no correlation to test: p and q are
    # undefined (NaN), not 0, and it does not count in the BH correction.
    terrain, y, arena, subject = _study(rng, n_arenas=8, slope=0.5)
    movement = np.column_stack([y, np.full_like(y, 3.0)])
    cov = rng.normal(size=(y.size, 1)) if with_covariate else None
    grid = correspondence_grid(
        terrain,
        movement,
        arena,
        subject,
        terrain_names=["t"],
        movement_names=["m", "flat"],
        n_permutations=199,
        n_boot=99,
        covariates=cov,
        covariate_names=("c",) if with_covariate else (),
    )
    flat = next(r for r in grid.rows if r.movement_measure == "flat")
    live = next(r for r in grid.rows if r.movement_measure == "m")
    assert np.isnan(flat.p_value) and np.isnan(flat.q_value)
    assert live.q_value == pytest.approx(live.p_value)  # one test left in the family
