"""Recipes (the first release's "profiles"), score notes and derived arrays.

Revision ID: 0003_recipes
Revises: 0002_studies
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003_recipes"
down_revision = "0002_studies"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "recipe",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("parameters", sa.JSON(), nullable=False),
        sa.Column("hash", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_recipe")),
        sa.UniqueConstraint("name", "version", name=op.f("uq_recipe_name_version")),
    )
    with op.batch_alter_table("recipe", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_recipe_hash"), ["hash"], unique=False)
    op.execute(
        "INSERT INTO recipe (id, name, version, parameters, hash, created_at) "
        "SELECT id, name, version, parameters, hash, created_at FROM profile"
    )
    with op.batch_alter_table("profile", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_profile_hash"))
    op.drop_table("profile")

    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_score_profile_hash"))
        batch_op.drop_constraint(
            "uq_score_target_kind_target_id_profile_hash_measure", type_="unique"
        )
        batch_op.alter_column("profile_hash", new_column_name="recipe_hash")
        batch_op.add_column(sa.Column("note", sa.Text(), nullable=False, server_default=""))
    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_score_recipe_hash"), ["recipe_hash"], unique=False)
        batch_op.create_unique_constraint(
            batch_op.f("uq_score_target_kind_target_id_recipe_hash_measure"),
            ["target_kind", "target_id", "recipe_hash", "measure"],
        )
        batch_op.alter_column("note", server_default=None)
    with op.batch_alter_table("job", schema=None) as batch_op:
        batch_op.alter_column("profile_hash", new_column_name="recipe_hash")

    op.create_table(
        "derived",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("target_kind", sa.String(length=10), nullable=False),
        sa.Column("target_id", sa.Integer(), nullable=False),
        sa.Column("recipe_hash", sa.String(length=64), nullable=False),
        sa.Column("kind", sa.String(length=50), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "target_kind IN ('scan', 'trial')", name=op.f("ck_derived_target_kind")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_derived")),
        sa.UniqueConstraint(
            "target_kind", "target_id", "recipe_hash", "kind",
            name=op.f("uq_derived_target_kind_target_id_recipe_hash_kind"),
        ),
    )  # fmt: skip
    with op.batch_alter_table("derived", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_derived_recipe_hash"), ["recipe_hash"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("derived", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_derived_recipe_hash"))
    op.drop_table("derived")
    with op.batch_alter_table("job", schema=None) as batch_op:
        batch_op.alter_column("recipe_hash", new_column_name="profile_hash")
    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_score_recipe_hash"))
        batch_op.drop_constraint(
            "uq_score_target_kind_target_id_recipe_hash_measure", type_="unique"
        )
        batch_op.drop_column("note")
        batch_op.alter_column("recipe_hash", new_column_name="profile_hash")
    with op.batch_alter_table("score", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_score_profile_hash"), ["profile_hash"], unique=False)
        batch_op.create_unique_constraint(
            batch_op.f("uq_score_target_kind_target_id_profile_hash_measure"),
            ["target_kind", "target_id", "profile_hash", "measure"],
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
    op.execute(
        "INSERT INTO profile (id, name, version, parameters, hash, created_at) "
        "SELECT id, name, version, parameters, hash, created_at FROM recipe"
    )
    with op.batch_alter_table("profile", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_profile_hash"), ["hash"], unique=False)
    op.drop_table("recipe")
