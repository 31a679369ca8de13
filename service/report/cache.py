"""The correspondence both views show, computed once per state of the store.

The report and the dashboard ask ``shared_correspondence`` with the same settings
(``service.report.convention``); the answer is kept in memory, keyed by the settings and a
fingerprint of the store (counts and largest ids of scores, trials, scans, arenas, subjects
and studies, and the latest job update), so a second view of an unchanged store shows the
very same numbers without waiting for the permutation test again.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Any

from sqlalchemy import func, select

from service.report import convention as cv

__all__ = ["clear", "shared_correspondence"]

_MAX = 16
_lock = threading.Lock()
_cache: OrderedDict[tuple[Any, ...], dict[str, Any]] = OrderedDict()


def _fingerprint(session: Any) -> tuple[Any, ...]:
    from storage import models as m

    parts: list[Any] = []
    for table in (m.Score, m.Trial, m.Scan, m.Arena, m.Subject, m.Study):
        parts += list(session.execute(select(func.count(table.id), func.max(table.id))).one())
    parts += list(session.execute(select(func.count(m.Job.id), func.max(m.Job.updated_at))).one())
    # Study membership changes the selection without touching the rows above.
    for name in ("study_arenas", "study_subjects", "study_trials"):
        t = m.Base.metadata.tables.get(name)
        if t is not None:
            parts.append(session.execute(select(func.count()).select_from(t)).scalar())
    return tuple(str(p) for p in parts)


def clear() -> None:
    with _lock:
        _cache.clear()


def shared_correspondence(
    *,
    session: Any,
    recipe: str = "default",
    version: int | None = None,
    study: str | None = None,
    terrain_measures: tuple[str, ...] = (),
    movement_measures: tuple[str, ...] = (),
    n_permutations: int = cv.N_PERMUTATIONS,
    n_boot: int = cv.N_BOOT,
    seed: int = cv.SEED,
) -> dict[str, Any]:
    """``service.analysis.grid.correspondence_report`` under the shared settings, cached."""
    from service.analysis.grid import Selection, correspondence_report

    key = (
        str(session.get_bind().url),
        recipe,
        version,
        study,
        terrain_measures,
        movement_measures,
        n_permutations,
        n_boot,
        seed,
        cv.SCAN_POLICY,
        _fingerprint(session),
    )
    with _lock:
        if key in _cache:
            _cache.move_to_end(key)
            return _cache[key]
    result = correspondence_report(
        session=session,
        recipe=recipe,
        version=version,
        selection=Selection(
            study=study,
            scans=cv.SCAN_POLICY,
            terrain_measures=terrain_measures,
            movement_measures=movement_measures,
        ),
        n_permutations=n_permutations,
        n_boot=n_boot,
        seed=seed,
    )
    with _lock:
        _cache[key] = result
        while len(_cache) > _MAX:
            _cache.popitem(last=False)
    return result
