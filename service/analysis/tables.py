"""Study tables: score rows of one recipe and selection as an arena table and a trial table.

The one place that reads a study from storage for the analysis views (the correspondence
grid, expected movement, the analysis-table export, the report). One repository call,
:func:`storage.repo.load_study_rows`, reads trials (with arena and subject), the arenas'
scans and all their scores with every filter in SQL; nothing here queries per row.

Decisions (also in the report's ``notes``):

- Scan policy (:data:`SCAN_POLICY`, applied by :func:`arena_terrain` and nowhere else,
  for the study tables and for expected movement alike): an arena's terrain value comes
  from its *scored* scans. ``"latest"`` takes one scan: of the study's scan kind (the kind
  scored in the most of the study's arenas, ties to heightmaps; :func:`study_scan_kind`)
  where the arena has one, so every arena is measured by the same kind of capture (a
  heightmap and a point cloud of one tray disagree on the fine-scale measures), else of its
  other kind; then the latest by ``captured_at``, upload time and id. ``"mean"`` averages
  each measure over all scored scans (NaN ignored). The scans used per arena are returned
  in ``StudyTables.scan_policy`` and shown in every response; arenas measured by the other
  kind are named in a warning.
- Without a measure list, the headline measures (:data:`HEADLINE_MEASURES`); ``all`` means
  every scored measure except the diagnostics in :data:`DIAGNOSTIC_MEASURES`.
- Covariates are trial-level: any trial score or one of :data:`DERIVED_COVARIATES`.
- A study (``Selection.study``) limits arenas, subjects and trials to its members
  (:func:`storage.repo.trial_ids_in_study`).

Blocking; the routes call it through ``run_in_threadpool``.
"""

from __future__ import annotations

import math
from collections import Counter, defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import numpy as np
from sqlalchemy.orm import Session

from storage import repo
from storage.errors import BadInput

if TYPE_CHECKING:  # pandas is imported on first use: it adds 0.6 s to the server's start
    import pandas as pd

__all__ = [
    "COVARIATE_SCORES",
    "DERIVED_COVARIATES",
    "DIAGNOSTIC_MEASURES",
    "DIAGNOSTIC_SUFFIXES",
    "HEADLINE_MEASURES",
    "SCAN_POLICY",
    "SCAN_RULES",
    "Selection",
    "StudyTables",
    "arena_terrain",
    "choose_scans",
    "clean",
    "clean_object",
    "is_diagnostic",
    "load_study",
    "pick_measures",
    "scan_rank",
    "study_scan_kind",
]

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
        "heightmap_dx_m",
        "heightmap_hole_fraction",
        "hole_fraction",
        "flagged_frame_fraction",
        "spike_flagged_fraction",
        "up_axis_agrees",
        "causal_synchronised_fraction",
        "rqa_rr",  # fixed by the recipe's recurrence-rate threshold rule, not by the gait
    }
)
#: Name endings that mark a diagnostic too (fit quality, fitted bands, tie fractions).
DIAGNOSTIC_SUFFIXES = ("_r2", "_band_lo_m", "_band_hi_m", "_tie_fraction")


def is_diagnostic(name: str) -> bool:
    """Whether a score describes how a measure was computed (never paired)."""
    return name in DIAGNOSTIC_MEASURES or name.endswith(DIAGNOSTIC_SUFFIXES)


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
        "effective_complexity_2d_bits",
        "total_information_2d_bits_per_site",
    ),
    "movement": (
        "rqa_det",
        "rqa_lam",
        "entropy_rate_bits",
        "permutation_entropy",
        "js_complexity",
        "statistical_complexity_bits",
        "effective_complexity_bits_per_symbol",
        "total_information_bits_per_symbol",
        "sample_entropy",
        "duty_factor",
        "stride_frequency_hz",
    ),
}
SCAN_RULES = ("latest", "mean")
#: What each scan rule means, shown in every response that uses it.
SCAN_POLICY = {
    "latest": (
        "One scan per arena: among its scored scans, those of the study's scan kind (the "
        "kind scored in the most arenas; a tie goes to heightmap uploads) where it has one, "
        "so all arenas are measured the same way, else its other kind; then the latest by "
        "capture time, upload time and id."
    ),
    "mean": "Per arena, each measure averaged over all its scored scans (NaN ignored).",
}
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
    scan_policy: dict[str, Any] = field(default_factory=dict)

    def analysis_table(self) -> pd.DataFrame:
        """One row per trial with its arena's terrain values (terrain columns prefixed
        ``terrain:`` only where a name is also a movement measure)."""
        terrain = self.arenas[self.terrain_measures].rename(
            columns={c: f"terrain:{c}" for c in self.terrain_measures if c in self.trials}
        )
        return self.trials.join(terrain, on="arena_id")

    def export_table(self) -> pd.DataFrame:
        """The analysis table for other tools: study, arena and subject names first."""
        import pandas as pd

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


