"""Benchmark: expected movement validated by leave-one-arena-out on simulated studies.

Prints, per scenario (an effect study; a null study with arena offsets; a small study):
- coverage of the nominal 95 % prediction interval for the held-out arena mean, with its
  binomial 95 % interval (target 90-98 %);
- root-mean-square prediction error of the terrain fit and of the terrain-ignoring model
  (mean of the other arenas), and their ratio (below 1: terrain helps);
- time per leave-one-arena-out study, against a reference loop that refits with
  statsmodels OLS ``get_prediction`` (median of repeats, ratio).

Usage: ``python bench/bench_prediction.py [--quick]``. Shared machines are noisy: read the
ratios rather than the seconds.
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numpy as np
import statsmodels.api as sm
from scipy import stats

from measures import leave_one_arena_out

SCENARIOS = {
    # name: (n_arenas, n_subjects, trials per cell, slope, arena sd)
    "effect, 9 arenas": (9, 4, 2, 0.8, 0.3),
    "null with arena offsets, 9 arenas": (9, 4, 2, 0.0, 0.5),
    "effect, 6 arenas": (6, 3, 2, 0.8, 0.3),
    "effect, 20 arenas": (20, 5, 2, 0.4, 0.3),
}


def _study(rng, n_arenas, n_subjects, trials, slope, arena_sd):
    terrain = np.sort(rng.uniform(0.0, 2.0, n_arenas))
    arena = np.repeat(np.arange(n_arenas), n_subjects * trials)
    subject = np.tile(np.repeat(np.arange(n_subjects), trials), n_arenas)
    y = (
        1.0
        + slope * terrain[arena]
        + rng.normal(0, arena_sd, n_arenas)[arena]
        + rng.normal(0, 1.0, n_subjects)[subject]
        + rng.normal(0, 0.4, arena.size)
    )
    return terrain, y, arena, subject


def _reference_loo(terrain, y, arena, subject) -> None:
    # The same held-out predictions with statsmodels (plain arena means: balanced design).
    for a in range(terrain.size):
        keep = np.arange(terrain.size) != a
        means = np.array([y[arena == k].mean() for k in np.flatnonzero(keep)])
        ols = sm.OLS(means, sm.add_constant(terrain[keep])).fit()
        ols.get_prediction(np.array([[1.0, terrain[a]]])).summary_frame(alpha=0.05)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer simulated studies")
    args = parser.parse_args()
    n_studies = 60 if args.quick else 400
    for name, spec in SCENARIOS.items():
        covered, err_t, err_b = [], [], []
        for seed in range(n_studies):
            rng = np.random.default_rng(seed)
            loo = leave_one_arena_out(*_study(rng, *spec))
            ok = np.isfinite(loo.predicted[:, 0])
            covered.append(loo.covered[ok, 0])
            err_t.append((loo.predicted - loo.observed)[ok, 0])
            err_b.append((loo.baseline - loo.observed)[ok, 0])
        hits = np.concatenate(covered)
        ci = stats.binomtest(int(hits.sum()), hits.size).proportion_ci(0.95)
        rmse_t = math.sqrt(np.mean(np.concatenate(err_t) ** 2))
        rmse_b = math.sqrt(np.mean(np.concatenate(err_b) ** 2))
        print(
            f"{name}: coverage {hits.mean():.3f} [{ci.low:.3f}, {ci.high:.3f}] over "
            f"{hits.size} held-out arenas (target 0.90-0.98); RMSE terrain fit {rmse_t:.3f}, "
            f"ignoring terrain {rmse_b:.3f}, ratio {rmse_t / rmse_b:.2f}"
        )
    study = _study(np.random.default_rng(0), *SCENARIOS["effect, 9 arenas"])
    ours, ref = [], []
    for _ in range(5 if args.quick else 15):
        start = time.perf_counter()
        leave_one_arena_out(*study)
        ours.append(time.perf_counter() - start)
        start = time.perf_counter()
        _reference_loo(*study)
        ref.append(time.perf_counter() - start)
    o, r = statistics.median(ours), statistics.median(ref)
    print(
        f"leave-one-arena-out, 9 arenas: ours {o * 1e3:.1f} ms, statsmodels loop "
        f"{r * 1e3:.1f} ms, ratio {r / o:.1f}x"
    )


if __name__ == "__main__":
    main()
