"""Does each score discriminate? Movement effect sizes; terrain rank correlations with H.

Run from the repository root::

    python bench/bench_discrimination.py --quick   # about 3 minutes on a loaded 2-core machine
    python bench/bench_discrimination.py           # more trials, longer windows, 512^2 surfaces

Movement side: every score of :func:`measures.movement_summary` (whole-body default) on

- the DeepMimic humanoid walk and run clips shipped in the pybullet wheel (real retargeted
  human motion capture; forward kinematics in ``tests/movement/_deepmimic.py``). Trials are
  windows of the looped clip at different start frames with 0.2 mm marker noise (common
  practice) from different seeds, scored at 30 Hz and again resampled to 120 Hz;
- the demo's trays (``demo_arena``, invented data): walker trials on two pairs of trays of
  equal Sq and contrasting structure (A low ripples vs B low scree, C tall ripples vs E
  coarse scree), on runways longer than the demo's so a trial covers several seconds.

Effect size: Hedges' g (bias-corrected standardised mean difference; L. V. Hedges 1981,
J. Educ. Stat. 6:107) with its sign (second group minus first), and Cliff's delta
(N. Cliff 1993, Psychol. Bull. 114:494), rank based, since n per group is small.

Terrain side: every score of :func:`measures.terrain_summary` against the Hurst exponent H
used to synthesise self-affine surfaces (spectral synthesis, D. Saupe 1988), all at the
same RMS height (Sq), so amplitude does not drive the ranking: Spearman's rho.

Rules (stated in the JSON): a movement score separates a pair when |g| >= 0.8 (Cohen 1988
"large", from memory) and |delta| >= 0.474 (Romano et al. 2006 "large", from memory); a
terrain score follows H when |rho| >= 0.5. Surrogates are switched off (z-scores are not
compared here). Writes ``service/report/discrimination.json``.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import os
import sys
import time
import warnings
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "movement"))

from _deepmimic import MARKERS as DM_MARKERS  # noqa: E402
from _deepmimic import ROLES as DM_ROLES  # noqa: E402
from _deepmimic import clip, resample  # noqa: E402

from demo_arena.ground import TRAYS, make_tray  # noqa: E402
from demo_arena.scenario import DX_M, RUNWAY_M, SUBJECTS, _roles  # noqa: E402
from demo_arena.walker import MARKERS as DEMO_MARKERS  # noqa: E402
from demo_arena.walker import walk_over  # noqa: E402
from measures import movement_summary, terrain_summary  # noqa: E402
from measures.terrain._synthesis import self_affine_surface  # noqa: E402
from service.analysis.tables import HEADLINE_MEASURES, is_diagnostic  # noqa: E402

OUT = ROOT / "service" / "report" / "discrimination.json"
G_MIN = 0.8
DELTA_MIN = 0.474
RHO_MIN = 0.5
NOISE_M = 0.0002  # 0.2 mm marker noise (common practice)
INVENTED = "invented demo data (demo_arena), not a recording"
NOTHING = "separates nothing on these data"
# Pairs of trays of equal Sq and contrasting structure (demo_arena.ground.TRAYS keys).
TRAY_PAIRS = (
    ("tray-a-low-ripples", "tray-b-low-scree"),
    ("tray-c-tall-ripples", "tray-e-coarse-scree"),
)


def hedges_g(a: np.ndarray, b: np.ndarray) -> float:
    """Hedges' g of b minus a: pooled-SD standardised difference times J = 1 - 3/(4 df - 1)."""
    n1, n2 = a.size, b.size
    df = n1 + n2 - 2
    pooled = math.sqrt(((n1 - 1) * a.var(ddof=1) + (n2 - 1) * b.var(ddof=1)) / df)
    diff = float(b.mean() - a.mean())
    # Spread at rounding level (a looped clip scored identically) counts as none.
    scale = max(abs(float(a.mean())), abs(float(b.mean())), 1e-300)
    if pooled <= 1e-9 * scale:
        return 0.0 if abs(diff) <= 1e-9 * scale else math.copysign(math.inf, diff)
    return (1.0 - 3.0 / (4.0 * df - 1.0)) * diff / pooled


def cliffs_delta(a: np.ndarray, b: np.ndarray) -> float:
    """P(b > a) - P(b < a) over all pairs."""
    d = np.sign(b[:, None] - a[None, :])
    return float(d.mean())


