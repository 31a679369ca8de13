"""Expected movement from the arena-level fit, and its leave-one-arena-out validation.

Sources: statsmodels OLS ``get_prediction`` (obs interval) as the reference for the
prediction interval (Draper & Smith 1998, sec. 3.1); the terrain-ignoring interval is the
analytic t interval for a new draw, ybar +- t_{n-1} s sqrt(1 + 1/n); leave-one-out
assessment after Stone (1974).
"""

from __future__ import annotations

import math
from functools import partial

import numpy as np
import pytest
import statsmodels.api as sm
from _testing import assert_allclose, crossed_study
from scipy import stats

from measures import leave_one_arena_out, predict_arena_movement

_crossed = partial(
    crossed_study, n_arenas=9, n_subjects=4, trials=2, slope=0.8, arena_sd=0.3, noise_sd=0.4
)


def test_prediction_interval_matches_statsmodels(rng):
    x = rng.uniform(0, 2, 7)
    y = np.column_stack([1 + 0.5 * x + rng.normal(0, 0.2, 7), rng.normal(size=7)])
    res = predict_arena_movement(x, y, 1.3)
    for j in range(2):
        ols = sm.OLS(y[:, j], sm.add_constant(x)).fit()
        frame = ols.get_prediction(np.array([[1.0, 1.3]])).summary_frame(alpha=0.05)
        assert_allclose(res.predicted[j], frame["mean"].iloc[0], rtol=1e-10)
        assert_allclose(res.pi_low[j], frame["obs_ci_lower"].iloc[0], rtol=1e-10)
        assert_allclose(res.pi_high[j], frame["obs_ci_upper"].iloc[0], rtol=1e-10)
        half = stats.t.ppf(0.975, 6) * y[:, j].std(ddof=1) * math.sqrt(1 + 1 / 7)
        assert_allclose(res.baseline_high[j] - res.baseline[j], half, rtol=1e-12)
    assert res.note == ("", "")


def test_too_few_arenas_say_so():
    res = predict_arena_movement([0.0, 1.0, 2.0, 3.0], [1.0, 2.0, 3.5, 4.0], 1.5)
    assert np.isnan(res.predicted[0]) and np.isnan(res.pi_low[0])
    assert "only 4 arena(s)" in res.note[0] and res.n_arenas[0] == 4


def test_extrapolation_is_flagged(rng):
    x = np.linspace(0, 1, 6)
    res = predict_arena_movement(x, 2 * x + rng.normal(0, 0.1, 6), 3.0)
    assert "extrapolation" in res.note[0] and np.isfinite(res.predicted[0])


def test_leave_one_out_never_sees_the_held_out_arena(rng):
    # Changing the held-out arena's trials changes only its observed value.
    terrain, y, arena, subject = _crossed(rng)
    base = leave_one_arena_out(terrain, y, arena, subject)
    y2 = y.copy()
    y2[arena == 4] += 10.0
    moved = leave_one_arena_out(terrain, y2, arena, subject)
    assert_allclose(moved.predicted[4], base.predicted[4], rtol=1e-12)
    assert_allclose(moved.observed[4], base.observed[4] + 10.0, rtol=1e-12)


@pytest.mark.slow
@pytest.mark.parametrize(("slope", "arena_sd"), [(0.8, 0.3), (0.0, 0.5)])
def test_leave_one_arena_out_coverage(slope, arena_sd):
    # 300 simulated studies x 9 held-out arenas: the 95 % prediction interval covers
    # the held-out arena mean in 90-98 % of cases (effect and null studies).
    covered = []
    err_terrain, err_base = [], []
    for seed in range(300):
        r = np.random.default_rng(30_000 + seed)
        terrain, y, arena, subject = _crossed(r, slope=slope, arena_sd=arena_sd)
        loo = leave_one_arena_out(terrain, y, arena, subject)
        covered.append(loo.covered[:, 0])
        err_terrain.append((loo.predicted - loo.observed)[:, 0])
        err_base.append((loo.baseline - loo.observed)[:, 0])
    rate = float(np.mean(np.concatenate(covered)))
    assert 0.90 <= rate <= 0.98, rate
    rmse = math.sqrt(np.mean(np.concatenate(err_terrain) ** 2))
    rmse_base = math.sqrt(np.mean(np.concatenate(err_base) ** 2))
    if slope:
        assert rmse < 0.7 * rmse_base  # terrain explains most of the arena-to-arena spread
    else:
        assert rmse < 1.2 * rmse_base  # a useless slope costs little
