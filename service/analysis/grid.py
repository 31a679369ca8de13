"""Correspondence assembly: score rows from the database in, the report out.

For a recipe and a selection (arenas, subjects, conditions, trials, measures) this module
builds two tables from stored score rows -- one row per arena with its terrain scores, one row
per trial with its movement scores -- and hands them to :func:`measures.correspondence_grid`.

Decisions (also in the report's ``notes``):

- An arena's terrain value comes from its *scored* scans (scans with at least one score under
  the recipe): ``scans="latest"`` takes the scan captured last (``captured_at``, then upload
  time, then id), ``"mean"`` the mean over all scored scans of each measure (NaN ignored).
- Each terrain x movement pair uses the arenas and trials where both values are finite. Pairs
  sharing the same rows are fitted in one call, so the usual complete table is one grid call;
  q-values are recomputed across the whole grid afterwards.
- Without a measure list, every scored measure is used except the diagnostics in
  :data:`DIAGNOSTIC_MEASURES` (fit bands, R^2, point counts), which are settings, not
  properties of ground or gait.
- Covariates are trial-level: any trial score (``speed_m_s``, ``stride_frequency_hz``,
  ``valid_fraction``, ...) or a value derived from the records (:data:`DERIVED_COVARIATES`:
  trial duration, subject body length and mass, treadmill speed). A named covariate is not
  also a movement measure; trials without a finite value of every covariate are left out.
- A study (``Selection.study``) limits arenas, subjects and trials to its members: a trial
  is in when it is a member itself, or when its arena and its subject both are (see
  :func:`storage.repo.study_trial_ids`).

Everything here is blocking; the routes call it through ``run_in_threadpool``.
"""

from __future__ import annotations

import csv
import io
import math
from collections import defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy.orm import Session

from measures import (
    complexity_entropy_bounds,
    confound_checks,
    correspondence_grid,
    design_summary,
)
from measures.correspondence.inference import benjamini_hochberg
from measures.correspondence.multivariate import first_canonical_correlation
from measures.errors import InsufficientDataError, InvalidParameterError
from measures.information.mutual_info import ksg_mutual_information
from storage import repo
from storage.errors import BadInput

__all__ = [
    "CONTRACT_FIELDS",
    "COVARIATE_SCORES",
    "DERIVED_COVARIATES",
    "DIAGNOSTIC_MEASURES",
    "HEADLINE_MEASURES",
    "Selection",
    "StudyTables",
    "correspondence_report",
    "load_study",
    "rows_csv",
]

#: The row fields outside tools rely on (DESIGN.md, contract), in CSV column order.
CONTRACT_FIELDS = (
    "terrain_measure",
    "movement_measure",
    "slope",
    "ci_low",
    "ci_high",
    "p_value",
    "q_value",
    "spearman_rho",
    "n_arenas",
    "n_subjects",
    "n_trials",
)
EXTRA_FIELDS = ("spearman_ci_low", "spearman_ci_high", "mixed_p_value")

