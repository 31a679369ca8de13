"""``gaitscape check``: verify the artifact store against the database, and optionally repair.

What is looked at:

* every artifact a scan or trial row names (raw upload, heightmap, validity mask, preprocessed
  array) exists and still hashes to its name ("missing", "corrupt");
* every object in the store is named by some row ("orphan");
* the staging area holds no leftover partial uploads ("staging");
* no job is ``running`` with a lease that ran out ("stuck_job": its runner died);
* every scan and trial has at least one job ("no_job": a record stored without its first
  job, by a server older than the one-transaction upload, or a hand-made one).

``repair=True`` removes orphans and staging leftovers older than ``grace_s`` (a live server's
upload in flight is younger than that and is left alone) and hands stuck jobs back to the queue
through ``fail_job``, which spends the attempt the dead runner claimed, so a job that kills
its server every time still ends ``failed``; records without a job get a scoring job queued.
Rows whose file is missing or corrupt are only reported: a row may be the one record of a
recording that cannot be made again.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the command imports the database layer only when it runs
    from sqlalchemy.orm import Session

    from storage.artifacts import ArtifactStore

from service.console import format_table, settings_from_args

__all__ = ["PROBLEM_KINDS", "CheckReport", "Problem", "check_store", "register_check"]

#: Problem kinds, in report order. The first two are damage that repair cannot undo.
PROBLEM_KINDS = ("missing", "corrupt", "orphan", "staging", "stuck_job", "no_job")
DEFAULT_GRACE_S = 600.0


@dataclass(frozen=True)
class Problem:
    """One finding: its kind, what it concerns, and what repair did about it."""

    kind: str
    subject: str  # "scan 3 heightmap_sha256", "artifact ab12...", "job 7", a staging path
    detail: str
    repaired: bool = False


@dataclass
class CheckReport:
    """The outcome of one check: counts of what was examined and every problem found."""

    rows_checked: int = 0
    artifacts_checked: int = 0
    jobs_checked: int = 0
    problems: list[Problem] = field(default_factory=list)

    @property
    def clean(self) -> bool:
        """True when nothing at all was found."""
        return not self.problems

    @property
    def damaged(self) -> bool:
        """True when a row's file is missing or corrupt (repair cannot fix that)."""
        return any(p.kind in ("missing", "corrupt") for p in self.problems)

    def count(self, kind: str, *, repaired: bool | None = None) -> int:
        return sum(
            1
            for p in self.problems
            if p.kind == kind and (repaired is None or p.repaired == repaired)
        )

    def table(self) -> str:
        """A plain table: one line per problem kind, then the problems themselves."""

        rows = [("check", "found", "repaired")]
        for kind in PROBLEM_KINDS:
            rows.append((kind, str(self.count(kind)), str(self.count(kind, repaired=True))))
        head = (
            f"{self.rows_checked} artifact references, {self.artifacts_checked} stored objects, "
            f"{self.jobs_checked} running jobs examined"
        )
        out = [head, format_table(rows)]
        if self.problems:
            detail = [("kind", "what", "detail", "repaired")]
            detail += [
                (p.kind, p.subject, p.detail, "yes" if p.repaired else "no") for p in self.problems
            ]
            out += ["", format_table(detail)]
        out.append("store is clean" if self.clean else "problems found")
        return "\n".join(out)


# Columns that name artifacts, per row type. Score.input_sha256 is the hash of the input a
# score came from (already covered by these), and Token.secret_sha256 is no artifact at all.
_ARTIFACT_COLUMNS = {
    "scan": ("sha256", "heightmap_sha256", "valid_mask_sha256"),
    "trial": ("sha256", "preprocessed_sha256"),
    "derived": ("sha256",),  # plot arrays and per-window measures a scoring job stored
}


def _references(session: Session) -> Iterable[tuple[str, int, str, str]]:
    """``(kind, row id, column, sha256)`` for every artifact a row names."""
    from sqlalchemy import select

    from storage.models import Derived, Scan, Trial

    for kind, model in (("scan", Scan), ("trial", Trial), ("derived", Derived)):
        columns = _ARTIFACT_COLUMNS[kind]
        stmt = select(model.id, *(getattr(model, c) for c in columns)).order_by(model.id)
        for row_id, *shas in session.execute(stmt):
            for column, sha in zip(columns, shas, strict=True):
                if sha:
                    yield kind, int(row_id), column, str(sha)


def _old_enough(path: Path, *, now: float, grace_s: float) -> bool:
    try:
        return now - path.stat().st_mtime >= grace_s
    except FileNotFoundError:
        return False


def _check_rows(
    session: Session, store: ArtifactStore, report: CheckReport, *, verify: bool
) -> set[str]:
    referenced: set[str] = set()
    verified: dict[str, bool] = {}
    for kind, row_id, column, sha in _references(session):
        report.rows_checked += 1
        referenced.add(sha)
        subject = f"{kind} {row_id} {column}"
        if not store.exists(sha):
            report.problems.append(Problem("missing", subject, f"no artifact {sha}"))
            continue
        if verify:
            if sha not in verified:
                verified[sha] = store.verify(sha)
            if not verified[sha]:
                report.problems.append(
                    Problem("corrupt", subject, f"artifact {sha} no longer hashes to its name")
                )
    return referenced