def _scores(summary: Any) -> dict[str, tuple[float, str]]:
    return {s.name: (s.value, s.note) for s in summary.scores}


# -- movement data sets -------------------------------------------------------------------


def deepmimic_trials(rate_hz: float, n_trials: int, window_s: float) -> dict[str, list]:
    """Scores of n_trials windows of each clip at rate_hz (30 Hz native or resampled)."""
    out: dict[str, list] = {}
    for c, name in enumerate(("walk", "run")):
        n_win = round(window_s * 30.0)
        loops = math.ceil(n_win / 20) + n_trials + 2  # a loop is at least 20 frames
        markers, fs, _, _ = clip(name, loops=loops)
        loop = markers.shape[0] // loops
        native = rate_hz == 30.0
        trials = []
        for t in range(n_trials):
            start = t * loop + (t * loop) // n_trials  # different phase of the stride
            rng = np.random.default_rng([c, t, int(rate_hz)])
            w = markers[start : start + n_win]
            if not native:
                w = resample(w, fs, rate_hz)
            w = w + rng.normal(0.0, NOISE_M, w.shape)  # noise at the rate it is captured
            s = movement_summary(
                w, frame_rate_hz=fs if native else rate_hz, marker_names=list(DM_MARKERS),
                roles=DM_ROLES, params={"up_axis": "y", "n_surrogates": 0},
            )  # fmt: skip
            trials.append(_scores(s))
        out[name] = trials
    return out


def demo_trials(keys: tuple[str, ...], n_subjects: int, passes: int, rate_hz: float,
                runway_m: float) -> dict[str, list]:  # fmt: skip
    """Scores of walker passes over each tray (invented data), runway ``runway_m`` long."""
    specs = {s.key: s for s in TRAYS}
    out: dict[str, list] = {}
    for a, key in enumerate(keys):
        spec = specs[key]
        scale = runway_m / RUNWAY_M[0]  # same density of stones and crack cells
        spec = dataclasses.replace(
            spec, stones=round(spec.stones * scale), crack_cells=round(spec.crack_cells * scale)
        )
        z = make_tray(spec, length_m=runway_m, width_m=RUNWAY_M[1], dx_m=DX_M, seed=2026 + a)
        trials = []
        for subj in SUBJECTS[:n_subjects]:
            for k in range(passes):
                rec = walk_over(
                    z, DX_M, subj, duration_s=60.0, frame_rate_hz=rate_hz,
                    stop_at_x_m=runway_m - 0.05, seed=1000 * a + 10 * subj.seed + k,
                )  # fmt: skip
                s = movement_summary(
                    rec.markers, frame_rate_hz=rate_hz, marker_names=list(DEMO_MARKERS),
                    roles=_roles(), params={"n_surrogates": 0},
                )  # fmt: skip
                trials.append(_scores(s))
        out[key] = trials
    return out


def scenario_trials(quick: bool, seed: int = 2026) -> dict[str, list]:
    """Scores of the demo's own trials, as ``demo_arena.scenario.build_scenario`` draws them.

    Same trays, subjects, passes, belt time and seeds as the scenario (``quick``: 3
    subjects, one pass, 5 s on the belt; else 4 subjects, two passes, 8 s), generated in
    memory instead of written to files; scored with the default recipe, no surrogates.
    Returns per tray a list of (scores, number of symbols).
    """
    subjects = SUBJECTS[:3] if quick else SUBJECTS
    n_trials, belt_s = (1, 5.0) if quick else (2, 8.0)
    out: dict[str, list] = {}
    trial_no = 0
    for a, spec in enumerate(TRAYS):
        z = make_tray(spec, length_m=RUNWAY_M[0], width_m=RUNWAY_M[1], dx_m=DX_M,
                      seed=seed + 100 * a)  # fmt: skip
        belt = 0.25 if spec.kind == "treadmill" else None
        for subj in subjects:
            for _ in range(n_trials):
                trial_no += 1
                rec = walk_over(
                    z, DX_M, subj, duration_s=belt_s if belt else 20.0,
                    treadmill_speed_m_s=belt, stop_at_x_m=RUNWAY_M[0] - 0.05,
                    long_gap=trial_no == 5, seed=seed * 7 + trial_no,
                )  # fmt: skip
                params: dict[str, Any] = {"n_surrogates": 0}
                if belt:
                    params["treadmill_speed_m_s"] = belt
                s = movement_summary(
                    rec.markers, frame_rate_hz=rec.frame_rate_hz,
                    marker_names=list(rec.marker_names), roles=_roles(), params=params,
                )  # fmt: skip
                note = next((n for n in s.notes if n.startswith("symbols:")), "symbols: 0,")
                n_sym = int(note.split()[1].rstrip(","))
                out.setdefault(spec.key, []).append((_scores(s), n_sym))
    return out