#: Scores that describe how a measure was computed rather than the ground or the gait.
DIAGNOSTIC_MEASURES = frozenset(
    {
        "psd_band_lo_m",
        "psd_band_hi_m",
        "psd_slope",  # the Hurst exponents carry it, where they are defined
        "rqa_points",
        "embedding_delay_s",
        "embedding_dimension",
        "lay_direction_deg",
        # quality control of the inputs and fits, not properties of ground or gait
        "heightmap_filled_fraction",
        "heightmap_points_used",
        "heightmap_outliers",
        "heightmap_plane_inlier_fraction",
        "hurst_psd_r2",
        "hurst_variogram_r2",
        "hurst_madogram_r2",
        "hurst_boxcount_r2",
        "cutoff_hz",
        "noise_floor_m",
        "causal_states_n",
        "step_classes_n",
        "step_class_within_rms_m",
        "valid_fraction",
    }
)
#: What a correspondence covers when the request names no measures: the
#: headline scores, chosen so both sides include the shared estimators
#: (permutation entropy and Jensen-Shannon complexity, entropy rate/density)
#: next to the classical ones. Ask for ``all`` to get every non-diagnostic score.
#: Few arenas cannot support hundreds of pairs: the BH correction would then
#: absorb any effect.
HEADLINE_MEASURES = {
    "terrain": (
        "sq_m",
        "sdr",
        "hurst_psd",
        "slope_entropy_bits",
        "permutation_entropy_2d",
        "js_complexity_2d",
        "entropy_density_2d_bits",
    ),
    "movement": (
        "rqa_det",
        "rqa_lam",
        "entropy_rate_bits",
        "permutation_entropy",
        "js_complexity",
        "statistical_complexity_bits",
        "sample_entropy",
        "duty_factor",
        "stride_frequency_hz",
    ),
}
SCAN_RULES = ("latest", "mean")
#: Trial scores of the movement summary that serve as covariates; always carried in the
#: analysis table (also when not analysed as movement measures).
COVARIATE_SCORES = ("speed_m_s", "stride_frequency_hz", "valid_fraction")
#: Covariates computed from the stored records rather than scored.
DERIVED_COVARIATES = ("trial_duration_s", "body_length_m", "mass_kg", "treadmill_speed_m_s")
#: The covariate the speed-vs-terrain confound check uses.
SPEED_SCORE = "speed_m_s"
#: Surrogate z-scores inside +-2 mean the value is within the spread of structureless
#: surrogates (two-sided ~95 %, common practice); "most" is more than half the targets.
SURROGATE_Z = 2.0
PLANE_MEASURES = {
    "scan": ("permutation_entropy_2d", "js_complexity_2d"),
    "trial": ("permutation_entropy", "js_complexity"),
}
_PAGE = 1000


@dataclass(frozen=True)
class Selection:
    """Which part of the store a correspondence covers (empty tuple: everything)."""

    arena_ids: tuple[int, ...] = ()
    subject_ids: tuple[int, ...] = ()
    conditions: tuple[str, ...] = ()
    trial_ids: tuple[int, ...] = ()
    terrain_measures: tuple[str, ...] = ()
    movement_measures: tuple[str, ...] = ()
    scans: str = "latest"
    covariates: tuple[str, ...] = ()
    study: str | None = None

    def __post_init__(self) -> None:
        if self.scans not in SCAN_RULES:
            raise BadInput(f"scans must be one of {SCAN_RULES}, got {self.scans!r}")


@dataclass
class StudyTables:
    """The assembled analysis tables of one recipe and selection.

    ``arenas``: one row per arena with terrain (index arena_id; columns arena_name, n_scans,
    then terrain measures). ``trials``: one row per trial (columns trial_id, arena_id,
    subject_id, condition, then movement measures, then the covariate columns: the
    :data:`DERIVED_COVARIATES`, the :data:`COVARIATE_SCORES` present, and the requested
    covariates). ``surrogate_z``: measure -> z of each target that carries one.
    """

    arenas: pd.DataFrame
    trials: pd.DataFrame
    terrain_measures: list[str]
    movement_measures: list[str]
    surrogate_z: dict[tuple[str, str], list[float]] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    covariates: list[str] = field(default_factory=list)
    study: str | None = None
    labels: dict[str, dict[int, str]] = field(default_factory=dict)

    def analysis_table(self) -> pd.DataFrame:
        """One row per trial with its arena's terrain values (terrain columns prefixed
        ``terrain:`` only where a name is also a movement measure)."""
        terrain = self.arenas[self.terrain_measures].rename(
            columns={c: f"terrain:{c}" for c in self.terrain_measures if c in self.trials}
        )
        return self.trials.join(terrain, on="arena_id")

    def export_table(self) -> pd.DataFrame:
        """The analysis table for other tools: study, arena and subject names first."""
        table = self.analysis_table()
        front = pd.DataFrame(
            {
                "study": self.study or "",
                "arena": self.arenas["arena_name"].reindex(table["arena_id"]).to_numpy(),
                "subject": table["subject_id"].map(self.labels.get("subject", {})).to_numpy(),
            },
            index=table.index,
        )
        return pd.concat([front, table], axis=1)


def _all_rows(fn: Any, **filters: Any) -> list[Any]:
    rows, offset = [], 0
    while True:
        page, count = fn(offset=offset, limit=_PAGE, **filters)
        rows.extend(page)
        offset += len(page)
        if not page or offset >= count:
            return rows


