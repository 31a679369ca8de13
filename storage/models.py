"""SQLAlchemy 2 ORM for gaitscape's metadata.

Raw files and large arrays live in the artifact store; rows keep their sha256.
Every timestamp is timezone-aware UTC (stored naive-UTC so SQLite and PostgreSQL agree).
Studies group arenas, subjects and trials through membership tables (``study_arenas``,
``study_subjects``, ``study_trials``), so one arena or subject may belong to several.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any, ClassVar, Literal, get_args

from sqlalchemy import (
    JSON,
    CheckConstraint,
    Column,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.engine import Dialect
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship
from sqlalchemy.types import TypeDecorator

__all__ = [
    "ARENA_KINDS",
    "JOB_STATES",
    "TARGET_KINDS",
    "TOKEN_SCOPES",
    "Arena",
    "Base",
    "Derived",
    "Job",
    "MarkerSet",
    "Recipe",
    "Scan",
    "Score",
    "Study",
    "Subject",
    "Token",
    "Trial",
    "study_arenas",
    "study_subjects",
    "study_trials",
    "utcnow",
]

ARENA_KINDS = ("open_field", "runway", "treadmill", "other")
# The one definition of job states and token scopes; schemas, routes and the CLI use these.
JobState = Literal["queued", "running", "done", "failed"]
TokenScope = Literal["read", "upload", "analyse", "admin"]
JOB_STATES: tuple[str, ...] = get_args(JobState)
TOKEN_SCOPES: tuple[str, ...] = get_args(TokenScope)
TARGET_KINDS = ("scan", "trial")

# Deterministic constraint names, so Alembic (batch mode on SQLite) can find them again.
NAMING = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    """The current time, timezone-aware UTC."""
    return datetime.now(UTC)


class UTCDateTime(TypeDecorator[datetime]):
    """Aware UTC datetimes in, aware UTC datetimes out, on every backend."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given; pass a timezone-aware datetime")
        value = value.astimezone(UTC)
        # SQLite has no time zones: keep naive UTC there.
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


def _in(column: str, values: tuple[str, ...]) -> str:
    return f"{column} IN ({', '.join(repr(v) for v in values)})"


class Base(DeclarativeBase):
    """Declarative base; ``Base.metadata`` is what the migrations mirror."""

    metadata = MetaData(naming_convention=NAMING)
    type_annotation_map: ClassVar[dict[Any, Any]] = {
        datetime: UTCDateTime(),
        dict[str, Any]: JSON(),
    }


def _created() -> Mapped[datetime]:
    return mapped_column(UTCDateTime(), default=utcnow, nullable=False)


