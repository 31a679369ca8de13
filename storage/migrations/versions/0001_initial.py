"""Initial schema: arenas, marker sets, subjects, scans, trials, profiles, scores, jobs, tokens.

Revision ID: 0001_initial
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op


revision = "0001_initial"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:

    op.create_table(
        "arena",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("kind", sa.String(length=20), nullable=False),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("scale_band_lo_m", sa.Float(), nullable=True),
        sa.Column("scale_band_hi_m", sa.Float(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "kind IN ('open_field', 'runway', 'treadmill', 'other')",
            name=op.f("ck_arena_kind"),
        ),
        sa.CheckConstraint(
            "(scale_band_lo_m IS NULL AND scale_band_hi_m IS NULL) OR (scale_band_lo_m > 0 AND scale_band_hi_m > scale_band_lo_m)",
            name=op.f("ck_arena_scale_band"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_arena")),
        sa.UniqueConstraint("name", name=op.f("uq_arena_name")),
    )
    op.create_table(
        "job",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=50), nullable=False),
        sa.Column("target_kind", sa.String(length=10), nullable=False),
        sa.Column("target_id", sa.Integer(), nullable=False),
        sa.Column("profile_hash", sa.String(length=64), nullable=True),
        sa.Column("state", sa.String(length=10), nullable=False),
        sa.Column("progress", sa.Float(), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("max_attempts", sa.Integer(), nullable=False),
        sa.Column("lease_until", sa.DateTime(timezone=True), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.CheckConstraint(
            "state IN ('queued', 'running', 'done', 'failed')",
            name=op.f("ck_job_state"),
        ),
        sa.CheckConstraint(
            "target_kind IN ('scan', 'trial')", name=op.f("ck_job_target_kind")
        ),
        sa.CheckConstraint(
            "attempts >= 0 AND max_attempts >= 1", name=op.f("ck_job_attempts")
        ),
        sa.CheckConstraint(
            "progress >= 0 AND progress <= 1", name=op.f("ck_job_progress")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_job")),
    )
    with op.batch_alter_table("job", schema=None) as batch_op:
        batch_op.create_index(
            "ix_job_state_created", ["state", "created_at"], unique=False
        )
        batch_op.create_index(
            "ix_job_target", ["target_kind", "target_id"], unique=False
        )

    op.create_table(
        "marker_set",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("roles", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_marker_set")),
        sa.UniqueConstraint("name", name=op.f("uq_marker_set_name")),
    )
    op.create_table(
        "profile",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("parameters", sa.JSON(), nullable=False),
        sa.Column("hash", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_profile")),
        sa.UniqueConstraint("name", "version", name=op.f("uq_profile_name_version")),
    )
    with op.batch_alter_table("profile", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_profile_hash"), ["hash"], unique=False)

    op.create_table(
        "score",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("target_kind", sa.String(length=10), nullable=False),
        sa.Column("target_id", sa.Integer(), nullable=False),
        sa.Column("profile_hash", sa.String(length=64), nullable=False),
        sa.Column("measure", sa.String(length=200), nullable=False),
        sa.Column("value", sa.Float(), nullable=True),
        sa.Column("unit", sa.String(length=50), nullable=False),
        sa.Column("ci_low", sa.Float(), nullable=True),
        sa.Column("ci_high", sa.Float(), nullable=True),
        sa.Column("surrogate_z", sa.Float(), nullable=True),
        sa.Column("code_version", sa.String(length=100), nullable=False),
        sa.Column("input_sha256", sa.String(length=64), nullable=False),
        sa.Column("computed_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "target_kind IN ('scan', 'trial')", name=op.f("ck_score_target_kind")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_score")),
        sa.UniqueConstraint(
            "target_kind",
            "target_id",
            "profile_hash",
            "measure",
            name=op.f("uq_score_target_kind_target_id_profile_hash_measure"),
        ),
    )
    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_score_measure"), ["measure"], unique=False)
        batch_op.create_index(
            batch_op.f("ix_score_profile_hash"), ["profile_hash"], unique=False
        )
        batch_op.create_index(
            "ix_score_target", ["target_kind", "target_id"], unique=False
        )

    op.create_table(
        "token",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("label", sa.String(length=200), nullable=False),
        sa.Column("scopes", sa.String(length=200), nullable=False),
        sa.Column("prefix", sa.String(length=16), nullable=False),
        sa.Column("secret_sha256", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("last_used_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_token")),
        sa.UniqueConstraint("secret_sha256", name=op.f("uq_token_secret_sha256")),
    )
    op.create_table(
        "scan",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("arena_id", sa.Integer(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("filename", sa.String(length=500), nullable=False),
        sa.Column("format", sa.String(length=20), nullable=False),
        sa.Column("kind", sa.String(length=20), nullable=False),
        sa.Column("units", sa.String(length=20), nullable=False),
        sa.Column("size_bytes", sa.Integer(), nullable=False),
        sa.Column("n_points", sa.Integer(), nullable=True),
        sa.Column("grid_nx", sa.Integer(), nullable=True),
        sa.Column("grid_ny", sa.Integer(), nullable=True),
        sa.Column("captured_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("meta", sa.JSON(), nullable=False),
        sa.Column("heightmap_sha256", sa.String(length=64), nullable=True),
        sa.Column("valid_mask_sha256", sa.String(length=64), nullable=True),
        sa.Column("grid_dx_m", sa.Float(), nullable=True),
        sa.Column("grid_dy_m", sa.Float(), nullable=True),
        sa.Column("registration", sa.JSON(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "kind IN ('points', 'heightmap')", name=op.f("ck_scan_kind")
        ),
        sa.ForeignKeyConstraint(
            ["arena_id"],
            ["arena.id"],
            name=op.f("fk_scan_arena_id_arena"),
            ondelete="RESTRICT",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_scan")),
        sa.UniqueConstraint("sha256", "arena_id", name=op.f("uq_scan_sha256_arena_id")),
    )
    with op.batch_alter_table("scan", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_scan_arena_id"), ["arena_id"], unique=False
        )
        batch_op.create_index(batch_op.f("ix_scan_sha256"), ["sha256"], unique=False)

    op.create_table(
        "subject",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("label", sa.String(length=200), nullable=False),
        sa.Column("species", sa.String(length=200), nullable=False),
        sa.Column("mass_kg", sa.Float(), nullable=True),
        sa.Column("body_length_m", sa.Float(), nullable=True),
        sa.Column("marker_set_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "body_length_m IS NULL OR body_length_m > 0",
            name=op.f("ck_subject_body_length"),
        ),
        sa.CheckConstraint(
            "mass_kg IS NULL OR mass_kg > 0", name=op.f("ck_subject_mass")
        ),
        sa.ForeignKeyConstraint(
            ["marker_set_id"],
            ["marker_set.id"],
            name=op.f("fk_subject_marker_set_id_marker_set"),
            ondelete="RESTRICT",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_subject")),
        sa.UniqueConstraint("label", name=op.f("uq_subject_label")),
    )
    with op.batch_alter_table("subject", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_subject_marker_set_id"), ["marker_set_id"], unique=False
        )

    op.create_table(
        "trial",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("arena_id", sa.Integer(), nullable=False),
        sa.Column("subject_id", sa.Integer(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("filename", sa.String(length=500), nullable=False),
        sa.Column("format", sa.String(length=20), nullable=False),
        sa.Column("units", sa.String(length=20), nullable=False),
        sa.Column("size_bytes", sa.Integer(), nullable=False),
        sa.Column("frame_rate_hz", sa.Float(), nullable=False),
        sa.Column("n_frames", sa.Integer(), nullable=False),
        sa.Column("n_markers", sa.Integer(), nullable=False),
        sa.Column("marker_names", sa.JSON(), nullable=False),
        sa.Column("condition", sa.String(length=200), nullable=False),
        sa.Column("treadmill_speed_m_s", sa.Float(), nullable=True),
        sa.Column("recorded_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("meta", sa.JSON(), nullable=False),
        sa.Column("preprocessed_sha256", sa.String(length=64), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("frame_rate_hz > 0", name=op.f("ck_trial_frame_rate")),
        sa.ForeignKeyConstraint(
            ["arena_id"],
            ["arena.id"],
            name=op.f("fk_trial_arena_id_arena"),
            ondelete="RESTRICT",
        ),
        sa.ForeignKeyConstraint(
            ["subject_id"],
            ["subject.id"],
            name=op.f("fk_trial_subject_id_subject"),
            ondelete="RESTRICT",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_trial")),
        sa.UniqueConstraint(
            "sha256",
            "arena_id",
            "subject_id",
            name=op.f("uq_trial_sha256_arena_id_subject_id"),
        ),
    )
    with op.batch_alter_table("trial", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_trial_arena_id"), ["arena_id"], unique=False
        )
        batch_op.create_index(
            batch_op.f("ix_trial_condition"), ["condition"], unique=False
        )
        batch_op.create_index("ix_trial_recorded_at", ["recorded_at"], unique=False)
        batch_op.create_index(batch_op.f("ix_trial_sha256"), ["sha256"], unique=False)
        batch_op.create_index(
            batch_op.f("ix_trial_subject_id"), ["subject_id"], unique=False
        )


def downgrade() -> None:

    with op.batch_alter_table("trial", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_trial_subject_id"))
        batch_op.drop_index(batch_op.f("ix_trial_sha256"))
        batch_op.drop_index("ix_trial_recorded_at")
        batch_op.drop_index(batch_op.f("ix_trial_condition"))
        batch_op.drop_index(batch_op.f("ix_trial_arena_id"))

    op.drop_table("trial")
    with op.batch_alter_table("subject", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_subject_marker_set_id"))

    op.drop_table("subject")
    with op.batch_alter_table("scan", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_scan_sha256"))
        batch_op.drop_index(batch_op.f("ix_scan_arena_id"))

    op.drop_table("scan")
    op.drop_table("token")
    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.drop_index("ix_score_target")
        batch_op.drop_index(batch_op.f("ix_score_profile_hash"))
        batch_op.drop_index(batch_op.f("ix_score_measure"))

    op.drop_table("score")
    with op.batch_alter_table("profile", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_profile_hash"))

    op.drop_table("profile")
    op.drop_table("marker_set")
    with op.batch_alter_table("job", schema=None) as batch_op:
        batch_op.drop_index("ix_job_target")
        batch_op.drop_index("ix_job_state_created")

    op.drop_table("job")
    op.drop_table("arena")
