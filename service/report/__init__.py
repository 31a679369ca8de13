"""The correspondence report: one self-contained HTML page with server-side figures.

``render_report(session=, store=, recipe=, study=)`` runs the correspondence
(``service.analysis.grid``) and assembles ``report.html``, limited to one study when ``study``
names one; ``GET /v1/correspondence/report`` serves the same page.
"""

from __future__ import annotations

from typing import Any

from service.report import convention as cv
from service.report.assemble import REPORT_CSP, build_report, design_warnings, strongest_pairs
from service.report.study import StudyData, load_study
from service.report.view import correspondence_view

__all__ = [
    "REPORT_CSP",
    "StudyData",
    "build_report",
    "correspondence_view",
    "design_warnings",
    "load_study",
    "render_report",
    "strongest_pairs",
]


def render_report(
    *,
    session: Any,
    store: Any,
    recipe: str = "default",
    version: int | None = None,
    correspondence: dict[str, Any] | None = None,
    n_permutations: int = cv.N_PERMUTATIONS,
    n_boot: int = cv.N_BOOT,
    seed: int = cv.SEED,
    study: str | None = None,
) -> str:
    """Compute (unless given) the correspondence of ``recipe`` and return the report HTML.

    ``study``: a study name; counts, figures and correspondence then cover its arenas,
    subjects, trials and scans only (membership rule: ``storage.repo.studies``), and the
    summary names it. NotFound for an unknown study.
    """
    if correspondence is None:
        from service.report.cache import shared_correspondence

        correspondence = shared_correspondence(
            session=session,
            recipe=recipe,
            version=version,
            study=study,
            n_permutations=n_permutations,
            n_boot=n_boot,
            seed=seed,
        )
    data = load_study(session=session, recipe=recipe, study=study)
    return build_report(
        session=session, store=store, correspondence=correspondence, recipe=recipe, study=data
    )
