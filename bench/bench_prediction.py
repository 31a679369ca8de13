"""Benchmark: expected movement validated by leave-one-arena-out, demo and simulated studies.

Demo (``--demo DIR``: the data directory of a finished ``gaitscape demo`` run, read from a
copy): every arena of the demo study is predicted by the expected-movement service code
(:func:`service.analysis.expected.expected_movement`, the endpoint's function: it leaves the
arena out of the fit) for every movement measure, once with the terrain measure the endpoint
picks by default and once with ``sq_m`` (roughness alone). The held-out arena's observed mean
is :func:`measures.held_out_arena_mean` (subject offsets from the other arenas). Printed:
coverage of the nominal 95 % prediction interval with its binomial interval, and per
movement measure the RMSE of the terrain fit against the terrain-ignoring model (the other
arenas' mean). Few arenas: 7 held-out arenas x the measures are not independent trials (the
measures of one arena move together), so the binomial interval over all of them is too
narrow; the one for 7 independent arenas is printed beside it.

Simulated studies: per scenario (an effect study; a null study with arena offsets; a small
study):
- coverage of the nominal 95 % prediction interval for the held-out arena mean, with its
  binomial 95 % interval (target 90-98 %);
- root-mean-square prediction error of the terrain fit and of the terrain-ignoring model
  (mean of the other arenas), and their ratio (below 1: terrain helps);
- time per leave-one-arena-out study, against a reference loop that refits with
  statsmodels OLS ``get_prediction`` (median of repeats, ratio).

Usage: ``python bench/bench_prediction.py [--quick] [--demo DIR [--demo-only]] [--recipe NAME]``.
Shared machines are noisy: read the ratios rather than the seconds.
"""

from __future__ import annotations

import argparse
import math
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import statsmodels.api as sm
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the checkout's packages
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # simulated studies

from _testing import crossed_study

from measures import held_out_arena_mean, leave_one_arena_out, not_estimable_reason

SCENARIOS = {
    # name: (n_arenas, n_subjects, trials per cell, slope, arena sd)
    "effect, 9 arenas": (9, 4, 2, 0.8, 0.3),
    "null with arena offsets, 9 arenas": (9, 4, 2, 0.0, 0.5),
    "effect, 6 arenas": (6, 3, 2, 0.8, 0.3),
    "effect, 20 arenas": (20, 5, 2, 0.4, 0.3),
}


def _study(rng, n_arenas, n_subjects, trials, slope, arena_sd):
    return crossed_study(
        rng, n_arenas=n_arenas, n_subjects=n_subjects, trials=trials, slope=slope,
        arena_sd=arena_sd, noise_sd=0.4,
    )  # fmt: skip


def _reference_loo(terrain, y, arena, subject) -> None:
    # The same held-out predictions with statsmodels (plain arena means: balanced design).
    for a in range(terrain.size):
        keep = np.arange(terrain.size) != a
        means = np.array([y[arena == k].mean() for k in np.flatnonzero(keep)])
        ols = sm.OLS(means, sm.add_constant(terrain[keep])).fit()
        ols.get_prediction(np.array([[1.0, terrain[a]]])).summary_frame(alpha=0.05)


def _binomial(hits: int, n: int) -> str:
    ci = stats.binomtest(hits, n).proportion_ci(0.95)
    return f"{hits}/{n} = {hits / n:.3f} [{ci.low:.3f}, {ci.high:.3f}]"


def _wilson(p: float, n: int) -> tuple[float, float]:
    # Wilson score interval (Wilson 1927) for a proportion p observed on n units.
    z = stats.norm.ppf(0.975)
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return centre - half, centre + half


