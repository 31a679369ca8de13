"""Pydantic schemas, one family per resource: ``XCreate`` in, ``XPublic`` out, ``XsPublic`` lists.

They are separate from the ORM models in ``storage.models`` so storage works without FastAPI.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Generic, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from storage.models import JobState, TokenScope

__all__ = [
    "ArenaCreate",
    "ArenaPublic",
    "ArenasPublic",
    "CorrespondencePublic",
    "CorrespondenceRowPublic",
    "Health",
    "JobDetail",
    "JobPublic",
    "JobsPublic",
    "LocalCorrespondencePublic",
    "LocalCorrespondenceRowPublic",
    "MarkerRoles",
    "MarkerSetCreate",
    "MarkerSetPublic",
    "MarkerSetsPublic",
    "MetaCorrected",
    "Page",
    "RecipeCreate",
    "RecipeCreated",
    "RecipePublic",
    "RecipesPublic",
    "RescorePublic",
    "RescoreRequest",
    "ScanMetaCorrection",
    "ScanPublic",
    "ScanUploadMeta",
    "ScansPublic",
    "ScoreRowPublic",
    "ScoresPublic",
    "SubjectCreate",
    "SubjectPublic",
    "SubjectsPublic",
    "TokenCreate",
    "TokenCreated",
    "TokenPublic",
    "TokensPublic",
    "TrialMetaCorrection",
    "TrialPublic",
    "TrialUploadMeta",
    "TrialsPublic",
    "UploadCheck",
    "UploadPublic",
]

T = TypeVar("T")

# Mirrors storage.models.ARENA_KINDS (service must not need the ORM to validate a request).
ARENA_KINDS = ("open_field", "runway", "treadmill", "other")

Scope = TokenScope
# Lengths accepted on the way in (storage.readers.UNIT_SCALE): SI, and the international and
# US survey foot that lidar and survey data come in.
Units = Literal["m", "cm", "mm", "um", "\u00b5m", "\u03bcm", "ft", "us_ft"]
UpAxis = Literal["x", "y", "z", "-x", "-y", "-z"]


class _In(BaseModel):
    model_config = ConfigDict(extra="forbid")


class _Out(BaseModel):
    model_config = ConfigDict(from_attributes=True)


class Page(_Out, Generic[T]):
    """One page of a list: ``data`` rows and the ``count`` of all rows matching the filters."""

    data: list[T]
    count: int


class Health(BaseModel):
    status: Literal["ok"] = "ok"
    version: str


# -- arenas ---------------------------------------------------------------------------------
class ArenaCreate(_In):
    """A physical environment animals move in."""

    name: str = Field(min_length=1, max_length=200)
    kind: str = Field(
        default="other",
        description="open_field, runway, treadmill or other ('open field' is accepted too).",
        examples=["runway"],
    )
    scale_band_m: tuple[float, float] | None = Field(
        default=None,
        description="Animal-scale wavelength band [lo, hi] in metres that terrain measures are "
        "restricted to; null for the whole scan.",
        examples=[[0.005, 0.2]],
    )
    notes: str = ""

    @field_validator("kind")
    @classmethod
    def _known_kind(cls, kind: str) -> str:
        normal = kind.strip().lower().replace(" ", "_").replace("-", "_")
        if normal not in ARENA_KINDS:
            raise ValueError(f"kind must be one of {ARENA_KINDS}, got {kind!r}")
        return normal

    @field_validator("scale_band_m")
    @classmethod
    def _band_order(cls, band: tuple[float, float] | None) -> tuple[float, float] | None:
        if band is not None and not 0 < band[0] < band[1]:
            raise ValueError("scale_band_m must be [lo, hi] with 0 < lo < hi (metres)")
        return band

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "name": "gravel tray 3",
                    "kind": "runway",
                    "scale_band_m": [0.005, 0.2],
                    "notes": "",
                }
            ]
        },
    )


class ArenaPublic(_Out):
    id: int
    name: str
    kind: str
    scale_band_m: tuple[float, float] | None = None
    notes: str = ""
    created_at: datetime | None = None


ArenasPublic = Page[ArenaPublic]


# -- marker sets and subjects -----------------------------------------------------------------
class MarkerRoles(_In):
    """Which marker plays which role; names are the marker names in the trial files."""

    model_config = ConfigDict(extra="allow")  # further roles (left, right, tail, ...) welcome

    anterior: str
    posterior: str
    feet: dict[str, str] = Field(
        description="Foot markers keyed LF, RF, LH, RH (more legs allowed: L1, R1, ...).",
        examples=[{"LF": "lf_toe", "RF": "rf_toe", "LH": "lh_toe", "RH": "rh_toe"}],
    )

    @field_validator("feet")
    @classmethod
    def _at_least_two_feet(cls, feet: dict[str, str]) -> dict[str, str]:
        if len(feet) < 2:
            raise ValueError("feet must name at least two foot markers (LF, RF, LH, RH)")
        return feet


class MarkerSetCreate(_In):
    name: str = Field(min_length=1, max_length=200)
    roles: MarkerRoles


class MarkerSetPublic(_Out):
    id: int
    name: str
    roles: dict[str, Any] = {}
    marker_names: list[str] = []
    created_at: datetime | None = None


MarkerSetsPublic = Page[MarkerSetPublic]


class SubjectCreate(_In):
    """An animal or robot; ``marker_roles`` map roles to marker names."""

    label: str = Field(min_length=1, max_length=200)
    species: str = ""
    marker_roles: MarkerRoles
    mass_kg: float | None = Field(default=None, gt=0)
    body_length_m: float | None = Field(default=None, gt=0)

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "label": "M07",
                    "species": "Mus musculus",
                    "marker_roles": {
                        "anterior": "snout",
                        "posterior": "tail_base",
                        "feet": {"LF": "lf", "RF": "rf", "LH": "lh", "RH": "rh"},
                    },
                }
            ]
        },
    )


class SubjectPublic(_Out):
    id: int
    label: str
    species: str = ""
    marker_set_id: int | None = None
    marker_roles: dict[str, Any] | None = None
    mass_kg: float | None = None
    body_length_m: float | None = None
    created_at: datetime | None = None

    @model_validator(mode="before")
    @classmethod
    def _roles_from_marker_set(cls, value: Any) -> Any:
        # The ORM keeps roles on the subject's marker set; the API shows them on the subject.
        if isinstance(value, dict) or not hasattr(value, "marker_set"):
            return value
        marker_set = value.marker_set
        fields = {name: getattr(value, name, None) for name in cls.model_fields}
        fields["marker_roles"] = None if marker_set is None else marker_set.roles
        return fields


SubjectsPublic = Page[SubjectPublic]


# -- uploads ------------------------------------------------------------------------------------
class ScanUploadMeta(_In):
    """The ``meta`` JSON of a scan upload."""

    model_config = ConfigDict(extra="forbid")

    units: Units | None = Field(default=None, description="Length unit of the coordinates.")
    dx: float | None = Field(
        default=None,
        gt=0,
        allow_inf_nan=False,
        description="Heightmap cell size along x, in units (1e-7 to 1e3 m once converted).",
    )
    dy: float | None = Field(
        default=None,
        gt=0,
        allow_inf_nan=False,
        description="Heightmap cell size along y, in units (1e-7 to 1e3 m once converted).",
    )
    captured_at: datetime | None = None
    ground_only: bool | None = Field(
        default=None,
        description="LAS/LAZ: keep only ground points (class 2) when the file has any "
        "(default true); false keeps every point.",
    )


class TrialUploadMeta(_In):
    """The ``meta`` JSON of a trial upload."""

    model_config = ConfigDict(extra="forbid")

    arena_id: int
    subject_id: int
    frame_rate_hz: float | None = Field(
        default=None,
        ge=1.0,
        le=100_000.0,  # storage.readers.FRAME_RATE_RANGE_HZ
        allow_inf_nan=False,
        description="Capture rate (1 to 100,000 Hz), needed where the file has none.",
    )
    units: Units | None = Field(default=None, description="Length unit of marker coordinates.")
    condition: str | None = Field(default=None, max_length=200)
    treadmill_speed_m_s: float | None = Field(default=None, ge=0, le=100, allow_inf_nan=False)
    recorded_at: datetime | None = None
    marker_names: list[str] | None = Field(
        default=None, description="Marker names for formats that carry none (NPY)."
    )
    up_axis: UpAxis | None = Field(
        default=None,
        description="Which lab axis points up (x, y, z, or negated); kept with the trial for "
        "the scoring job, which checks it against the data.",
    )


class ScanMetaCorrection(_In):
    """Corrected upload metadata of a scan: only the keys sent change (null removes one)."""

    units: Units | None = None
    dx: float | None = Field(default=None, gt=0, allow_inf_nan=False)
    dy: float | None = Field(default=None, gt=0, allow_inf_nan=False)
    captured_at: datetime | None = None
    ground_only: bool | None = None


class TrialMetaCorrection(_In):
    """Corrected upload metadata of a trial: only the keys sent change (null removes one)."""

    frame_rate_hz: float | None = Field(default=None, ge=1.0, le=100_000.0, allow_inf_nan=False)
    units: Units | None = None
    condition: str | None = Field(default=None, max_length=200)
    treadmill_speed_m_s: float | None = Field(default=None, ge=0, le=100, allow_inf_nan=False)
    recorded_at: datetime | None = None
    marker_names: list[str] | None = None
    up_axis: UpAxis | None = None


class MetaCorrected(BaseModel):
    """What a metadata correction answers: the record, what changed and the new job."""

    id: int
    changed: list[str]
    job_id: int


class UploadPublic(_Out):
    """What an upload answers: the record (new or the existing duplicate) and its job."""

    id: int
    sha256: str
    job_id: int | None = None
    created: bool


class UploadCheck(BaseModel):
    """Whether the server already holds a file with this sha256, and as what."""

    sha256: str
    present: bool
    records: list[dict[str, Any]] = []


class ScanPublic(_Out):
    id: int
    arena_id: int
    sha256: str
    filename: str = ""
    format: str
    kind: str = Field(description="points or heightmap")
    units: str
    size_bytes: int
    n_points: int | None = None
    grid_nx: int | None = None
    grid_ny: int | None = None
    dx_m: float | None = None
    dy_m: float | None = None
    captured_at: datetime | None = None
    created_at: datetime | None = None


ScansPublic = Page[ScanPublic]


class TrialPublic(_Out):
    id: int
    arena_id: int
    subject_id: int
    sha256: str
    filename: str = ""
    format: str
    units: str
    size_bytes: int
    frame_rate_hz: float
    n_frames: int
    n_markers: int
    marker_names: list[str] = []
    condition: str = ""
    treadmill_speed_m_s: float | None = None
    recorded_at: datetime | None = None
    created_at: datetime | None = None


TrialsPublic = Page[TrialPublic]


# -- jobs -------------------------------------------------------------------------------------
class JobPublic(_Out):
    id: int
    kind: str | None = None
    target_kind: str | None = None
    target_id: int | None = None
    state: JobState
    progress: float = 0.0
    message: str = ""
    error: str | None = None
    attempts: int = 0
    created_at: datetime | None = None
    finished_at: datetime | None = None


# -- tokens -----------------------------------------------------------------------------------
class TokenCreate(_In):
    scopes: list[Scope] = Field(min_length=1, examples=[["read", "upload"]])
    label: str = ""


class TokenPublic(_Out):
    id: int
    label: str = ""
    scopes: list[str]
    prefix: str = Field(
        default="", description="First characters of the secret, to tell tokens apart."
    )
    created_at: datetime | None = None
    revoked_at: datetime | None = None
    expires_at: datetime | None = None
    last_used_at: datetime | None = None

    @field_validator("scopes", mode="before")
    @classmethod
    def _split(cls, value: Any) -> Any:
        if isinstance(value, str):
            return value.replace(",", " ").split()
        return value


class TokenCreated(TokenPublic):
    """Returned once, at creation: ``token`` is the secret and is never shown again."""

    token: str


TokensPublic = Page[TokenPublic]


# -- recipes, jobs, scores (scoring pipeline) ------------------------------------------------
class RecipeCreate(_In):
    """A new version of analysis recipe ``name``: sections of overrides onto the defaults."""

    name: str = Field(min_length=1, max_length=200, examples=["fine-grid"])
    parameters: dict[str, dict[str, Any]] = Field(
        default_factory=dict,
        description="Overrides by section: movement, terrain, heightmap. Unnamed parameters "
        "take today's defaults; the stored recipe holds every parameter.",
        examples=[{"heightmap": {"dx_m": 0.0005}, "movement": {"rqa_recurrence_rate": 0.03}}],
    )


class RecipePublic(_Out):
    id: int
    name: str
    version: int
    hash: str = Field(description="sha256 of the canonical JSON of the parameters.")
    parameters: dict[str, Any]
    created_at: datetime | None = None


class RecipeCreated(RecipePublic):
    created: bool = Field(description="False when the parameters equal the latest version's.")


RecipesPublic = Page[RecipePublic]


class JobDetail(JobPublic):
    """A job with its recipe hash, attempt budget and lease."""

    recipe_hash: str | None = Field(
        default=None, description="Recipe the job scores under; null: the latest 'default'."
    )
    max_attempts: int = 3
    lease_until: datetime | None = None
    started_at: datetime | None = None
    updated_at: datetime | None = None


JobsPublic = Page[JobDetail]


class RescoreRequest(_In):
    """Which scans and trials to score again, and under which recipe."""

    recipe: str = Field(default="default", min_length=1, max_length=200)
    version: int | None = Field(default=None, ge=1, description="Null: the latest version.")
    scan_ids: list[int] = []
    trial_ids: list[int] = []
    arena_ids: list[int] = Field(default=[], description="Every scan and trial of these arenas.")
    all: bool = Field(default=False, description="Every scan and trial in the store.")

    @model_validator(mode="after")
    def _something_selected(self) -> RescoreRequest:
        if not (self.all or self.scan_ids or self.trial_ids or self.arena_ids):
            raise ValueError("select scan_ids, trial_ids, arena_ids, or set all=true")
        return self


class RescorePublic(BaseModel):
    recipe: RecipePublic
    job_ids: list[int]
    count: int


class ScoreRowPublic(_Out):
    """One score with its target's context and the fields that make it reproducible."""

    target_kind: str
    target_id: int
    arena_id: int | None = None
    arena: str | None = None
    subject_id: int | None = None
    subject: str | None = None
    condition: str | None = None
    recipe_hash: str
    measure: str
    value: float | None = None
    unit: str = ""
    ci_low: float | None = None
    ci_high: float | None = None
    surrogate_z: float | None = None
    note: str = Field(
        default="",
        description="Why the value is missing, which automatic choice was made, which band "
        "was fitted. A missing value (null) always has one.",
    )
    code_version: str
    input_sha256: str
    computed_at: datetime | None = None

    @field_validator("note", mode="before")
    @classmethod
    def _no_null_note(cls, value: Any) -> Any:
        return "" if value is None else value