SCENARIO_SCORES = (
    "statistical_complexity_bits",
    "causal_states_n",
    "causal_entropy_rate_bits",
    "entropy_rate_bits",
    "lz76_entropy_rate_bits",
    "effective_complexity_bits_per_symbol",
    "total_information_bits_per_symbol",
    "permutation_entropy",
    "js_complexity",
    "rqa_det",
    "sample_entropy",
)


def scenario_rows(trials: dict[str, list]) -> list[dict[str, Any]]:
    """Per score: Kruskal-Wallis across trays, Spearman rho with the symbol count, pairs."""
    rows = []
    keys = list(trials)
    for name in SCENARIO_SCORES:
        groups = {k: np.array([t[0][name][0] for t in v], dtype=float) for k, v in trials.items()}
        n_sym = np.concatenate([[t[1] for t in v] for v in trials.values()]).astype(float)
        allv = np.concatenate(list(groups.values()))
        ok = np.isfinite(allv)
        finite = [g[np.isfinite(g)] for g in groups.values()]
        row: dict[str, Any] = {"measure": name, "defined": f"{int(ok.sum())}/{ok.size}",
                               "medians": {k: (round(float(np.median(g)), 4) if g.size else None)
                                           for k, g in zip(keys, finite, strict=True)}}  # fmt: skip
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            usable = [g for g in finite if g.size]
            pooled = np.concatenate(usable) if usable else np.zeros(0)
            if len(usable) >= 2 and np.ptp(pooled) > 0:
                kw = stats.kruskal(*usable)
                row["kruskal_h"], row["kruskal_p"] = round(float(kw.statistic), 2), float(kw.pvalue)
                rho = stats.spearmanr(n_sym[ok], allv[ok]).statistic
                row["spearman_rho_with_symbols"] = round(float(rho), 2)
            else:
                row["kruskal_h"] = row["kruskal_p"] = row["spearman_rho_with_symbols"] = None
        row["cliffs_delta"] = {
            f"{b} minus {a}": round(cliffs_delta(finite[keys.index(a)], finite[keys.index(b)]), 2)
            if finite[keys.index(a)].size and finite[keys.index(b)].size else None
            for a, b in TRAY_PAIRS
        }  # fmt: skip
        rows.append(row)
    return rows


def print_scenario(rows: list[dict[str, Any]], trials: dict[str, list]) -> None:
    n_sym = [t[1] for v in trials.values() for t in v]
    print(f"\n== demo trials at demo length ({INVENTED}): {len(n_sym)} trials, symbols per "
          f"trial median {np.median(n_sym):.0f} (range {min(n_sym)}-{max(n_sym)})")  # fmt: skip
    print("   trays: " + ", ".join(trials))
    print(f"   {'measure':38s} {'defined':>7s} {'KW H':>6s} {'KW p':>8s} {'rho(N)':>6s}  "
          "delta A->B, C->E   medians by tray")  # fmt: skip
    for r in rows:
        p = r["kruskal_p"]
        d = ", ".join("-" if v is None else f"{v:+.2f}" for v in r["cliffs_delta"].values())
        med = " ".join("nan" if v is None else f"{v:.3g}" for v in r["medians"].values())
        print(f"   {r['measure']:38s} {r['defined']:>7s} {_fmt(r['kruskal_h'], 6)} "
              f"{'-' if p is None else f'{p:.2g}':>8s} {_fmt(r['spearman_rho_with_symbols'], 6)}  "
              f"{d:17s}  {med}")  # fmt: skip


