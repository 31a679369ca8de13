"""Scoring flows: the stages of one job, written as generators the runner drives.

A flow does its database work itself (it runs in the runner thread, the single writer) and
``yield``s a :class:`Compute` for each heavy stage; the runner submits it to the executor and
sends the result back in. Progress is written as each stage finishes.
"""

from __future__ import annotations

from collections.abc import Callable, Generator
from dataclasses import dataclass, field
from typing import Any

from service.pipeline import tasks
from storage import repo

__all__ = ["FLOWS", "Compute", "Flow", "JobContext", "scan_flow", "trial_flow"]


@dataclass(frozen=True)
class Compute:
    """One call to run on a worker: ``fn(*args, **kwargs)``."""

    fn: Callable[..., Any]
    args: tuple[Any, ...] = ()
    kwargs: dict[str, Any] = field(default_factory=dict)


@dataclass
class JobContext:
    """What a flow knows about its job; ``progress`` writes the job row (and tells listeners)."""

    job_id: int
    target_kind: str
    target_id: int
    recipe_hash: str
    parameters: dict[str, Any]
    sessionmaker: Any
    store: Any
    listener: Callable[[int, float, str], None] | None = None

    def session(self) -> Any:
        return self.sessionmaker()

    def progress(self, value: float, message: str) -> None:
        with self.session() as session:
            repo.update_job(session=session, job_id=self.job_id, progress=value, message=message)
        if self.listener is not None:
            self.listener(self.job_id, value, message)

    def save(self, scores: tuple[Any, ...], *, code_version: str, input_sha256: str) -> None:
        # Upsert on (target, recipe hash, measure): a re-run never writes a score twice.
        with self.session() as session:
            repo.save_scores(
                session=session,
                target_kind=self.target_kind,
                target_id=self.target_id,
                recipe_hash=self.recipe_hash,
                scores=scores,
                code_version=code_version,
                input_sha256=input_sha256,
            )


Flow = Callable[[JobContext], Generator[Compute, Any, None]]


def _upload_meta(row: Any) -> dict[str, Any]:
    return dict((row.meta or {}).get("upload") or {})


def scan_flow(ctx: JobContext) -> Generator[Compute, Any, None]:
    """Read + heightmap -> store heightmap -> terrain summary -> scores."""
    with ctx.session() as session:
        scan = repo.get_scan(session=session, scan_id=ctx.target_id)
        band = repo.get_arena(session=session, arena_id=scan.arena_id).scale_band_m
        meta = _upload_meta(scan)
        path = str(ctx.store.path(scan.sha256))
    read_meta = {k: meta.get(k) for k in ("units", "dx", "dy")}
    ctx.progress(0.05, "reading the scan and building its heightmap")
    hm = yield Compute(
        tasks.heightmap_task,
        (path,),
        {
            "sha256": scan.sha256,
            "fmt": scan.format,
            "filename": scan.filename,
            "read_meta": read_meta,
            "params": ctx.parameters["heightmap"],
        },
    )
    with ctx.session() as session:
        repo.attach_heightmap(
            session=session, store=ctx.store, scan_id=scan.id, z=hm.z, valid=hm.valid,
            dx_m=hm.dx_m, dy_m=hm.dy_m,
        )  # fmt: skip
    ctx.progress(0.4, "heightmap stored; scoring the terrain")
    terrain = yield Compute(
        tasks.terrain_task,
        (hm.z, hm.valid),
        {"dx_m": hm.dx_m, "dy_m": hm.dy_m, "band_m": band, "params": ctx.parameters["terrain"]},
    )
    ctx.progress(0.9, "terrain scored; writing scores")
    ctx.save(
        hm.scores + terrain.scores, code_version=terrain.code_version, input_sha256=scan.sha256
    )


def trial_flow(ctx: JobContext) -> Generator[Compute, Any, None]:
    """Read + preprocess + movement summary -> store preprocessed markers -> scores."""
    with ctx.session() as session:
        trial = repo.get_trial(session=session, trial_id=ctx.target_id)
        subject = repo.get_subject(session=session, subject_id=trial.subject_id)
        marker_set = subject.marker_set
        roles = {} if marker_set is None else dict(marker_set.roles or {})
        meta = _upload_meta(trial)
        path = str(ctx.store.path(trial.sha256))
    if not roles:
        raise ValueError(f"subject {subject.id} has no marker roles; cannot score trial {trial.id}")
    roles = {k: roles[k] for k in ("anterior", "posterior", "feet") if k in roles}
    params = dict(ctx.parameters["movement"])
    if params.get("treadmill_speed_m_s") is None and trial.treadmill_speed_m_s is not None:
        # The belt speed is a fact of the recording, not a recipe choice.
        params["treadmill_speed_m_s"] = trial.treadmill_speed_m_s
    read_meta = {k: meta.get(k) for k in ("units", "frame_rate_hz", "marker_names")}
    ctx.progress(0.05, "reading, preprocessing and scoring the trial")
    res = yield Compute(
        tasks.movement_task,
        (path,),
        {
            "sha256": trial.sha256,
            "fmt": trial.format,
            "filename": trial.filename,
            "read_meta": read_meta,
            "roles": roles,
            "params": params,
        },
    )
    ctx.progress(0.7, "movement scored; storing the preprocessed markers")
    with ctx.session() as session:
        repo.attach_artifact(
            session=session, store=ctx.store, target_kind="trial", target_id=trial.id,
            role="preprocessed", array=res.preprocessed,
        )  # fmt: skip
    ctx.progress(0.9, "writing scores")
    ctx.save(res.scores, code_version=res.code_version, input_sha256=trial.sha256)


FLOWS: dict[str, Flow] = {"scan": scan_flow, "trial": trial_flow}
