"""The correspondence report: one self-contained HTML page with server-side figures.

``render_report(session=, store=, recipe=, study=)`` runs the correspondence
(``service.analysis.grid``) and assembles ``report.html``, limited to one study when ``study``
names one; ``GET /v1/correspondence/report`` serves the same page.
"""

from __future__ import annotations

from typing import Any

from service.report import convention as cv

# The report's modules (matplotlib, scipy.stats, the analysis layer) load on first use, so
# the web process starts without them; ``from service.report import NAME`` still works.
_LAZY = {
    "REPORT_CSP": "service.report.assemble",
    "build_report": "service.report.assemble",
    "design_warnings": "service.report.assemble",
    "strongest_pairs": "service.report.assemble",
    "StudyData": "service.report.study",
    "load_study": "service.report.study",
    "correspondence_view": "service.report.view",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'service.report' has no attribute {name!r}")


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
    from service.report.assemble import build_report, long_lived_frozen
    from service.report.study import load_study

    with long_lived_frozen():
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