def pick_measures(available: Iterable[str], wanted: Sequence[str], kind: str) -> list[str]:
    """The measures a request covers: named ones, ``all`` (no diagnostics) or headline."""
    names = sorted(set(available))
    everything = [n for n in names if not is_diagnostic(n)]
    if tuple(wanted) == ("all",):
        return everything
    if not wanted:
        headline = [n for n in HEADLINE_MEASURES[kind] if n in names]
        return headline or everything
    missing = [w for w in wanted if w not in names]
    if missing:
        raise BadInput(f"no {kind} scores named {missing} under this recipe; scored: {names}")
    return list(dict.fromkeys(wanted))


_FLOOR = datetime.min.replace(tzinfo=UTC)


def _aware(value: datetime | None) -> datetime:
    # SQLite returns naive datetimes (stored as UTC); compare them as UTC so a scan with a
    # capture time and one without can be ranked together.
    if value is None:
        return _FLOOR
    return value if value.tzinfo is not None else value.replace(tzinfo=UTC)


def scan_rank(scan: dict[str, Any]) -> tuple[bool, datetime, datetime, int]:
    """Sort key of the scan policy within one kind choice: heightmaps, then the latest."""
    return (
        scan["kind"] == "heightmap",
        _aware(scan["captured_at"]),
        _aware(scan["created_at"]),
        int(scan["id"]),
    )


def study_scan_kind(scans_by_arena: Mapping[Any, Sequence[dict[str, Any]]]) -> str | None:
    """The scan kind scored in the most arenas (ties: heightmap); None without scans."""
    counts = Counter(
        kind for scans in scans_by_arena.values() for kind in {s["kind"] for s in scans}
    )
    if not counts:
        return None
    best: str = max(sorted(counts), key=lambda k: (counts[k], k == "heightmap"))
    return best


def choose_scans(
    scans: Sequence[dict[str, Any]], rule: str, kind: str | None = None
) -> list[dict[str, Any]]:
    """The scans of one arena that the policy ``rule`` uses (see :data:`SCAN_POLICY`).

    ``kind``: the study's scan kind (:func:`study_scan_kind`); ``"latest"`` takes a scan of
    that kind when the arena has one. Without it, heightmaps rank first.
    """
    if rule not in SCAN_RULES:
        raise BadInput(f"scans must be one of {SCAN_RULES}, got {rule!r}")
    if rule == "mean":
        return sorted(scans, key=scan_rank)
    same = [s for s in scans if s["kind"] == kind] or list(scans)
    return sorted(same, key=scan_rank)[-1:]


def arena_terrain(
    scans: Sequence[dict[str, Any]],
    values: Mapping[int, Mapping[str, float]],
    rule: str,
    kind: str | None,
) -> tuple[dict[str, float], list[dict[str, Any]]]:
    """One arena's terrain values under the scan policy, and the scans they come from.

    ``scans``: the arena's scans; ``values``: scan id -> measure -> value (NaN allowed);
    only scans with at least one score take part. The one function that turns scans into
    an arena's terrain value (study tables and expected movement).
    """
    scored = [s for s in scans if values.get(int(s["id"]))]
    if not scored:
        return {}, []
    used = choose_scans(scored, rule, kind)
    names = {m for s in used for m in values[int(s["id"])]}
    out: dict[str, float] = {}
    for name in names:
        finite = [v for s in used if math.isfinite(v := values[int(s["id"])].get(name, math.nan))]
        out[name] = float(np.mean(finite)) if finite else math.nan
    return out, used


def _nan(value: Any) -> float:
    return math.nan if value is None else float(value)


