"""Expected movement on one arena's ground, from the study's arena-level fit.

For a recipe (and optionally a study), each movement measure is predicted at the arena's
terrain value from the other arenas' points (terrain value, subject-adjusted arena mean
movement); the arena itself is left out when it belongs to the study, so its own trials
never inform its prediction. The math is :func:`measures.predict_arena_movement`.

Terrain measure: the one named, else the representative of the largest group of
redundant terrain measures (:func:`measures.redundancy_groups`; ties: headline order).
The choice does not look at movement, so the prediction interval keeps its level (choosing
the terrain measure that best fits movement would make it too narrow).

Blocking; the route calls it through ``run_in_threadpool``.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from measures import (
    MIN_PREDICTION_ARENAS,
    arena_means_by_measure,
    not_estimable_reason,
    predict_arena_movement,
    redundancy_groups,
)
from service.analysis.tables import (
    HEADLINE_MEASURES,
    SCAN_POLICY,
    Selection,
    StudyTables,
    arena_terrain,
    clean_object,
    load_study,
)
from storage import repo
from storage.errors import BadInput

__all__ = ["EXPECTED_FIELDS", "expected_csv", "expected_movement", "expected_tables"]

#: Row fields (the first five are the contract), in CSV column order.
EXPECTED_FIELDS = (
    "movement_measure",
    "predicted",
    "pi_low",
    "pi_high",
    "n_arenas",
    "terrain_measure",
    "baseline_predicted",
    "baseline_pi_low",
    "baseline_pi_high",
    "note",
)


def _own_terrain(
    session: Session, recipe_hash: str, arena_id: int, tables: StudyTables, rule: str
) -> tuple[dict[str, float], list[dict[str, Any]]]:
    """The arena's terrain values and the scans they come from, by the study's scan policy.

    An arena of the study takes its row of the study table (the very value the grid, the
    report and the dashboard show); an arena outside it (scans but no trials) goes through
    the same :func:`arena_terrain` with the study's scan kind.
    """
    if arena_id in tables.arenas.index:
        row = tables.arenas.loc[arena_id]
        entry = next(e for e in tables.scan_policy["arenas"] if e["arena_id"] == arena_id)
        scans = [
            {"id": i, "kind": k} for i, k in zip(entry["scan_ids"], entry["kinds"], strict=True)
        ]
        return {m: float(row[m]) for m in tables.terrain_measures}, scans
    scans, scores = repo.arena_scan_scores(
        session=session, recipe_hash=recipe_hash, arena_id=arena_id
    )
    values: dict[int, dict[str, float]] = {}
    for scan_id, measure, value in scores:
        values.setdefault(int(scan_id), {})[measure] = math.nan if value is None else float(value)
    return arena_terrain(scans, values, rule, tables.scan_policy.get("kind"))


def _default_terrain_measure(study_arenas: Any, names: Sequence[str]) -> str | None:
    if not names:
        return None
    groups = redundancy_groups(study_arenas[list(names)].to_numpy(dtype=float), list(names))
    # ``measures`` resolves names lazily, so mypy sees them as Any: name the type here.
    best: str = max(groups, key=lambda g: len(g.members)).representative  # first wins ties
    return best


def expected_tables(
    *,
    session: Session,
    recipe_hash: str,
    movement_measures: Sequence[str] = (),
    study: str | None = None,
    scans: str = "latest",
) -> StudyTables:
    """The study tables :func:`expected_movement` fits from (the same for every arena)."""
    return load_study(
        session=session,
        recipe_hash=recipe_hash,
        selection=Selection(
            terrain_measures=("all",), movement_measures=tuple(movement_measures),
            scans=scans, study=study,
        ),
    )  # fmt: skip


def expected_movement(
    *,
    session: Session,
    recipe: str,
    arena_id: int,
    version: int | None = None,
    terrain_measure: str | None = None,
    movement_measures: Sequence[str] = (),
    study: str | None = None,
    scans: str = "latest",
    level: float = 0.95,
    tables: StudyTables | None = None,
) -> dict[str, Any]:
    """The movement the arena's ground predicts, as a JSON-ready dict (NaN as None).

    ``tables``: the study tables of :func:`expected_tables` for the same recipe, measures,
    study and scan rule, when the caller predicts several arenas (read, never modified).
    """
    prof = repo.get_recipe(session=session, name=recipe, version=version)
    arena = repo.get_arena(session=session, arena_id=arena_id)
    if tables is None:
        tables = expected_tables(
            session=session, recipe_hash=prof.hash, movement_measures=movement_measures,
            study=study, scans=scans,
        )  # fmt: skip
    own, own_scans = _own_terrain(session, prof.hash, arena_id, tables, scans)
    if not own:
        raise BadInput(f"arena {arena_id} has no scored scan under recipe {prof.name!r}")
    left_out = arena_id in set(tables.arenas.index)
    arenas = tables.arenas.drop(index=arena_id, errors="ignore")
    trials = tables.trials[tables.trials["arena_id"] != arena_id]
    warnings: list[str] = []
    if left_out:
        warnings.append(
            f"Arena {arena.name!r} belongs to the study: it is left out of the fit that "
            "predicts it."
        )
    order = [m for m in HEADLINE_MEASURES["terrain"] if m in arenas]
    order += [m for m in tables.terrain_measures if m not in order]
    usable = [
        m
        for m in order
        if math.isfinite(own.get(m, math.nan)) and not_estimable_reason(arenas[m]) is None
    ]
    if terrain_measure is None:
        # Chosen on terrain alone over all the study's arenas (this one too: its terrain is
        # known, its movement is not used), so every arena's panel uses the same measure,
        # among the grid's headline measures when any is usable.
        headline = [m for m in usable if m in HEADLINE_MEASURES["terrain"]]
        terrain_measure = _default_terrain_measure(tables.arenas, headline or usable)
        how = (
            "representative of the largest group of redundant "
            + ("headline " if headline else "")
            + "terrain measures across the study's arenas"
        )
    elif terrain_measure not in usable:
        raise BadInput(
            f"terrain measure {terrain_measure!r} is not usable for a prediction here (it "
            f"must be scored on this arena and vary across the study's arenas); usable: {usable}"
        )
    else:
        how = "named in the request"
    rows: list[dict[str, Any]] = []
    n_study = len(arenas)
    if terrain_measure is None:
        warnings.append(
            f"No prediction: no terrain measure is scored on this arena and varies across the "
            f"{n_study} other arenas of the study."
        )
    else:
        ids = arenas.index.to_numpy()
        x = arenas[terrain_measure].to_numpy(dtype=float)
        # The same two calls as measures.leave_one_arena_out (validated by it on the demo
        # and on simulated studies in bench/bench_prediction.py).
        means = arena_means_by_measure(
            trials[tables.movement_measures].to_numpy(dtype=float),
            np.searchsorted(ids, trials["arena_id"].to_numpy()),
            trials["subject_id"].to_numpy(),
            len(ids),
        )
        x0 = own[terrain_measure]
        pred = predict_arena_movement(x, means, x0, level=level)
        for j, name in enumerate(tables.movement_measures):
            rows.append(
                {
                    "movement_measure": name,
                    "predicted": pred.predicted[j],
                    "pi_low": pred.pi_low[j],
                    "pi_high": pred.pi_high[j],
                    "n_arenas": int(pred.n_arenas[j]),
                    "terrain_measure": terrain_measure,
                    "baseline_predicted": pred.baseline[j],
                    "baseline_pi_low": pred.baseline_low[j],
                    "baseline_pi_high": pred.baseline_high[j],
                    "note": pred.note[j],
                }
            )
        few = [
            f"{name!r} ({int(n)})"
            for name, n, note in zip(
                tables.movement_measures, pred.n_arenas, pred.note, strict=True
            )
            if "needed" in note
        ]
        if few:
            warnings.append(
                f"Too few arenas to predict {', '.join(few)}: arenas with values in brackets, "
                f"where at least {MIN_PREDICTION_ARENAS} are needed; those rows carry no "
                "prediction."
            )
        if any("extrapolation" in note for note in pred.note):
            warnings.append(
                f"This arena's {terrain_measure!r} ({x0:.4g}) lies outside the range of the "
                "study's arenas: the prediction is an extrapolation."
            )
    return clean_object(
        {
            "arena_id": arena.id,
            "arena_name": arena.name,
            "recipe": {"name": prof.name, "version": prof.version, "hash": prof.hash},
            "study": study,
            "terrain_measure": terrain_measure,
            "terrain_measure_choice": how,
            "terrain_value": None if terrain_measure is None else own[terrain_measure],
            "left_out": left_out,
            "n_arenas": n_study,
            "level": level,
            "rows": rows,
            "warnings": warnings,
            "scan_policy": {
                "rule": scans,
                "description": SCAN_POLICY[scans],
                "kind": tables.scan_policy.get("kind"),
                "scan_ids": [int(sc["id"]) for sc in own_scans],
                "scan_kinds": [str(sc["kind"]) for sc in own_scans],
            },
            "method": (
                "OLS of subject-adjusted arena mean movement on arena terrain over the study's "
                "other arenas; prediction interval for a new arena's mean, t with n - 2 df "
                "(Draper & Smith 1998, sec. 3.1). baseline_*: the same arenas' mean, ignoring "
                "terrain. Predicts the arena mean for a subject typical of the study, not a "
                "single trial."
            ),
        }
    )


def expected_csv(rows: Sequence[dict[str, Any]]) -> str:
    """The expected-movement rows as CSV (empty cell for a missing value)."""
    buf = io.StringIO()
    writer = csv.DictWriter(
        buf, fieldnames=list(EXPECTED_FIELDS), extrasaction="ignore", lineterminator="\n"
    )
    writer.writeheader()
    for row in rows:
        writer.writerow({k: "" if row.get(k) is None else row[k] for k in EXPECTED_FIELDS})
    return buf.getvalue()