def _print_demo(terrain, measures, all_measures, observed, rows) -> None:
    hits = n = 0
    ratios, lines = [], []
    for name in measures:
        j = all_measures.index(name)
        cov, err_t, err_b = [], [], []
        for k, by_name in enumerate(rows):
            row = by_name[name]
            y = observed[k, j]
            if row["predicted"] is None or not math.isfinite(y):
                continue
            cov.append(row["pi_low"] <= y <= row["pi_high"])
            err_t.append(row["predicted"] - y)
            err_b.append(row["baseline_predicted"] - y)
        if not cov:
            lines.append(f"    {name}: no prediction (too few arenas with values)")
            continue
        hits, n = hits + sum(cov), n + len(cov)
        rt = math.sqrt(np.mean(np.square(err_t)))
        rb = math.sqrt(np.mean(np.square(err_b)))
        ratios.append(rt / rb)
        lines.append(
            f"    {name}: covered {sum(cov)}/{len(cov)}; RMSE terrain fit {rt:.4g}, "
            f"ignoring terrain {rb:.4g}, ratio {rt / rb:.2f}"
        )
    if not n:
        print(f"  terrain {terrain!r}: no prediction")
        return
    lo7, hi7 = _wilson(hits / n, len(rows))
    print(
        f"  terrain {terrain!r}: coverage {_binomial(hits, n)} over (arena, measure) pairs; "
        f"if only the {len(rows)} arenas were independent, [{lo7:.2f}, {hi7:.2f}] (Wilson): "
        f"with {len(rows)} arenas this check catches gross miscalibration only (target "
        f"0.90-0.98). RMSE terrain fit / ignoring terrain: median "
        f"{statistics.median(ratios):.2f}, below 1 in {sum(r < 1 for r in ratios)} of "
        f"{len(ratios)} measures"
    )
    print("\n".join(lines))


def demo_loo(data_dir: Path, recipe: str) -> None:
    """Leave-one-arena-out on a demo store through the endpoint's own function."""
    from service.analysis.expected import expected_movement
    from service.analysis.tables import Selection, load_study
    from storage import repo
    from storage.db import DB_FILENAME, make_engine, make_sessionmaker, sqlite_url

    source = data_dir / DB_FILENAME
    if not source.is_file():
        print(f"demo: no {source}; run `gaitscape demo --quick` and pass its directory")
        return
    with tempfile.TemporaryDirectory() as tmp:
        shutil.copy2(source, Path(tmp) / DB_FILENAME)  # the demo's store stays untouched
        engine = make_engine(sqlite_url(tmp))
        with make_sessionmaker(engine)() as session:
            prof = repo.get_recipe(session=session, name=recipe, version=None)
            tables = load_study(
                session=session,
                recipe_hash=prof.hash,
                selection=Selection(terrain_measures=("all",), movement_measures=("all",)),
            )
            ids = tables.arenas.index.to_numpy()
            trials = tables.trials
            codes = np.searchsorted(ids, trials["arena_id"].to_numpy())
            values = trials[tables.movement_measures].to_numpy(dtype=float)
            subjects = trials["subject_id"].to_numpy()
            observed = np.vstack(
                [held_out_arena_mean(values, codes, subjects, k) for k in range(ids.size)]
            )
            # A measure constant across the arenas has nothing to predict (the grid lists it
            # as not estimable too): its interval has width 0 and coverage is a rounding test.
            measures = [
                name
                for j, name in enumerate(tables.movement_measures)
                if np.isfinite(observed[:, j]).any()
                and not_estimable_reason(observed[:, j]) is None
                and np.nanmax(observed[:, j]) > np.nanmin(observed[:, j])
            ]
            skipped = sorted(set(tables.movement_measures) - set(measures))
            first = expected_movement(
                session=session, recipe=recipe, arena_id=int(ids[0]),
                movement_measures=tuple(measures),
            )  # fmt: skip
            print(
                f"demo ({data_dir}): {ids.size} arenas, {len(np.unique(subjects))} subjects, "
                f"{len(trials)} trials; scan policy {tables.scan_policy['rule']!r} "
                f"(kind {tables.scan_policy.get('kind')!r}); {len(measures)} movement "
                f"measures (left out, constant across arenas or without values: {skipped})"
            )
            for terrain in dict.fromkeys([first["terrain_measure"], "sq_m"]):
                if terrain is None:
                    continue
                # One call per held-out arena, as the dashboard and the report make it.
                rows = []
                for a in ids:
                    out = expected_movement(
                        session=session, recipe=recipe, arena_id=int(a),
                        terrain_measure=terrain, movement_measures=tuple(measures),
                    )  # fmt: skip
                    rows.append({r["movement_measure"]: r for r in out["rows"]})
                _print_demo(terrain, measures, tables.movement_measures, observed, rows)
        engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer simulated studies")
    parser.add_argument("--demo", type=Path, help="data directory of a finished demo run")
    parser.add_argument("--recipe", default="default", help="recipe of the demo's scores")
    parser.add_argument("--demo-only", action="store_true", help="skip the simulated studies")
    args = parser.parse_args()
    if args.demo is not None:
        demo_loo(args.demo, args.recipe)
    if args.demo_only:
        return
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