def compare(dataset: str, first: str, second: str, a: list, b: list) -> list[dict[str, Any]]:
    """One row per score: g and delta of ``second`` minus ``first``."""
    rows = []
    for name in a[0]:
        if is_diagnostic(name):
            continue
        va = np.array([t[name][0] for t in a if name in t], dtype=float)
        vb = np.array([t[name][0] for t in b if name in t], dtype=float)
        fa, fb = va[np.isfinite(va)], vb[np.isfinite(vb)]
        row: dict[str, Any] = {
            "measure": name,
            "side": "movement",
            "dataset": dataset,
            "contrast": f"{second} minus {first}",
            "effect_kind": "hedges_g",
            "n": {first: int(fa.size), second: int(fb.size)},
        }
        if fa.size < 2 or fb.size < 2:
            notes = [t[name][1] for t in a + b if name in t and t[name][1]]
            row |= {"effect": None, "cliffs_delta": None, "separates": False,
                    "note": "NaN on these data" + (f": {notes[0]}" if notes else "")}  # fmt: skip
        else:
            g, d = hedges_g(fa, fb), cliffs_delta(fa, fb)
            sep = abs(g) >= G_MIN and abs(d) >= DELTA_MIN
            note = ""
            if math.isinf(g):
                note = "no spread within either group"
            elif fa.std() == 0 and fb.std() == 0:
                note = "same constant value in every trial"
            row |= {"effect": None if math.isinf(g) else round(g, 3),
                    "cliffs_delta": round(d, 3), "separates": bool(sep), "note": note}  # fmt: skip
        rows.append(row)
    return rows


# -- terrain ------------------------------------------------------------------------------


def _equal_sq(z: np.ndarray, sq_m: float) -> np.ndarray:
    """Least-squares plane removed (as terrain_summary levels), then scaled to RMS ``sq_m``.

    Scaling before levelling would leave high-H surfaces, whose long waves the plane
    absorbs, with a smaller Sq: amplitude would then follow H.
    """
    ny, nx = z.shape
    yy, xx = np.mgrid[0:ny, 0:nx]
    design = np.column_stack([np.ones(z.size), xx.ravel(), yy.ravel()])
    coef, *_ = np.linalg.lstsq(design, z.ravel(), rcond=None)
    level = z - (design @ coef).reshape(z.shape)
    return level * (sq_m / float(level.std()))


def terrain_rows(n_px: int, seeds: int) -> tuple[list[dict[str, Any]], int]:
    hursts = np.round(np.arange(0.2, 0.91, 0.1), 2)
    table: dict[str, list[tuple[float, float]]] = {}
    notes: dict[str, str] = {}
    for h in hursts:
        for seed in range(seeds):
            z = _equal_sq(self_affine_surface(n_px, float(h), seed=seed), 0.001)
            s = terrain_summary(z, 0.001, params={"n_surrogates": 0})
            for sc in s.scores:
                table.setdefault(sc.name, []).append((float(h), sc.value))
                if sc.note and sc.name not in notes:
                    notes[sc.name] = sc.note
    dataset = f"self-affine surfaces {n_px}^2, H 0.2..0.9 step 0.1, {seeds} seeds, Sq 1 mm"
    rows = []
    for name, pairs in table.items():
        if is_diagnostic(name):
            continue
        arr = np.array(pairs)
        ok = np.isfinite(arr[:, 1])
        row: dict[str, Any] = {
            "measure": name, "side": "terrain", "dataset": dataset,
            "contrast": "rank correlation with H", "effect_kind": "spearman_rho",
            "n": int(ok.sum()), "cliffs_delta": None,
        }  # fmt: skip
        vals = arr[ok, 1]
        # Rounding-level spread (Sq fixed by construction) counts as constant.
        if ok.sum() < 4 or np.ptp(vals) <= 1e-9 * np.abs(vals).max():
            row |= {"effect": None, "separates": False,
                    "note": "NaN or constant on these data" + (f": {notes[name]}" if name in notes else "")}  # fmt: skip  # noqa: E501
        else:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                rho = float(stats.spearmanr(arr[ok, 0], arr[ok, 1]).statistic)
            row |= {"effect": round(rho, 3), "separates": bool(abs(rho) >= RHO_MIN), "note": ""}
        rows.append(row)
    return rows, len(hursts) * seeds


# -- summary ------------------------------------------------------------------------------


