"""Benchmark: the correspondence grid at lab scale, with references.

Prints, in one run:
- wall time of ``correspondence_grid`` for 50 arenas x 2,000 trials x 20 x 20
  measure pairs with 9,999 permutations (target: under 30 s on 2 cores), with and
  without the trial-level reference model, and with two trial-level covariates
  (arena-level Freedman-Lane test);
- the trial-level reference model (REML random intercept), batched over the movement
  measures of one terrain column, against one fit per pair; and one fit against
  statsmodels' ``MixedLM`` on the same pair (median per fit, and the ratio);
- the vectorised permutation test against a straightforward per-permutation
  loop (measured on a subset of permutations, ratio per permutation);
- the arena-level slope grid (the main interval) against statsmodels OLS fitted pair
  by pair on the same arena means.

Usage: ``python bench/bench_correspondence.py [--quick]``. Medians of repeats;
shared machines are noisy, so read the ratios rather than the seconds.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import statsmodels.api as sm

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the checkout's packages

from measures import (
    arena_movement_means,
    arena_permutation_test,
    arena_slope,
    correspondence_grid,
    fit_random_intercept,
    random_intercept_columns,
)


def _study(n_arenas: int, n_trials: int, n_t: int, n_m: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    terrain = rng.normal(size=(n_arenas, n_t))
    arena = rng.integers(0, n_arenas, n_trials)
    arena[:n_arenas] = np.arange(n_arenas)
    subject = rng.integers(0, 20, n_trials)
    movement = rng.normal(size=(n_trials, n_m)) + 0.3 * terrain[arena, :1]
    return terrain, movement, arena, subject


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller study, fewer repeats")
    args = parser.parse_args()
    n_arenas, n_trials, n_pairs, n_perm = (10, 300, 5, 999) if args.quick else (50, 2000, 20, 9999)
    repeats = 1 if args.quick else 3
    terrain, movement, arena, subject = _study(n_arenas, n_trials, n_pairs, n_pairs)
    names_t = [f"t{i}" for i in range(n_pairs)]
    names_m = [f"m{i}" for i in range(n_pairs)]

    def grid(**options: Any) -> float:
        return _median_time(
            lambda: correspondence_grid(
                terrain,
                movement,
                arena,
                subject,
                terrain_names=names_t,
                movement_names=names_m,
                n_permutations=n_perm,
                n_boot=1999,
                **options,
            ),
            repeats,
        )

    grid_s = grid(trial_level=True)
    lean_s = grid(trial_level=False)
    print(
        f"correspondence_grid {n_arenas} arenas x {n_trials} trials x {n_pairs}x{n_pairs} "
        f"pairs, {n_perm} permutations: median {grid_s:.2f} s with the trial-level reference "
        f"model, {lean_s:.2f} s without it (trial_level=False; the reference costs "
        f"{grid_s - lean_s:.2f} s) (target < 30 s)"
    )

    speed = np.random.default_rng(2).normal(size=(n_trials, 2))
    cov_s = grid(covariates=speed, covariate_names=["speed_m_s", "stride_frequency_hz"])
    print(
        f"correspondence_grid with 2 covariates (arena-level Freedman-Lane): median "
        f"{cov_s:.2f} s, ratio to no covariates {cov_s / grid_s:.2f}x (target < 30 s)"
    )

    x = terrain[arena, 0]
    batched = _median_time(lambda: random_intercept_columns(movement, x, subject), repeats)

    def one_by_one() -> None:
        for j in range(n_pairs):
            fit_random_intercept(movement[:, j], x, subject)

    single = _median_time(one_by_one, repeats)
    print(
        f"trial-level reference, one terrain column x {n_pairs} movement measures: batched "
        f"{batched * 1e3:.1f} ms, one fit per pair {single * 1e3:.1f} ms, ratio "
        f"{single / batched:.1f}x"
    )

    y = movement[:, 0]
    ours = _median_time(lambda: fit_random_intercept(y, x, subject), 5)
    exog = sm.add_constant(x)
    with warnings.catch_warnings():  # boundary-fit notices from statsmodels on null data
        warnings.simplefilter("ignore")
        ref = _median_time(lambda: sm.MixedLM(y, exog, groups=subject).fit(reml=True), 5)
    print(
        f"mixed model per fit: ours {ours * 1e3:.2f} ms, statsmodels {ref * 1e3:.2f} ms, "
        f"ratio {ref / ours:.1f}x"
    )

    sub = 200
    vec = _median_time(
        lambda: arena_permutation_test(
            terrain[:, :1], movement[:, :1], arena, subject_index=subject, n_permutations=n_perm
        ),
        repeats,
    )
    rng = np.random.default_rng(1)
    centred = (
        movement[:, 0]
        - np.bincount(subject, movement[:, 0])[subject] / np.bincount(subject)[subject]
    )

    def loop() -> None:
        for _ in range(sub):
            perm = rng.permutation(n_arenas)
            np.corrcoef(terrain[perm, 0][arena], centred)

    loop_s = _median_time(loop, repeats) / sub
    print(
        f"permutation test, one pair: vectorised {vec / n_perm * 1e6:.2f} us/permutation, "
        f"loop {loop_s * 1e6:.2f} us/permutation, ratio {loop_s / (vec / n_perm):.1f}x"
    )

    means = arena_movement_means(movement, arena, subject, n_arenas=n_arenas).mean
    grid_fit = _median_time(lambda: arena_slope(terrain, means), repeats)

    def ols_loop() -> None:
        for i in range(n_pairs):
            exog = sm.add_constant(terrain[:, i])
            for j in range(n_pairs):
                sm.OLS(means[:, j], exog).fit().conf_int()

    ols_s = _median_time(ols_loop, repeats)
    print(
        f"arena-level slopes, {n_pairs}x{n_pairs} pairs: ours {grid_fit * 1e3:.2f} ms, "
        f"statsmodels OLS per pair {ols_s * 1e3:.1f} ms, ratio {ols_s / grid_fit:.0f}x"
    )


if __name__ == "__main__":
    main()
