"""Studies: a study table and membership tables for arenas, subjects and trials.

Revision ID: 0002_studies
Revises: 0001_initial
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002_studies"
down_revision = "0001_initial"
branch_labels = None
depends_on = None

MEMBERS = (("study_arenas", "arena"), ("study_subjects", "subject"), ("study_trials", "trial"))


def upgrade() -> None:
    op.create_table(
        "study",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_study")),
        sa.UniqueConstraint("name", name=op.f("uq_study_name")),
    )
    for table, member in MEMBERS:
        op.create_table(
            table,
            sa.Column("study_id", sa.Integer(), nullable=False),
            sa.Column(f"{member}_id", sa.Integer(), nullable=False),
            sa.ForeignKeyConstraint(
                ["study_id"], ["study.id"], name=op.f(f"fk_{table}_study_id_study"),
                ondelete="CASCADE",
            ),
            sa.ForeignKeyConstraint(
                [f"{member}_id"], [f"{member}.id"],
                name=op.f(f"fk_{table}_{member}_id_{member}"), ondelete="CASCADE",
            ),
            sa.PrimaryKeyConstraint("study_id", f"{member}_id", name=op.f(f"pk_{table}")),
        )  # fmt: skip


def downgrade() -> None:
    for table, _ in reversed(MEMBERS):
        op.drop_table(table)
    op.drop_table("study")
