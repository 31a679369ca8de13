"""The correspondence grid: study tables in, the correspondence report (a JSON-ready dict) out.

The study tables come from :mod:`service.analysis.tables` (one storage call, the scan policy);
this module decides which pairs are estimable, folds redundant measures, fits the grid with
:func:`measures.correspondence_grid`, attaches warnings to the measures they concern and
adds what a main-result figure needs.

Decisions (also in the report):

- **Arena-level inference.** ``slope``, ``ci_low``, ``ci_high`` are the arena-level slope
  and its t interval (:func:`measures.arena_slope`): one point per arena, the arena being the
  unit of replication. The trial-level mixed model is reported as ``trial_slope``,
  ``trial_ci_low``, ``trial_ci_high``, ``mixed_p_value``, labelled, never the main band.
- **Only estimable rows.** A measure with fewer than 3 arenas with values, or whose arena
  values span less than :data:`measures.MIN_RELATIVE_SPREAD` of their size, gets no row; it
  is listed in ``not_estimable`` with the reason.
- **Redundant measures folded.** Measures whose arena values correlate with
  ``|r| >= measures.REDUNDANT_ABS_R`` form a group (:func:`measures.redundancy_groups`);
  the grid fits and corrects (BH) only each group's representative, and the row lists the
  group (``terrain_group``, ``movement_group``).
- **Warnings name their measures.** Study-level warnings use the arenas the grid rests on;
  a measure defined in fewer arenas gets its own warning with its own count.
- Each pair uses the arenas and trials where both values are finite; pairs sharing the same
  rows are fitted in one call; q-values are computed across the whole grid afterwards.

Everything here is blocking; the routes call it through ``run_in_threadpool``.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections import defaultdict
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy.orm import Session

from measures import (
    MIN_RELATIVE_SPREAD,
    REDUNDANT_ABS_R,
    arena_movement_means,
    complexity_entropy_bounds,
    confound_checks,
    correspondence_grid,
    design_summary,
    fit_band,
    not_estimable_reason,
    redundancy_groups,
)
from measures.correspondence.inference import MIN_ARENAS, MIN_SUBJECTS, benjamini_hochberg
from measures.correspondence.multivariate import first_canonical_correlation
from measures.errors import InsufficientDataError, InvalidParameterError
from measures.information.mutual_info import ksg_mutual_information
from service.analysis.tables import (
    COVARIATE_SCORES,
    DERIVED_COVARIATES,
    DIAGNOSTIC_MEASURES,
    HEADLINE_MEASURES,
    Selection,
    StudyTables,
    clean,
    clean_object,
    load_study,
)
from storage import repo
from storage.errors import BadInput

__all__ = [
    "CONTRACT_FIELDS",
    "COVARIATE_SCORES",
    "DERIVED_COVARIATES",
    "DIAGNOSTIC_MEASURES",
    "EXTRA_FIELDS",
    "HEADLINE_MEASURES",
    "Selection",
    "StudyTables",
    "clean",
    "correspondence_report",
    "fit_grid",
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
#: Further scalar row fields (CSV columns after the contract ones).
EXTRA_FIELDS = (
    "slope_se",
    "slope_df",
    "spearman_ci_low",
    "spearman_ci_high",
    "spearman_p_value",
    "trial_slope",
    "trial_ci_low",
    "trial_ci_high",
    "mixed_p_value",
)
#: Fewest arenas for a row (an arena-level slope needs a residual degree of freedom).
MIN_ROW_ARENAS = 3

#: The covariate the speed-vs-terrain confound check uses.
SPEED_SCORE = "speed_m_s"
#: Surrogate z-scores inside +-2 mean the value is within the spread of structureless
#: surrogates (two-sided ~95 %, common practice); "most" is more than half the targets.
SURROGATE_Z = 2.0
PLANE_MEASURES = {
    "scan": ("permutation_entropy_2d", "js_complexity_2d"),
    "trial": ("permutation_entropy", "js_complexity"),
}


def _codes(values: pd.Series) -> np.ndarray:
    return np.unique(values.to_numpy(), return_inverse=True)[1].astype(np.intp)


def _warning(
    message: str, scope: str, measures: Sequence[str] = (), n_arenas: int | None = None
) -> dict[str, Any]:
    """A warning with what it concerns: scope "study", "measure" or "pair"."""
    return {"message": message, "scope": scope, "measures": list(measures), "n_arenas": n_arenas}


def _smallest_p(n_arenas: int) -> str:
    return f"{2 / math.factorial(n_arenas):.3g}" if n_arenas <= 12 else "tiny"


def _figure(
    study: StudyTables,
    arenas: np.ndarray,
    trials: pd.DataFrame,
    t_cols: list[str],
    m_cols: list[str],
) -> dict[tuple[str, str], dict[str, Any]]:
    """Per pair: subject-adjusted arena means with intervals, and the arena-level line."""
    codes = np.searchsorted(arenas, trials["arena_id"].to_numpy())
    means = arena_movement_means(
        trials[m_cols].to_numpy(dtype=float), codes, trials["subject_id"].to_numpy(),
        n_arenas=len(arenas),
    )  # fmt: skip
    names = study.arenas.loc[arenas, "arena_name"].tolist()
    out = {}
    for t in t_cols:
        x = study.arenas.loc[arenas, t].to_numpy(dtype=float)
        for j, m in enumerate(m_cols):
            points = [
                {
                    "arena_id": int(a),
                    "arena_name": str(names[k]),
                    "terrain": float(x[k]),
                    "movement": float(means.mean[k, j]),
                    "movement_ci_low": float(means.ci_low[k, j]),
                    "movement_ci_high": float(means.ci_high[k, j]),
                    "n_trials": int(means.n_trials[k]),
                    "n_subjects": int(means.n_subjects[k]),
                }
                for k, a in enumerate(arenas)
            ]
            line = fit_band(x, means.mean[:, j])
            if line is not None and study.covariates:
                line["note"] = (
                    "marginal line through the arena means; the row's slope is adjusted "
                    f"for {study.covariates}"
                )
            out[(t, m)] = {"arena_points": points, "fit_line": line}
    return out


def _fit_block(
    study: StudyTables,
    t_cols: list[str],
    m_cols: list[str],
    arena_ok: np.ndarray,
    trial_ok: np.ndarray,
    params: dict[str, Any],
) -> tuple[list[dict[str, Any]], list[dict[str, Any]], int, bool]:
    """Rows of one block of pairs sharing arenas and trials, or why they are not estimable."""
    arenas = study.arenas.index.to_numpy()[arena_ok]
    trials = study.trials[trial_ok & study.trials["arena_id"].isin(arenas).to_numpy()]
    arenas = np.array(sorted(set(trials["arena_id"])))
    counts = (len(arenas), int(trials["subject_id"].nunique()), len(trials))
    need = MIN_ROW_ARENAS + len(study.covariates)
    reason = None
    if counts[0] < need:
        reason = f"only {counts[0]} arena(s) have values of both measures; {need} are needed"
    if study.covariates:
        params = {
            **params,
            "covariates": trials[study.covariates].to_numpy(dtype=float),
            "covariate_names": study.covariates,
        }
    if reason is None:
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
            reason = f"not estimable with these arenas and trials: {exc}"
    if reason is not None:
        missing = [
            {"terrain_measure": t, "movement_measure": m, "reason": reason, "n_arenas": counts[0]}
            for t in t_cols
            for m in m_cols
        ]
        return [], missing, 0, True
    figure = _figure(study, arenas, trials, t_cols, m_cols)
    rows = []
    for r in grid.rows:
        row = {f: getattr(r, f) for f in (*CONTRACT_FIELDS, *EXTRA_FIELDS)}
        row["ci_method"] = "arena"
        row.update(figure[(r.terrain_measure, r.movement_measure)])
        rows.append(row)
    return rows, [], grid.n_permutations, grid.exact_permutations


def _group_columns(frame: pd.DataFrame, names: list[str]) -> dict[bytes, list[str]]:
    groups: dict[bytes, list[str]] = defaultdict(list)
    for name in names:
        groups[np.isfinite(frame[name].to_numpy(dtype=float)).tobytes()].append(name)
    return groups


def _group_dicts(groups: Sequence[Any]) -> list[dict[str, Any]]:
    return [
        {
            "representative": g.representative,
            "members": list(g.members),
            "min_abs_r": g.min_abs_r,
            "n_arenas": g.n_arenas,
        }
        for g in groups
        if len(g.members) > 1
    ]


def fit_grid(
    study: StudyTables, *, n_permutations: int = 9999, n_boot: int = 1999, seed: int = 0
) -> dict[str, Any]:
    """Fit the estimable, folded grid.

    Returns
    -------
    dict
        ``rows`` (contract fields, extras, figure data), ``not_estimable``, ``groups``
        (``{"terrain": [...], "movement": [...]}``), ``warning_details``,
        ``n_permutations``, ``exact_permutations``.
    """
    params: dict[str, Any] = {"n_permutations": n_permutations, "n_boot": n_boot, "seed": seed}
    need = MIN_ROW_ARENAS + len(study.covariates)
    movement_means = _arena_movement_means(study).reindex(study.arenas.index)
    not_estimable: list[dict[str, Any]] = []
    live: dict[str, list[str]] = {"terrain": [], "movement": []}
    for side, frame, names in (
        ("terrain", study.arenas, study.terrain_measures),
        ("movement", movement_means, study.movement_measures),
    ):
        for name in names:
            col = frame[name].to_numpy(dtype=float)
            reason = not_estimable_reason(col, min_arenas=need)
            if reason is None:
                live[side].append(name)
                continue
            not_estimable.append(
                {
                    "terrain_measure": name if side == "terrain" else None,
                    "movement_measure": name if side == "movement" else None,
                    "reason": f"{side} measure {name!r}: {reason}",
                    "n_arenas": int(np.isfinite(col).sum()),
                }
            )
    # Headline measures first, so a group is represented by the measure people know.
    for side in live:
        first = [m for m in HEADLINE_MEASURES[side] if m in live[side]]
        live[side] = first + [m for m in live[side] if m not in first]
    groups = {
        "terrain": redundancy_groups(
            study.arenas[live["terrain"]].to_numpy(dtype=float), live["terrain"]
        ),
        "movement": redundancy_groups(
            movement_means[live["movement"]].to_numpy(dtype=float), live["movement"]
        ),
    }
    members = {side: {g.representative: list(g.members) for g in gs} for side, gs in groups.items()}
    reps = {side: [g.representative for g in gs] for side, gs in groups.items()}
    rows: list[dict[str, Any]] = []
    n_perm, exact = 0, True
    for a_key, t_cols in _group_columns(study.arenas, reps["terrain"]).items():
        arena_ok = np.frombuffer(a_key, dtype=bool)
        for m_key, m_cols in _group_columns(study.trials, reps["movement"]).items():
            trial_ok = np.frombuffer(m_key, dtype=bool)
            block, missing, used, was_exact = _fit_block(
                study, t_cols, m_cols, arena_ok, trial_ok, params
            )
            rows += block
            not_estimable += missing
            if block:
                n_perm, exact = max(n_perm, used), exact and was_exact
    order = {
        (t, m): k
        for k, (t, m) in enumerate((t, m) for t in reps["terrain"] for m in reps["movement"])
    }
    rows.sort(key=lambda r: order[(r["terrain_measure"], r["movement_measure"])])
    q = benjamini_hochberg([r["p_value"] for r in rows])
    for r, qv in zip(rows, q, strict=True):
        r["q_value"] = float(qv)
        r["terrain_group"] = members["terrain"][r["terrain_measure"]]
        r["movement_group"] = members["movement"][r["movement_measure"]]
    details = _grid_warnings(study, rows, groups)
    return {
        "rows": rows,
        "not_estimable": not_estimable,
        "groups": {side: _group_dicts(gs) for side, gs in groups.items()},
        "warning_details": details,
        "n_permutations": n_perm,
        "exact_permutations": exact,
    }


def _grid_warnings(
    study: StudyTables, rows: list[dict[str, Any]], groups: dict[str, Sequence[Any]]
) -> list[dict[str, Any]]:
    """Study-level warnings from the arenas the grid rests on; per-measure ones named."""
    out: list[dict[str, Any]] = []
    if not rows:
        return out
    n_study = max(r["n_arenas"] for r in rows)
    in_grid = sorted({r["terrain_measure"] for r in rows} | {r["movement_measure"] for r in rows})
    if n_study < MIN_ARENAS:
        out.append(
            _warning(
                f"Only {n_study} arenas carry the grid's measures: the arena is the unit of "
                f"replication for terrain, and fewer than {MIN_ARENAS} give fragile slopes and "
                f"coarse permutation p-values (smallest possible two-sided p = "
                f"{_smallest_p(n_study)}).",
                "study",
                in_grid,
                n_study,
            )
        )
    n_subjects = int(study.trials["subject_id"].nunique())
    if n_subjects < MIN_SUBJECTS:
        out.append(
            _warning(
                f"Only {n_subjects} subjects: subject effects are poorly estimated and results "
                "may not generalise beyond these animals.",
                "study",
                in_grid,
                n_study,
            )
        )
    per_subject = study.trials.groupby("subject_id")["arena_id"].nunique()
    if per_subject.max() <= 1:
        out.append(
            _warning(
                "Every subject walked a single arena: subject and arena are confounded, so a "
                "terrain effect cannot be told apart from differences between animals.",
                "study",
                in_grid,
                n_study,
            )
        )
    for side, key in (("Terrain", "terrain_measure"), ("Movement", "movement_measure")):
        counts: dict[str, int] = {}
        for r in rows:
            counts[r[key]] = max(counts.get(r[key], 0), r["n_arenas"])
        for name, n in counts.items():
            if n < n_study:
                out.append(
                    _warning(
                        f"{side} measure {name!r} has values in {n} of {n_study} arenas: its "
                        f"rows rest on {n} arenas (smallest possible permutation p = "
                        f"{_smallest_p(n)}).",
                        "measure",
                        [name],
                        n,
                    )
                )
    for side, gs in groups.items():
        for g in gs:
            if len(g.members) > 1:
                out.append(
                    _warning(
                        f"{side.capitalize()} measures {list(g.members)} are one finding across "
                        f"{g.n_arenas} arenas (|r| >= {REDUNDANT_ABS_R:g}, smallest "
                        f"{g.min_abs_r:.3f}): shown and corrected once, as {g.representative!r}.",
                        "measure",
                        list(g.members),
                        g.n_arenas,
                    )
                )
    return out


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


def multivariate_summary(
    study: StudyTables,
    *,
    terrain: Sequence[str] | None = None,
    movement: Sequence[str] | None = None,
    seed: int = 0,
) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """First canonical correlation and KSG mutual information of arena-level vectors.

    Uses the given measures (default: all of the study's) that have values in every arena
    the others have: a measure defined on fewer arenas would shrink the whole summary to
    its arenas; it is left out and named in a warning.
    """
    t_names = list(study.terrain_measures if terrain is None else terrain)
    m_names = list(study.movement_measures if movement is None else movement)
    means = _arena_movement_means(study).reindex(study.arenas.index)
    frame = pd.concat([study.arenas[t_names], means[m_names].add_prefix("movement:")], axis=1)
    counts = frame.notna().sum()
    full = int(counts.max()) if len(counts) else 0
    short = [str(c).removeprefix("movement:") for c in frame if counts[c] < full]
    both = frame.loc[:, counts == full].dropna()
    both = both.loc[:, both.std(ddof=0) > 0]
    t_cols = [c for c in both if not str(c).startswith("movement:")]
    m_cols = [c for c in both if str(c).startswith("movement:")]
    n, k = len(both), len(t_cols) + len(m_cols)
    used = t_cols + [c.removeprefix("movement:") for c in m_cols]
    out: dict[str, Any] = {"method": "cca", "n_arenas": n, "n_variables": k, "measures": used}
    notes: list[dict[str, Any]] = []
    if short:
        notes.append(
            _warning(
                f"Multivariate summary leaves out {short}: they have values in fewer than the "
                f"{full} arenas the other measures have.",
                "measure",
                short,
                full,
            )
        )
    if n < 3 or not t_cols or not m_cols:
        notes.append(
            _warning(
                f"Multivariate summary skipped: {n} arenas with every measure of {used}, or a "
                "side without variance.",
                "study",
                used,
                n,
            )
        )
        return out | {"first_canonical_correlation": None}, notes
    x, y = both[t_cols].to_numpy(float), both[m_cols].to_numpy(float)
    cca = first_canonical_correlation(x, y, seed=seed)
    if cca.degenerate:
        notes.append(
            _warning(
                f"Canonical correlation is meaningless here: {n} arenas for {k} variables "
                f"({used}; n_arenas <= number of variables always gives 1); select fewer "
                "measures.",
                "study",
                used,
                n,
            )
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
    return out, notes


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
    grid = fit_grid(study, n_permutations=n_permutations, n_boot=n_boot, seed=seed)
    rows = grid["rows"]
    reps_t = list(dict.fromkeys(r["terrain_measure"] for r in rows))
    reps_m = list(dict.fromkeys(r["movement_measure"] for r in rows))
    multi, multi_notes = multivariate_summary(study, terrain=reps_t, movement=reps_m, seed=seed)
    names = set(study.terrain_measures) | set(study.movement_measures)
    plane = {m for v in PLANE_MEASURES.values() for m in v}
    confounds, design, confound_notes = confounds_and_design(study, reps_t)
    # The groups say what "same thing twice" said, and act on it.
    confound_notes = [n for n in confound_notes if "same thing twice" not in n]
    details = [_warning(w, "study") for w in study.warnings]
    details += grid["warning_details"]
    details += [
        _warning(w, "measure", _named(w, names | plane))
        for w in surrogate_warnings(study, names | plane)
    ]
    details += multi_notes
    details += [_warning(w, "study", _named(w, names)) for w in confound_notes]
    unique: dict[str, dict[str, Any]] = {}
    for d in details:
        unique.setdefault(d["message"], d)  # the first of a repeated message wins
    details = list(unique.values())
    _plane_values(study, session, prof.hash, selection)
    report = {
        "recipe": {"name": prof.name, "version": prof.version, "hash": prof.hash},
        "scans": selection.scans,
        "scan_policy": study.scan_policy,
        "rows": rows,
        "warnings": [d["message"] for d in details],
        "warning_details": details,
        "not_estimable": grid["not_estimable"],
        "groups": grid["groups"],
        "group_threshold_r": REDUNDANT_ABS_R,
        "min_relative_spread": MIN_RELATIVE_SPREAD,
        "n_arenas": len(study.arenas),
        "n_subjects": int(study.trials["subject_id"].nunique()),
        "n_trials": len(study.trials),
        "n_permutations": grid["n_permutations"],
        "exact_permutations": grid["exact_permutations"],
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
        "methods": {
            "slope": (
                "arena-level: OLS of subject-adjusted arena mean movement on arena terrain, "
                "t interval with n_arenas - 2 (- covariates) degrees of freedom"
            ),
            "p_value": "arena-level permutation test (exact enumeration when n_arenas! is small)",
            "spearman_p_value": "exact permutation below 10 arenas, t approximation from 10",
            "trial_slope": (
                "trial-level mixed model, subject intercept only (reference; too narrow when "
                "arenas differ by more than terrain)"
            ),
        },
    }
    return clean_object(report)


def _named(message: str, names: set[str]) -> list[str]:
    """Measures a message names in quotes."""
    quoted = set(re.findall(r"'([^']+)'", message))
    return sorted(quoted & names)


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


def confounds_and_design(
    study: StudyTables, terrain_measures: Sequence[str] | None = None
) -> tuple[dict[str, Any], dict[str, Any], list[str]]:
    """Confound checks (speed vs terrain, balance, collinearity) and the design table.

    ``terrain_measures``: the ones checked (default: all of the study's); the grid passes
    its estimable group representatives, so a folded group counts once and a measure
    defined on a few arenas does not shrink the arenas the VIFs are computed on.
    """
    names = list(study.terrain_measures if terrain_measures is None else terrain_measures)
    arena_ids = study.arenas.index.to_numpy()
    arena_codes = np.searchsorted(arena_ids, study.trials["arena_id"].to_numpy())
    subject_ids = np.array(sorted(set(study.trials["subject_id"])))
    terrain = study.arenas[names].to_numpy(dtype=float).reshape(len(arena_ids), len(names))
    speed = study.trials[SPEED_SCORE].to_numpy(dtype=float) if SPEED_SCORE in study.trials else None
    checks = confound_checks(
        terrain,
        arena_codes,
        study.trials["subject_id"].to_numpy(),
        terrain_names=names,
        speed=speed,
        covariate_name=SPEED_SCORE,
    )
    coll = checks.collinearity
    confounds: dict[str, Any] = {
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
            "vif_defined": coll.vif_defined,
            "n_arenas": coll.n_arenas,
            "pairs": [{"a": a, "b": b, "r": r} for a, b, r in coll.pairs_by_abs_r()],
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
    fields = [*CONTRACT_FIELDS, *EXTRA_FIELDS, "terrain_group", "movement_group"]
    writer = csv.DictWriter(buf, fieldnames=fields, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for row in rows:
        out = {k: "" if row.get(k) is None else row[k] for k in fields}
        for k in ("terrain_group", "movement_group"):
            out[k] = ";".join(row.get(k) or [])
        writer.writerow(out)
    return buf.getvalue()