def _scores_by_target(
    session: Session, recipe_hash: str, kind: str, ids: set[int]
) -> dict[int, dict[str, Any]]:
    out: dict[int, dict[str, Any]] = defaultdict(dict)
    for row in _all_rows(
        repo.list_scores, session=session, target_kind=kind, recipe_hash=recipe_hash
    ):
        if row.target_id in ids:
            out[row.target_id][row.measure] = row
    return out


def _scan_time(scan: Any) -> tuple[datetime, datetime, int]:
    floor = datetime.min.replace(tzinfo=UTC)
    return (scan.captured_at or floor, scan.created_at or floor, scan.id)


def _value(row: Any) -> float:
    return math.nan if row is None or row.value is None else float(row.value)


def _pick_measures(available: Iterable[str], wanted: Sequence[str], kind: str) -> list[str]:
    names = sorted(set(available))
    everything = [n for n in names if n not in DIAGNOSTIC_MEASURES]
    if tuple(wanted) == ("all",):
        return everything
    if not wanted:
        headline = [n for n in HEADLINE_MEASURES[kind] if n in names]
        return headline or everything
    missing = [w for w in wanted if w not in names]
    if missing:
        raise BadInput(f"no {kind} scores named {missing} under this recipe; scored: {names}")
    return list(dict.fromkeys(wanted))


def _select_trials(session: Session, sel: Selection) -> list[Any]:
    trials = _all_rows(repo.list_trials, session=session)
    if sel.study is not None:
        study = repo.get_study_by_name(session=session, name=sel.study)
        members = repo.study_trial_ids(session=session, study_id=study.id)
        trials = [t for t in trials if t.id in members]
    keep = []
    for t in trials:
        if sel.arena_ids and t.arena_id not in sel.arena_ids:
            continue
        if sel.subject_ids and t.subject_id not in sel.subject_ids:
            continue
        if sel.conditions and (t.condition or "") not in sel.conditions:
            continue
        if sel.trial_ids and t.id not in sel.trial_ids:
            continue
        keep.append(t)
    return keep


def _arena_terrain(
    session: Session, recipe_hash: str, arena_ids: set[int], rule: str
) -> tuple[dict[int, dict[str, float]], dict[int, list[Any]], dict[int, dict[str, Any]]]:
    scans = [s for s in _all_rows(repo.list_scans, session=session) if s.arena_id in arena_ids]
    scores = _scores_by_target(session, recipe_hash, "scan", {s.id for s in scans})
    by_arena: dict[int, list[Any]] = defaultdict(list)
    for scan in sorted(scans, key=_scan_time):
        if scores.get(scan.id):
            by_arena[scan.arena_id].append(scan)
    terrain: dict[int, dict[str, float]] = {}
    for arena_id, scored in by_arena.items():
        used = scored[-1:] if rule == "latest" else scored
        names = {m for s in used for m in scores[s.id]}
        values = {}
        for name in names:
            vals = [_value(scores[s.id].get(name)) for s in used]
            finite = [v for v in vals if math.isfinite(v)]
            values[name] = float(np.mean(finite)) if finite else math.nan
        terrain[arena_id] = values
        by_arena[arena_id] = used
    return terrain, by_arena, scores