ScoresPublic = Page[ScoreRowPublic]


# -- correspondence -----------------------------------------------------------------------------
class CorrespondenceRowPublic(BaseModel):
    """One terrain x movement pair. The first eleven fields are the contract; null = not
    estimable (too few arenas or trials, a constant measure)."""

    terrain_measure: str
    movement_measure: str
    slope: float | None = Field(description="Mixed-model slope, movement ~ terrain + (1|subject).")
    ci_low: float | None = Field(description="Wald 95 % interval of the slope, lower end.")
    ci_high: float | None = Field(description="Wald 95 % interval of the slope, upper end.")
    p_value: float | None = Field(description="Arena-level permutation p-value (two-sided).")
    q_value: float | None = Field(description="Benjamini-Hochberg q-value across the grid.")
    spearman_rho: float | None = Field(description="Spearman rho of arena terrain and means.")
    n_arenas: int
    n_subjects: int
    n_trials: int
    spearman_ci_low: float | None = None
    spearman_ci_high: float | None = None
    mixed_p_value: float | None = Field(default=None, description="Wald p of the mixed model.")


class CorrespondencePublic(BaseModel):
    """The correspondence report: rows, warnings and study counts (contract), plus the
    multivariate summary and the shared complexity-entropy plane."""

    rows: list[CorrespondenceRowPublic]
    warnings: list[str]
    n_arenas: int
    n_subjects: int
    n_trials: int
    recipe: dict[str, Any]
    scans: Literal["latest", "mean"]
    n_permutations: int
    exact_permutations: bool
    terrain_measures: list[str]
    movement_measures: list[str]
    arenas: list[dict[str, Any]]
    multivariate: dict[str, Any]
    plane: dict[str, Any]


class LocalCorrespondenceRowPublic(BaseModel):
    """One patch measure x window movement measure pair, across trials."""

    terrain_measure: str
    movement_measure: str
    slope: float | None = Field(description="Mixed-model slope, windows nested in trials.")
    ci_low: float | None
    ci_high: float | None
    p_value: float | None = Field(description="Torus-translation (cyclic-shift) p-value.")
    mixed_p_value: float | None
    statistic: float | None
    rho_within_median: float | None
    n_trials: int
    n_windows: int


class LocalCorrespondencePublic(BaseModel):
    """Window-level movement measures against the terrain patch under the animal."""

    recipe: dict[str, Any]
    window_s: float
    rows: list[LocalCorrespondenceRowPublic]
    within_trial: list[dict[str, Any]]
    trials: list[dict[str, Any]]
    warnings: list[str]
    n_trials: int
    n_windows: int
    n_permutations: int
    method: str