def per_measure(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """One entry per (side, measure): the data sets it separates and its largest |effect|."""
    out: dict[tuple[str, str], dict[str, Any]] = {}
    n_sets = {"movement": len({r["dataset"] for r in rows if r["side"] == "movement"})}
    for r in rows:
        e = out.setdefault((r["side"], r["measure"]), {
            "measure": r["measure"], "side": r["side"], "separates_on": [],
            "max_abs_effect": None, "effect_kind": r["effect_kind"], "_ranks": [],
        })  # fmt: skip
        rank = r["cliffs_delta"] if r["side"] == "movement" else r["effect"]
        if rank is not None:
            e["_ranks"].append(abs(rank))
        if r["separates"]:
            e["separates_on"].append(r["dataset"])
        eff = r["effect"]
        if eff is None and r.get("note") == "no spread within either group":
            eff = math.inf
        if eff is not None and (e["max_abs_effect"] is None or abs(eff) > e["max_abs_effect"]):
            e["max_abs_effect"] = abs(eff)
    result = []
    for e in out.values():
        e["separates"] = bool(e["separates_on"])
        k = len(e["separates_on"])
        if not e["separates"]:
            e["verdict"] = NOTHING
        elif e["side"] == "terrain":
            e["verdict"] = f"follows H (|rho| >= {RHO_MIN})"
        else:
            e["verdict"] = f"separates {k} of {n_sets['movement']} data sets"
        if e["max_abs_effect"] is not None and math.isinf(e["max_abs_effect"]):
            e["max_abs_effect"] = "inf"
        ranks = e.pop("_ranks")
        # Bounded rank effect (|Cliff's delta| or |rho|), averaged over the data sets.
        e["mean_abs_rank_effect"] = round(float(np.mean(ranks)), 3) if ranks else None
        result.append(e)

    def key(e: dict[str, Any]) -> tuple:
        r = e["mean_abs_rank_effect"]
        return (e["side"], -len(e["separates_on"]), -(r if r is not None else -1.0), e["measure"])

    return sorted(result, key=key)


def _fmt(v: Any, w: int = 7) -> str:
    if v is None:
        return "-".rjust(w)
    if isinstance(v, float):
        return f"{v:{w}.2f}" if abs(v) < 1000 else f"{v:{w}.0e}"
    return str(v).rjust(w)


def print_tables(rows: list[dict[str, Any]], measures: list[dict[str, Any]]) -> str:
    lines = []
    datasets = list(dict.fromkeys(r["dataset"] for r in rows))
    for ds in datasets:
        sub = [r for r in rows if r["dataset"] == ds]
        lines.append(f"\n== {ds}  ({sub[0]['contrast']})")
        kind = sub[0]["effect_kind"]
        if kind == "hedges_g":
            n = sub[0]["n"]
            lines.append("   n per group: " + ", ".join(f"{k} {v}" for k, v in n.items())
                         + " (scores with NaN trials have fewer; see JSON)")  # fmt: skip
            lines.append(f"   {'measure':40s} {'g':>7s} {'delta':>7s}  sep  note")
            for r in sorted(sub, key=lambda r: -abs(r["effect"] or 0)):
                g = r["effect"] if r["effect"] is not None else (
                    "inf" if r["note"] == "no spread within either group" else None)  # fmt: skip
                lines.append(f"   {r['measure']:40s} {_fmt(g)} {_fmt(r['cliffs_delta'])}  "
                             f"{'yes' if r['separates'] else ' no'}  {r['note'][:70]}")  # fmt: skip
        else:
            lines.append(f"   n surfaces: {sub[0]['n']}")
            lines.append(f"   {'measure':40s} {'rho':>7s}  sep  note")
            for r in sorted(sub, key=lambda r: -abs(r["effect"] or 0)):
                lines.append(f"   {r['measure']:40s} {_fmt(r['effect'])}  "
                             f"{'yes' if r['separates'] else ' no'}  {r['note'][:70]}")  # fmt: skip
    lines.append("\n== per measure (order for the report's measure list)")
    lines.append("   (ordered by data sets separated, then mean |Cliff's delta| or |rho|)")
    lines.append(f"   {'side':8s} {'measure':40s} {'max|eff|':>8s} {'mean|rk|':>8s}  verdict")
    for e in measures:
        lines.append(f"   {e['side']:8s} {e['measure']:40s} {_fmt(e['max_abs_effect'], 8)} "
                     f"{_fmt(e['mean_abs_rank_effect'], 8)}  {e['verdict']}")  # fmt: skip
    text = "\n".join(lines)
    print(text)
    return text


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer trials, 256^2 surfaces")
    ap.add_argument("--out", default=str(OUT))
    args = ap.parse_args()
    quick = args.quick
    t0 = time.perf_counter()
    rows: list[dict[str, Any]] = []
    timing = {}

    # Symbols are read four times a decorrelation delay and word lengths follow the
    # sample size (supported_word_length), so 30 s windows give entropy rates and
    # causal states too; the full run's 300 s windows give longer histories.
    n_dm, win_s = (3, 30.0) if quick else (4, 300.0)
    for rate in (30.0, 120.0):
        t = time.perf_counter()
        dm = deepmimic_trials(rate, n_dm, win_s)
        ds = f"DeepMimic walk vs run, {rate:.0f} Hz, {win_s:.0f} s windows (real motion capture)"
        rows += compare(ds, "walk", "run", dm["walk"], dm["run"])
        timing[f"deepmimic_{rate:.0f}hz_s"] = round(time.perf_counter() - t, 1)

    n_subj, passes, demo_hz, runway = (3, 1, 120.0, 2.4) if quick else (4, 2, 300.0, 3.0)
    t = time.perf_counter()
    keys = tuple(k for pair in TRAY_PAIRS for k in pair)
    demo = demo_trials(keys, n_subj, passes, demo_hz, runway)
    for first, second in TRAY_PAIRS:
        ds = (f"demo trays {first} vs {second}, {demo_hz:.0f} Hz, {runway} m runway "
              f"({INVENTED})")  # fmt: skip
        rows += compare(ds, first, second, demo[first], demo[second])
    timing["demo_s"] = round(time.perf_counter() - t, 1)

    t = time.perf_counter()
    scenario = scenario_trials(quick)
    srows = scenario_rows(scenario)
    timing["demo_scenario_s"] = round(time.perf_counter() - t, 1)

    t = time.perf_counter()
    n_px, seeds = (256, 2) if quick else (512, 5)
    trows, _ = terrain_rows(n_px, seeds)
    rows += trows
    timing["terrain_s"] = round(time.perf_counter() - t, 1)

    measures = per_measure(rows)
    print_tables(rows, measures)
    print_scenario(srows, scenario)
    missing = [m for side in HEADLINE_MEASURES.values() for m in side
               if m not in {e["measure"] for e in measures}]  # fmt: skip
    if missing:
        print(f"\nheadline measures without a row: {missing}")
    total = round(time.perf_counter() - t0, 1)
    print(f"\nwall time {total} s ({timing}); {INVENTED} for the tray rows; surrogates off")
    doc = {
        "generated_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "command": "python bench/bench_discrimination.py" + (" --quick" if quick else ""),
        "mode": "quick" if quick else "full",
        "rules": {
            "movement": f"separates when |hedges_g| >= {G_MIN} and |cliffs_delta| >= {DELTA_MIN}",
            "terrain": f"separates (follows H) when |spearman_rho| >= {RHO_MIN}",
            "nothing": NOTHING,
        },
        "notes": [
            "Tray rows come from " + INVENTED + "; runways longer than the demo's.",
            "DeepMimic rows: windows of one looped clip per gait; trials differ only in start "
            "frame and marker noise, so within-group spread is small and g can be huge.",
            "Surrogates switched off (n_surrogates 0): no z-scores compared.",
            "Symbols: joint up/down of the two leading state components, read "
            "symbols_per_delay (4) times a decorrelation delay; block-entropy word length w "
            "and causal-state history w - 1 from the sample size (supported_word_length, "
            "after Marton & Shields 1994: k**w <= N and W(w)**2 <= N). Short trials get "
            "short histories: on a demo pass (about 80 symbols) causal states resolve little "
            "more than the four symbols, so statistical complexity sits at its ceiling "
            "(log2 4) and is withheld (NaN with the bound in its note).",
            "Effects are second group minus first (run minus walk; scree minus ripples).",
        ],
        "wall_time_s": total,
        "timing_s": timing,
        "machine": f"{os.cpu_count()} cores (shared)",
        "rows": rows,
        "measures": measures,
        # The demo's own trials (demo length, every tray): rank test across trays; not
        # in "rows" (no pairwise separation rule), read by no view.
        "demo_scenario": {
            "data": f"demo_arena scenario trials at demo length ({INVENTED})",
            "test": "Kruskal-Wallis across the seven trays; Spearman rho with the number of "
            "symbols (a trial-length confound); Cliff's delta for the tray pairs",
            "rows": srows,
        },
    }
    path = Path(args.out)
    tmp = path.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(doc, indent=1) + "\n")
    os.replace(tmp, path)  # atomic
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