def load_study(*, session: Session, recipe_hash: str, selection: Selection) -> StudyTables:
    """Assemble the arena and trial tables for ``recipe_hash`` and ``selection``."""
    trials = _select_trials(session, selection)
    warnings: list[str] = []
    terrain, used_scans, scan_scores = _arena_terrain(
        session, recipe_hash, {t.arena_id for t in trials}, selection.scans
    )
    without = sorted({t.arena_id for t in trials} - set(terrain))
    if without:
        warnings.append(
            f"Arenas {without} have no scored scan under this recipe; their trials are left out."
        )
    trials = [t for t in trials if t.arena_id in terrain]
    trial_scores = _scores_by_target(session, recipe_hash, "trial", {t.id for t in trials})
    unscored = [t.id for t in trials if not trial_scores.get(t.id)]
    if unscored:
        warnings.append(f"{len(unscored)} trials have no scores under this recipe (left out).")
    trials = [t for t in trials if trial_scores.get(t.id)]
    t_names = _pick_measures(
        {m for v in terrain.values() for m in v}, selection.terrain_measures, "terrain"
    )
    scored_trial = {m for v in trial_scores.values() for m in v}
    covariates = list(dict.fromkeys(selection.covariates))
    unknown = [c for c in covariates if c not in scored_trial and c not in DERIVED_COVARIATES]
    if unknown:
        raise BadInput(
            f"no covariate named {unknown}: use a trial score ({sorted(scored_trial)}) or one "
            f"of {list(DERIVED_COVARIATES)}"
        )
    m_names = _pick_measures(
        scored_trial - set(covariates) if not selection.movement_measures else scored_trial,
        selection.movement_measures,
        "movement",
    )
    both = [m for m in m_names if m in covariates]
    if both:
        warnings.append(f"{both} named as covariates are not analysed as movement measures.")
        m_names = [m for m in m_names if m not in covariates]
    arena_ids = sorted({t.arena_id for t in trials})
    arenas = pd.DataFrame(
        [
            {
                "arena_id": a,
                "arena_name": repo.get_arena(session=session, arena_id=a).name,
                "n_scans": len(used_scans[a]),
                **{n: terrain[a].get(n, math.nan) for n in t_names},
            }
            for a in arena_ids
        ],
        columns=["arena_id", "arena_name", "n_scans", *t_names],
    ).set_index("arena_id")
    table = pd.DataFrame(
        [
            {
                "trial_id": t.id,
                "arena_id": t.arena_id,
                "subject_id": t.subject_id,
                "condition": t.condition or "",
                **{n: _value(trial_scores[t.id].get(n)) for n in m_names},
            }
            for t in trials
        ],
        columns=["trial_id", "arena_id", "subject_id", "condition", *m_names],
    )
    extra = [c for c in (*COVARIATE_SCORES, *covariates) if c in scored_trial and c not in table]
    for name in dict.fromkeys(extra):
        table[name] = [_value(trial_scores[t.id].get(name)) for t in trials]
    subjects = {
        sid: repo.get_subject(session=session, subject_id=sid)
        for sid in {t.subject_id for t in trials}
    }
    derived = {
        "trial_duration_s": [
            t.n_frames / t.frame_rate_hz if t.n_frames and t.frame_rate_hz else math.nan
            for t in trials
        ],
        "body_length_m": [_or_nan(subjects[t.subject_id].body_length_m) for t in trials],
        "mass_kg": [_or_nan(subjects[t.subject_id].mass_kg) for t in trials],
        "treadmill_speed_m_s": [_or_nan(t.treadmill_speed_m_s) for t in trials],
    }
    for name, values in derived.items():
        table[name] = np.asarray(values, dtype=float)
    labels = {"subject": {sid: subj.label for sid, subj in subjects.items()}}
    surrogate: dict[tuple[str, str], list[float]] = defaultdict(list)
    for kind, source in (
        ("scan", [scan_scores[s.id] for a in arena_ids for s in used_scans[a]]),
        ("trial", [trial_scores[t.id] for t in trials]),
    ):
        for scored in source:
            for name, row in scored.items():
                if row.surrogate_z is not None:
                    surrogate[(kind, name)].append(float(row.surrogate_z))
    return StudyTables(
        arenas,
        table,
        t_names,
        m_names,
        dict(surrogate),
        warnings,
        covariates=covariates,
        study=selection.study,
        labels=labels,
    )


def _or_nan(value: Any) -> float:
    return math.nan if value is None else float(value)


def _codes(values: pd.Series) -> np.ndarray:
    return np.unique(values.to_numpy(), return_inverse=True)[1].astype(np.intp)


def _nan_row(t_name: str, m_name: str, n: tuple[int, int, int]) -> dict[str, Any]:
    row: dict[str, Any] = dict.fromkeys((*CONTRACT_FIELDS, *EXTRA_FIELDS), math.nan)
    row.update(terrain_measure=t_name, movement_measure=m_name)
    row.update(n_arenas=n[0], n_subjects=n[1], n_trials=n[2])
    return row