def load_study(*, session: Session, recipe_hash: str, selection: Selection) -> StudyTables:
    """Assemble the arena and trial tables for ``recipe_hash`` and ``selection``."""
    import pandas as pd

    study_id = (
        None
        if selection.study is None
        else repo.get_study_by_name(session=session, name=selection.study).id
    )
    rows = repo.load_study_rows(
        session=session,
        recipe_hash=recipe_hash,
        study_id=study_id,
        arena_ids=selection.arena_ids,
        subject_ids=selection.subject_ids,
        conditions=selection.conditions,
        trial_ids=selection.trial_ids,
    )
    values: dict[tuple[str, int], dict[str, float]] = defaultdict(dict)
    surrogate_of: dict[tuple[str, int], dict[str, float]] = defaultdict(dict)
    for kind, target, measure, value, z in rows.scores:
        values[(kind, target)][measure] = _nan(value)
        if z is not None:
            surrogate_of[(kind, target)][measure] = float(z)
    warnings: list[str] = []
    trials = rows.trials
    scans_by_arena: dict[int, list[dict[str, Any]]] = defaultdict(list)
    for scan in rows.scans:
        if values.get(("scan", scan["id"])):
            scans_by_arena[scan["arena_id"]].append(scan)
    scan_values = {t: v for (k, t), v in values.items() if k == "scan"}
    study_arenas = {t["arena_id"] for t in trials if values.get(("trial", t["id"]))}
    scan_kind = study_scan_kind({a: s for a, s in scans_by_arena.items() if a in study_arenas})
    terrain: dict[int, dict[str, float]] = {}
    used: dict[int, list[dict[str, Any]]] = {}
    for arena_id, arena_scans in scans_by_arena.items():
        terrain[arena_id], used[arena_id] = arena_terrain(
            arena_scans, scan_values, selection.scans, scan_kind
        )
    without = sorted({t["arena_id"] for t in trials} - set(terrain))
    if without:
        warnings.append(
            f"Arenas {without} have no scored scan under this recipe; their trials are left out."
        )
    trials = [t for t in trials if t["arena_id"] in terrain]
    unscored = [t["id"] for t in trials if not values.get(("trial", t["id"]))]
    if unscored:
        warnings.append(f"{len(unscored)} trials have no scores under this recipe (left out).")
    trials = [t for t in trials if values.get(("trial", t["id"]))]
    arena_ids = sorted({t["arena_id"] for t in trials})
    t_names = pick_measures(
        {m for a in arena_ids for m in terrain[a]}, selection.terrain_measures, "terrain"
    )
    scored_trial = {m for t in trials for m in values[("trial", t["id"])]}
    covariates = list(dict.fromkeys(selection.covariates))
    unknown = [c for c in covariates if c not in scored_trial and c not in DERIVED_COVARIATES]
    if unknown:
        raise BadInput(
            f"no covariate named {unknown}: use a trial score ({sorted(scored_trial)}) or one "
            f"of {list(DERIVED_COVARIATES)}"
        )
    m_names = pick_measures(
        scored_trial - set(covariates) if not selection.movement_measures else scored_trial,
        selection.movement_measures,
        "movement",
    )
    both = [m for m in m_names if m in covariates]
    if both:
        warnings.append(f"{both} named as covariates are not analysed as movement measures.")
        m_names = [m for m in m_names if m not in covariates]
    arena_name = {t["arena_id"]: t["arena_name"] for t in trials}
    arenas = pd.DataFrame(
        [
            {
                "arena_id": a,
                "arena_name": arena_name[a],
                "n_scans": len(used[a]),
                **{n: terrain[a].get(n, math.nan) for n in t_names},
            }
            for a in arena_ids
        ],
        columns=["arena_id", "arena_name", "n_scans", *t_names],
    ).set_index("arena_id")
    extra = [c for c in (*COVARIATE_SCORES, *covariates) if c in scored_trial]
    value_names = list(dict.fromkeys([*m_names, *extra]))
    table = pd.DataFrame(
        [
            {
                "trial_id": t["id"],
                "arena_id": t["arena_id"],
                "subject_id": t["subject_id"],
                "condition": t["condition"] or "",
                **{n: values[("trial", t["id"])].get(n, math.nan) for n in value_names},
            }
            for t in trials
        ],
        columns=["trial_id", "arena_id", "subject_id", "condition", *value_names],
    )
    derived = {
        "trial_duration_s": [
            t["n_frames"] / t["frame_rate_hz"] if t["n_frames"] and t["frame_rate_hz"] else math.nan
            for t in trials
        ],
        "body_length_m": [_nan(t["body_length_m"]) for t in trials],
        "mass_kg": [_nan(t["mass_kg"]) for t in trials],
        "treadmill_speed_m_s": [_nan(t["treadmill_speed_m_s"]) for t in trials],
    }
    for name, column in derived.items():
        table[name] = np.asarray(column, dtype=float)
    labels = {"subject": {t["subject_id"]: t["subject_label"] for t in trials}}
    surrogate: dict[tuple[str, str], list[float]] = defaultdict(list)
    targets = [("scan", s["id"]) for a in arena_ids for s in used[a]]
    targets += [("trial", t["id"]) for t in trials]
    for key in targets:
        for name, z in surrogate_of.get(key, {}).items():
            surrogate[(key[0], name)].append(z)
    other = [a for a in arena_ids if any(s["kind"] != scan_kind for s in used[a])]
    if selection.scans == "latest" and other:
        warnings.append(
            f"Arenas {[str(arena_name[a]) for a in other]} have no scored {scan_kind} scan: their "
            f"terrain values come from another kind of scan than the other arenas', which "
            "can shift the fine-scale measures."
        )
    policy = {
        "rule": selection.scans,
        "description": SCAN_POLICY[selection.scans],
        "kind": scan_kind,
        "arenas": [
            {
                "arena_id": int(a),
                "scan_ids": [int(s["id"]) for s in used[a]],
                "kinds": [s["kind"] for s in used[a]],
            }
            for a in arena_ids
        ],
    }
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
        scan_policy=policy,
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


def clean_object(value: dict[str, Any]) -> dict[str, Any]:
    """:func:`clean` for a JSON object (a view's answer), typed as one."""
    return {k: clean(v) for k, v in value.items()}