class Arena(Base):
    """A physical environment animals move in."""

    __tablename__ = "arena"
    __table_args__ = (
        CheckConstraint(_in("kind", ARENA_KINDS), name="kind"),
        CheckConstraint(
            "(scale_band_lo_m IS NULL AND scale_band_hi_m IS NULL) OR "
            "(scale_band_lo_m > 0 AND scale_band_hi_m > scale_band_lo_m)",
            name="scale_band",
        ),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    kind: Mapped[str] = mapped_column(String(20))
    notes: Mapped[str] = mapped_column(Text, default="")
    scale_band_lo_m: Mapped[float | None] = mapped_column(Float)
    scale_band_hi_m: Mapped[float | None] = mapped_column(Float)
    created_at: Mapped[datetime] = _created()

    @property
    def scale_band_m(self) -> tuple[float, float] | None:
        """The animal-scale band (low, high) in metres, or None."""
        if self.scale_band_lo_m is None or self.scale_band_hi_m is None:
            return None
        return (self.scale_band_lo_m, self.scale_band_hi_m)


class MarkerSet(Base):
    """Names of markers and their roles on the body."""

    __tablename__ = "marker_set"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    roles: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[datetime] = _created()

    @property
    def marker_names(self) -> list[str]:
        """Every marker named in the roles, in role order, without repeats."""
        roles = self.roles or {}
        names: list[str] = []
        for key in ("anterior", "posterior"):
            if roles.get(key):
                names.append(roles[key])
        names.extend((roles.get("feet") or {}).values())
        for key in ("left", "right", "others"):
            names.extend(roles.get(key) or [])
        return list(dict.fromkeys(names))


class Subject(Base):
    """An animal (or legged robot)."""

    __tablename__ = "subject"
    __table_args__ = (
        CheckConstraint("mass_kg IS NULL OR mass_kg > 0", name="mass"),
        CheckConstraint("body_length_m IS NULL OR body_length_m > 0", name="body_length"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    label: Mapped[str] = mapped_column(String(200), unique=True)
    species: Mapped[str] = mapped_column(String(200), default="")
    mass_kg: Mapped[float | None] = mapped_column(Float)
    body_length_m: Mapped[float | None] = mapped_column(Float)
    marker_set_id: Mapped[int | None] = mapped_column(
        ForeignKey("marker_set.id", ondelete="RESTRICT"), index=True
    )
    created_at: Mapped[datetime] = _created()

    marker_set: Mapped[MarkerSet | None] = relationship(lazy="joined")


class Scan(Base):
    """One 3D capture of an arena's ground (raw file in the artifact store)."""

    __tablename__ = "scan"
    __table_args__ = (
        UniqueConstraint("sha256", "arena_id"),
        CheckConstraint("kind IN ('points', 'heightmap')", name="kind"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    arena_id: Mapped[int] = mapped_column(ForeignKey("arena.id", ondelete="RESTRICT"), index=True)
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    filename: Mapped[str] = mapped_column(String(500), default="")
    format: Mapped[str] = mapped_column(String(20))
    kind: Mapped[str] = mapped_column(String(20))
    units: Mapped[str] = mapped_column(String(20))
    size_bytes: Mapped[int] = mapped_column(Integer)
    n_points: Mapped[int | None] = mapped_column(Integer)
    grid_nx: Mapped[int | None] = mapped_column(Integer)
    grid_ny: Mapped[int | None] = mapped_column(Integer)
    captured_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    meta: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    heightmap_sha256: Mapped[str | None] = mapped_column(String(64))
    valid_mask_sha256: Mapped[str | None] = mapped_column(String(64))
    dx_m: Mapped[float | None] = mapped_column(Float)
    dy_m: Mapped[float | None] = mapped_column(Float)
    registration: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    created_at: Mapped[datetime] = _created()

    arena: Mapped[Arena] = relationship()


class Trial(Base):
    """One recording of one subject in one arena (raw file in the artifact store)."""

    __tablename__ = "trial"
    __table_args__ = (
        UniqueConstraint("sha256", "arena_id", "subject_id"),
        CheckConstraint("frame_rate_hz > 0", name="frame_rate"),
        Index("ix_trial_recorded_at", "recorded_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    arena_id: Mapped[int] = mapped_column(ForeignKey("arena.id", ondelete="RESTRICT"), index=True)
    subject_id: Mapped[int] = mapped_column(
        ForeignKey("subject.id", ondelete="RESTRICT"), index=True
    )
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    filename: Mapped[str] = mapped_column(String(500), default="")
    format: Mapped[str] = mapped_column(String(20))
    units: Mapped[str] = mapped_column(String(20))
    size_bytes: Mapped[int] = mapped_column(Integer)
    frame_rate_hz: Mapped[float] = mapped_column(Float)
    n_frames: Mapped[int] = mapped_column(Integer)
    n_markers: Mapped[int] = mapped_column(Integer)
    marker_names: Mapped[list[str]] = mapped_column(JSON)
    condition: Mapped[str] = mapped_column(String(200), default="", index=True)
    treadmill_speed_m_s: Mapped[float | None] = mapped_column(Float)
    recorded_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    meta: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    preprocessed_sha256: Mapped[str | None] = mapped_column(String(64))
    created_at: Mapped[datetime] = _created()

    arena: Mapped[Arena] = relationship()
    subject: Mapped[Subject] = relationship()


class Recipe(Base):
    """An immutable, versioned set of analysis parameters."""

    __tablename__ = "recipe"
    __table_args__ = (UniqueConstraint("name", "version"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    version: Mapped[int] = mapped_column(Integer)
    parameters: Mapped[dict[str, Any]] = mapped_column(JSON)
    hash: Mapped[str] = mapped_column(String(64), index=True)
    created_at: Mapped[datetime] = _created()


class Score(Base):
    """One number computed for a scan or a trial under a recipe."""

    __tablename__ = "score"
    __table_args__ = (
        UniqueConstraint("target_kind", "target_id", "recipe_hash", "measure"),
        CheckConstraint(_in("target_kind", TARGET_KINDS), name="target_kind"),
        Index("ix_score_target", "target_kind", "target_id"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    target_kind: Mapped[str] = mapped_column(String(10))
    target_id: Mapped[int] = mapped_column(Integer)
    recipe_hash: Mapped[str] = mapped_column(String(64), index=True)
    measure: Mapped[str] = mapped_column(String(200), index=True)
    value: Mapped[float | None] = mapped_column(Float)
    unit: Mapped[str] = mapped_column(String(50), default="")
    ci_low: Mapped[float | None] = mapped_column(Float)
    ci_high: Mapped[float | None] = mapped_column(Float)
    surrogate_z: Mapped[float | None] = mapped_column(Float)
    # Why a value is missing, which automatic choice was made, which band was
    # fitted: a NaN is never stored without its reason.
    note: Mapped[str] = mapped_column(Text, default="")
    code_version: Mapped[str] = mapped_column(String(100))
    input_sha256: Mapped[str] = mapped_column(String(64))
    computed_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class Derived(Base):
    """An array a scoring job stored for later views (plot arrays, per-window
    measures): views read these, they never recompute them."""

    __tablename__ = "derived"
    __table_args__ = (
        UniqueConstraint("target_kind", "target_id", "recipe_hash", "kind"),
        CheckConstraint(_in("target_kind", TARGET_KINDS), name="target_kind"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    target_kind: Mapped[str] = mapped_column(String(10))
    target_id: Mapped[int] = mapped_column(Integer)
    recipe_hash: Mapped[str] = mapped_column(String(64), index=True)
    kind: Mapped[str] = mapped_column(String(50))
    sha256: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = _created()


class Job(Base):
    """A unit of scoring work; lives in the database so restarts lose nothing."""

    __tablename__ = "job"
    __table_args__ = (
        CheckConstraint(_in("state", JOB_STATES), name="state"),
        CheckConstraint(_in("target_kind", TARGET_KINDS), name="target_kind"),
        CheckConstraint("progress >= 0 AND progress <= 1", name="progress"),
        CheckConstraint("attempts >= 0 AND max_attempts >= 1", name="attempts"),
        Index("ix_job_state_created", "state", "created_at"),
        Index("ix_job_target", "target_kind", "target_id"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String(50))
    target_kind: Mapped[str] = mapped_column(String(10))
    target_id: Mapped[int] = mapped_column(Integer)
    recipe_hash: Mapped[str | None] = mapped_column(String(64))
    state: Mapped[str] = mapped_column(String(10), default="queued")
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    message: Mapped[str] = mapped_column(Text, default="")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    lease_until: Mapped[datetime | None] = mapped_column(UTCDateTime())
    error: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[datetime] = _created()
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow, onupdate=utcnow)
    started_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime())


class Token(Base):
    """An API credential; only the sha256 of the secret is kept."""

    __tablename__ = "token"

    id: Mapped[int] = mapped_column(primary_key=True)
    label: Mapped[str] = mapped_column(String(200), default="")
    scopes: Mapped[str] = mapped_column(String(200))
    prefix: Mapped[str] = mapped_column(String(16))
    secret_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    created_at: Mapped[datetime] = _created()
    revoked_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    last_used_at: Mapped[datetime | None] = mapped_column(UTCDateTime())

    @property
    def scope_set(self) -> frozenset[str]:
        """The scopes as a set."""
        return frozenset(s for s in self.scopes.split(",") if s)

    def allows(self, scope: str) -> bool:
        """Whether this token grants ``scope`` (admin grants everything)."""
        return "admin" in self.scope_set or scope in self.scope_set

    @property
    def active(self) -> bool:
        """Not revoked and not expired."""
        if self.revoked_at is not None:
            return False
        return self.expires_at is None or self.expires_at > utcnow()


class Study(Base):
    """A named group of arenas, subjects and trials (one may belong to several studies)."""

    __tablename__ = "study"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    notes: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = _created()


def _membership(name: str, member: str) -> Table:
    # Deleting a study or a member drops the membership row, nothing else.
    return Table(
        name,
        Base.metadata,
        Column("study_id", ForeignKey("study.id", ondelete="CASCADE"), primary_key=True),
        Column(f"{member}_id", ForeignKey(f"{member}.id", ondelete="CASCADE"), primary_key=True),
    )


study_arenas = _membership("study_arenas", "arena")
study_subjects = _membership("study_subjects", "subject")
study_trials = _membership("study_trials", "trial")