def _fit_block(
    study: StudyTables,
    t_cols: list[str],
    m_cols: list[str],
    arena_ok: np.ndarray,
    trial_ok: np.ndarray,
    params: dict[str, Any],
) -> tuple[list[dict[str, Any]], list[str], int, bool]:
    arenas = study.arenas.index.to_numpy()[arena_ok]
    trials = study.trials[trial_ok & study.trials["arena_id"].isin(arenas).to_numpy()]
    arenas = np.array(sorted(set(trials["arena_id"])))
    counts = (len(arenas), int(trials["subject_id"].nunique()), len(trials))
    if study.covariates:
        params = {
            **params,
            "covariates": trials[study.covariates].to_numpy(dtype=float),
            "covariate_names": study.covariates,
        }
    try:
        grid = correspondence_grid(
            study.arenas.loc[arenas, t_cols].to_numpy(dtype=float),
            trials[m_cols].to_numpy(dtype=float),
            np.searchsorted(arenas, trials["arena_id"].to_numpy()),
            _codes(trials["subject_id"]),
            terrain_names=t_cols,
            movement_names=m_cols,
            **params,
        )
    except (InvalidParameterError, InsufficientDataError) as exc:
        shown = ", ".join(t_cols) if len(t_cols) < 4 else f"{len(t_cols)} terrain measures"
        note = (
            f"Not estimated: pairs with {shown} have values in only {counts[0]} arena(s) and "
            f"{counts[2]} trial(s) (a measure can be undefined on some ground, e.g. no "
            f"self-affine band); these rows are left empty. Detail: {exc}"
        )
        return [_nan_row(t, m, counts) for t in t_cols for m in m_cols], [note], 0, False
    rows = [{f: getattr(r, f) for f in (*CONTRACT_FIELDS, *EXTRA_FIELDS)} for r in grid.rows]
    return rows, list(grid.warnings), grid.n_permutations, grid.exact_permutations


def _group_columns(frame: pd.DataFrame, names: list[str]) -> dict[bytes, list[str]]:
    groups: dict[bytes, list[str]] = defaultdict(list)
    for name in names:
        groups[np.isfinite(frame[name].to_numpy(dtype=float)).tobytes()].append(name)
    return groups


def fit_grid(
    study: StudyTables, *, n_permutations: int = 9999, n_boot: int = 1999, seed: int = 0
) -> tuple[list[dict[str, Any]], list[str], int, bool]:
    """Every pair's row (contract fields plus extras), the grid's warnings, permutations used."""
    params: dict[str, Any] = {"n_permutations": n_permutations, "n_boot": n_boot, "seed": seed}
    rows: list[dict[str, Any]] = []
    warnings: list[str] = []
    n_perm, exact = 0, True
    for a_key, t_cols in _group_columns(study.arenas, study.terrain_measures).items():
        arena_ok = np.frombuffer(a_key, dtype=bool)
        for m_key, m_cols in _group_columns(study.trials, study.movement_measures).items():
            trial_ok = np.frombuffer(m_key, dtype=bool)
            block, notes, used, was_exact = _fit_block(
                study, t_cols, m_cols, arena_ok, trial_ok, params
            )
            rows += block
            warnings += [w for w in notes if w not in warnings]
            n_perm, exact = max(n_perm, used), exact and was_exact
    order = {
        (t, m): k
        for k, (t, m) in enumerate(
            (t, m) for t in study.terrain_measures for m in study.movement_measures
        )
    }
    rows.sort(key=lambda r: order[(r["terrain_measure"], r["movement_measure"])])
    q = benjamini_hochberg([r["p_value"] for r in rows])
    for r, qv in zip(rows, q, strict=True):
        r["q_value"] = float(qv)
    return rows, warnings, n_perm, exact


def surrogate_warnings(study: StudyTables, names: set[str]) -> list[str]:
    """Warn for measures whose surrogate z lies within +-2 for most targets."""
    out = []
    for (kind, name), zs in sorted(study.surrogate_z.items()):
        if name not in names or not zs:
            continue
        flat = sum(abs(z) < SURROGATE_Z for z in zs)
        if flat > len(zs) / 2:
            out.append(
                f"Surrogate test found no structure for {name!r}: |z| < {SURROGATE_Z:g} in "
                f"{flat} of {len(zs)} {kind}s, so its value there is what structureless "
                "surrogates give too."
            )
    return out