def _check_orphans(
    store: ArtifactStore,
    referenced: set[str],
    report: CheckReport,
    *,
    repair: bool,
    now: float,
    grace_s: float,
) -> None:
    for sha in store.iter_shas():
        report.artifacts_checked += 1
        if sha in referenced:
            continue
        path = store.path(sha)
        fixed = False
        if repair and _old_enough(path, now=now, grace_s=grace_s):
            fixed = store.remove(sha)
        detail = f"{store.size(sha) if not fixed else 'removed'}; no row names it"
        report.problems.append(Problem("orphan", f"artifact {sha}", detail, fixed))


def _check_staging(
    store: ArtifactStore, report: CheckReport, *, repair: bool, now: float, grace_s: float
) -> None:
    import shutil

    for path in sorted(store.tmp_dir.iterdir()):
        fixed = False
        if repair and _old_enough(path, now=now, grace_s=grace_s):
            if path.is_dir():
                shutil.rmtree(path, ignore_errors=True)
            else:
                path.unlink(missing_ok=True)
            fixed = not path.exists()
        report.problems.append(
            Problem("staging", str(path.relative_to(store.root)), "partial upload left", fixed)
        )


def _check_jobs(session: Session, report: CheckReport, *, repair: bool) -> None:
    from sqlalchemy import select

    from storage import repo
    from storage.models import Job, utcnow

    now = utcnow()
    running = list(session.scalars(select(Job).where(Job.state == "running").order_by(Job.id)))
    report.jobs_checked = len(running)
    for job in running:
        lease = job.lease_until
        if lease is not None and lease.tzinfo is None:  # SQLite hands back naive UTC
            from datetime import UTC

            lease = lease.replace(tzinfo=UTC)
        if lease is not None and lease >= now:
            continue
        fixed = False
        if repair:
            job = repo.fail_job(
                session=session, job_id=job.id, error="lease expired: its runner stopped"
            )
            fixed = True
        detail = f"lease ran out at {lease.isoformat() if lease else 'never set'}"
        if fixed:
            detail += f"; now {job.state}"
        report.problems.append(Problem("stuck_job", f"job {job.id}", detail, fixed))


def _check_jobless(session: Session, report: CheckReport, *, repair: bool) -> None:
    from sqlalchemy import and_, exists, select

    from storage import repo
    from storage.models import Job, Scan, Trial

    for kind, model in (("scan", Scan), ("trial", Trial)):
        has_job = exists().where(and_(Job.target_kind == kind, Job.target_id == model.id))
        ids = list(session.scalars(select(model.id).where(~has_job).order_by(model.id)))
        for row_id in ids:
            detail = "stored without a scoring job"
            fixed = False
            if repair:
                job = repo.enqueue_job(
                    session=session, kind="score", target_kind=kind, target_id=int(row_id)
                )
                detail += f"; queued job {job.id}"
                fixed = True
            report.problems.append(Problem("no_job", f"{kind} {row_id}", detail, fixed))


def check_store(
    *,
    sessionmaker: Callable[[], Session],
    store: ArtifactStore,
    repair: bool = False,
    verify: bool = True,
    grace_s: float = DEFAULT_GRACE_S,
) -> CheckReport:
    """Verify ``store`` against the rows reachable through ``sessionmaker``.

    ``verify`` re-hashes every referenced artifact (reads all bytes once); ``grace_s`` is the
    age below which orphans and staging files are left alone by ``repair`` (they may belong to
    an upload in flight on a live server: a file is committed a moment before its row).
    """
    report = CheckReport()
    now = time.time()
    with sessionmaker() as session:
        referenced = _check_rows(session, store, report, verify=verify)
        _check_orphans(store, referenced, report, repair=repair, now=now, grace_s=grace_s)
        _check_staging(store, report, repair=repair, now=now, grace_s=grace_s)
        _check_jobs(session, report, repair=repair)
        _check_jobless(session, report, repair=repair)
    return report


# -- command line -----------------------------------------------------------------------------
def _check(args: argparse.Namespace) -> int:
    from service.app import open_resources

    resources = open_resources(settings_from_args(args))
    try:
        report = check_store(
            sessionmaker=resources.sessionmaker,
            store=resources.store,
            repair=args.repair,
            verify=not args.no_verify,
            grace_s=args.grace_s,
        )
    finally:
        resources.engine.dispose()
    print(report.table())
    if report.damaged:
        return 2
    unrepaired = [p for p in report.problems if not p.repaired]
    return 1 if unrepaired else 0


def register_check(sub: Any) -> None:
    p = sub.add_parser(
        "check",
        help="verify the artifact store against the database (optionally repair)",
        description="Exit status: 0 clean (or everything repaired), 1 problems left, "
        "2 a row's file is missing or corrupt (never repaired: reported only).",
    )
    p.add_argument("--data", help="data directory (env GAITSCAPE_DATA_DIR)")
    p.add_argument(
        "--repair",
        action="store_true",
        help="remove orphan objects and staging leftovers, re-queue jobs whose lease ran out, "
        "queue a scoring job for records that have none",
    )
    p.add_argument(
        "--grace-s",
        type=float,
        default=DEFAULT_GRACE_S,
        help="leave files younger than this many seconds alone when repairing; they may be "
        f"uploads in flight on a running server (default {DEFAULT_GRACE_S:.0f})",
    )
    p.add_argument(
        "--no-verify", action="store_true", help="check existence only, do not re-hash files"
    )
    p.set_defaults(func=_check)