def _arena_movement_means(study: StudyTables) -> pd.DataFrame:
    # Mean of subject means, as the hierarchical bootstrap uses.
    by_subject = study.trials.groupby(["arena_id", "subject_id"])[study.movement_measures].mean()
    return by_subject.groupby(level="arena_id").mean()


def multivariate_summary(study: StudyTables, *, seed: int = 0) -> tuple[dict[str, Any], list[str]]:
    """First canonical correlation and KSG mutual information of arena-level vectors."""
    terrain = study.arenas[study.terrain_measures]
    movement = _arena_movement_means(study).reindex(terrain.index)
    both = pd.concat([terrain, movement.add_prefix("movement:")], axis=1).dropna()
    both = both.loc[:, both.std(ddof=0) > 0]
    t_cols = [c for c in both if not str(c).startswith("movement:")]
    m_cols = [c for c in both if str(c).startswith("movement:")]
    n, k = len(both), len(t_cols) + len(m_cols)
    out: dict[str, Any] = {"method": "cca", "n_arenas": n, "n_variables": k}
    if n < 3 or not t_cols or not m_cols:
        return out | {"first_canonical_correlation": None}, [
            "Multivariate summary skipped: fewer than 3 arenas with every measure, or a block "
            "without variance."
        ]
    x, y = both[t_cols].to_numpy(float), both[m_cols].to_numpy(float)
    cca = first_canonical_correlation(x, y, seed=seed)
    warnings = []
    if cca.degenerate:
        warnings.append(
            f"Canonical correlation is meaningless here: {n} arenas for {k} variables "
            "(n_arenas <= number of variables always gives 1); select fewer measures."
        )
    out |= {
        "first_canonical_correlation": cca.correlation,
        "p_value": cca.p_value,
        "degenerate": cca.degenerate,
        "terrain_weights": dict(zip(t_cols, cca.x_weights.tolist(), strict=True)),
        "movement_weights": {
            c.removeprefix("movement:"): w for c, w in zip(m_cols, cca.y_weights, strict=True)
        },
    }
    kk = 3
    if n > kk + 1:
        z = (both - both.mean()) / both.std(ddof=0)
        mi = ksg_mutual_information(z[t_cols].to_numpy(), z[m_cols].to_numpy(), k=kk, seed=seed)
        out |= {"mutual_information_bits": mi.value, "mutual_information_k": kk}
    return out, warnings


def _orders(parameters: dict[str, Any]) -> tuple[int, int]:
    """Numbers of ordinal patterns (D!) of the terrain and the movement side of a recipe."""
    from measures.movement.summary import MOVEMENT_DEFAULTS
    from measures.terrain.summary import TERRAIN_DEFAULTS

    def find(section: str, default: Any) -> Any:
        sub = parameters.get(section)
        if isinstance(sub, dict) and "ordinal_order" in sub:
            return sub["ordinal_order"]
        return parameters.get(f"{section}_ordinal_order", default)

    t_order = np.atleast_1d(find("terrain", TERRAIN_DEFAULTS["ordinal_order"]))
    m_order = int(np.atleast_1d(find("movement", MOVEMENT_DEFAULTS["ordinal_order"]))[0])
    return math.factorial(int(np.prod(t_order))), math.factorial(m_order)


def plane_view(study: StudyTables, recipe: Any) -> dict[str, Any]:
    """Arenas and trials on one complexity-entropy plane, with the admissible region."""
    arena_points, trial_points = [], []
    for a, row in study.arenas.iterrows():
        h, c = (row.get(m, math.nan) for m in PLANE_MEASURES["scan"])
        arena_points.append({"arena_id": int(a), "name": row["arena_name"], "H": h, "C": c})
    for t in study.trials.itertuples():
        h, c = (getattr(t, m, math.nan) for m in PLANE_MEASURES["trial"])
        trial_points.append(
            {
                "trial_id": t.trial_id,
                "arena_id": t.arena_id,
                "subject_id": t.subject_id,
                "H": h,
                "C": c,
            }
        )
    m_terrain, m_movement = _orders(recipe.parameters or {})
    bounds = {}
    for label, m in (("terrain", m_terrain), ("movement", m_movement)):
        b = complexity_entropy_bounds(m, n_points=101)
        bounds[label] = {
            "n_patterns": m,
            "entropy_max": b.entropy_max.tolist(),
            "complexity_max": b.complexity_max.tolist(),
            "entropy_min": b.entropy_min.tolist(),
            "complexity_min": b.complexity_min.tolist(),
        }
    return {
        "arena_measures": list(PLANE_MEASURES["scan"]),
        "trial_measures": list(PLANE_MEASURES["trial"]),
        "arenas": arena_points,
        "trials": trial_points,
        "bounds": bounds,
        "same_alphabet": m_terrain == m_movement,
    }


def _plane_values(study: StudyTables, session: Session, recipe_hash: str, sel: Selection) -> None:
    """Add the plane measures to the tables when the selection left them out."""
    extra_t = [m for m in PLANE_MEASURES["scan"] if m not in study.arenas]
    extra_m = [m for m in PLANE_MEASURES["trial"] if m not in study.trials]
    if not extra_t and not extra_m:
        return
    wide = load_study(
        session=session,
        recipe_hash=recipe_hash,
        selection=Selection(
            arena_ids=sel.arena_ids,
            subject_ids=sel.subject_ids,
            conditions=sel.conditions,
            trial_ids=sel.trial_ids,
            scans=sel.scans,
        ),
    )
    for m in extra_t:
        study.arenas[m] = wide.arenas.get(m, math.nan)
    for m in extra_m:
        study.trials[m] = (
            wide.trials.set_index("trial_id")[m].reindex(study.trials["trial_id"]).to_numpy()
            if m in wide.trials
            else math.nan
        )


def clean(value: Any) -> Any:
    """NaN and numpy scalars to JSON-ready values (None for NaN/inf)."""
    if isinstance(value, dict):
        return {k: clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def correspondence_report(
    *,
    session: Session,
    recipe: str,
    version: int | None = None,
    selection: Selection = Selection(),
    n_permutations: int = 9999,
    n_boot: int = 1999,
    seed: int = 0,
) -> dict[str, Any]:
    """The whole correspondence answer as a JSON-ready dict (NaN as None)."""
    prof = repo.get_recipe(session=session, name=recipe, version=version)
    study = load_study(session=session, recipe_hash=prof.hash, selection=selection)
    if study.trials.empty:
        raise BadInput("no scored trials in this selection under this recipe")
    covariate_info = _keep_complete_covariates(study)
    if study.trials.empty:
        raise BadInput(f"no trial has a finite value of every covariate {study.covariates}")
    rows, grid_warnings, n_perm, exact = fit_grid(
        study, n_permutations=n_permutations, n_boot=n_boot, seed=seed
    )
    multi, multi_warnings = multivariate_summary(study, seed=seed)
    names = set(study.terrain_measures) | set(study.movement_measures)
    warnings = study.warnings + grid_warnings
    warnings += surrogate_warnings(study, names | {m for v in PLANE_MEASURES.values() for m in v})
    warnings += multi_warnings
    confounds, design, confound_warnings = confounds_and_design(study)
    warnings += confound_warnings
    _plane_values(study, session, prof.hash, selection)
    report = {
        "recipe": {"name": prof.name, "version": prof.version, "hash": prof.hash},
        "scans": selection.scans,
        "rows": rows,
        "warnings": list(dict.fromkeys(warnings)),
        "n_arenas": len(study.arenas),
        "n_subjects": int(study.trials["subject_id"].nunique()),
        "n_trials": len(study.trials),
        "n_permutations": n_perm,
        "exact_permutations": exact,
        "terrain_measures": study.terrain_measures,
        "movement_measures": study.movement_measures,
        "arenas": [
            {
                "arena_id": int(a),
                "name": r["arena_name"],
                "n_scans": int(r["n_scans"]),
                "n_trials": int((study.trials["arena_id"] == a).sum()),
            }
            for a, r in study.arenas.iterrows()
        ],
        "multivariate": multi,
        "plane": plane_view(study, prof),
        "study": selection.study,
        "covariates": covariate_info,
        "confounds": confounds,
        "design": design,
    }
    return clean(report)


def _keep_complete_covariates(study: StudyTables) -> dict[str, Any]:
    """Drop trials without every covariate; describe the adjustment."""
    info: dict[str, Any] = {"names": list(study.covariates), "n_trials_dropped": 0}
    if not study.covariates:
        info["method"] = None
        return info
    ok = np.isfinite(study.trials[study.covariates].to_numpy(dtype=float)).all(axis=1)
    if not ok.all():
        info["n_trials_dropped"] = int((~ok).sum())
        study.warnings.append(
            f"{int((~ok).sum())} trials lack a value of {study.covariates} and are left out."
        )
        study.trials = study.trials[ok].reset_index(drop=True)
        study.arenas = study.arenas.loc[sorted(set(study.trials["arena_id"]))]
    info["method"] = (
        "mixed model movement ~ terrain + covariates + (1 | subject) (REML); arena-level "
        "Freedman-Lane permutation test on subject-centred arena means (reduced model "
        "movement ~ covariates); Spearman on movement adjusted by the reduced model's slopes"
    )
    return info


def confounds_and_design(study: StudyTables) -> tuple[dict[str, Any], dict[str, Any], list[str]]:
    """Confound checks (speed vs terrain, balance, collinearity) and the design table."""
    arena_ids = study.arenas.index.to_numpy()
    arena_codes = np.searchsorted(arena_ids, study.trials["arena_id"].to_numpy())
    subject_ids = np.array(sorted(set(study.trials["subject_id"])))
    terrain = study.arenas[study.terrain_measures].to_numpy(dtype=float)
    speed = study.trials[SPEED_SCORE].to_numpy(dtype=float) if SPEED_SCORE in study.trials else None
    checks = confound_checks(
        terrain,
        arena_codes,
        study.trials["subject_id"].to_numpy(),
        terrain_names=study.terrain_measures,
        speed=speed,
        covariate_name=SPEED_SCORE,
    )
    coll = checks.collinearity
    confounds = {
        "speed": [
            {
                "terrain_measure": r.terrain_measure,
                "covariate": r.covariate,
                "spearman_rho": r.rho,
                "p_value": r.p_value,
                "n_arenas": r.n_arenas,
                "confounded": r.confounded,
                "adjusted": r.covariate in study.covariates,
            }
            for r in checks.speed
        ],
        "balance": {
            "fill_fraction": checks.balance.fill_fraction,
            "fully_crossed": checks.balance.fully_crossed,
            "balanced": checks.balance.balanced,
        },
        "collinearity": {
            "measures": list(coll.names),
            "correlation": coll.correlation.tolist(),
            "vif": [float(v) if np.isfinite(v) else None for v in coll.vif],
            "same_thing_twice": [{"a": a, "b": b, "r": r} for a, b, r in coll.same_pairs],
        },
    }
    summary = design_summary(
        arena_codes, study.trials["subject_id"].to_numpy(), n_arenas=len(arena_ids)
    )
    design = {
        "arena_ids": [int(a) for a in arena_ids],
        "arena_names": [str(n) for n in study.arenas["arena_name"]],
        "subject_ids": [int(s) for s in subject_ids],
        "subject_labels": [
            study.labels.get("subject", {}).get(int(s), str(s)) for s in subject_ids
        ],
        "trial_counts": summary.counts.tolist(),
        "n_arenas": summary.n_arenas,
        "n_subjects": summary.n_subjects,
        "n_trials": summary.n_trials,
        "power": {
            "detectable_abs_spearman_rho": summary.detectable_rho,
            "alpha": summary.alpha,
            "power": summary.power,
            "method": summary.power_method,
        },
    }
    notes = list(checks.warnings)
    adjusted = [r for r in confounds["speed"] if r["confounded"] and r["adjusted"]]
    if adjusted:
        notes = [
            n.replace("; name it as a covariate.", f"; {SPEED_SCORE!r} is a covariate here.")
            for n in notes
        ]
    return confounds, design, notes


def rows_csv(rows: Sequence[dict[str, Any]]) -> str:
    """The report rows as CSV (contract columns first; empty cell for a missing value)."""
    buf = io.StringIO()
    fields = [*CONTRACT_FIELDS, *EXTRA_FIELDS]
    writer = csv.DictWriter(buf, fieldnames=fields, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: "" if row.get(k) is None else row[k] for k in fields})
    return buf.getvalue()
