"""Grid spacing named as everywhere else: scan.dx_m and scan.dy_m (were grid_dx_m,
grid_dy_m), and the score heightmap_dx_m (was heightmap_cell_m).

Recipes are not touched: their JSON is what their hash (the key of their scores) is taken
on; old parameter names are translated when read (service/pipeline/recipes.py).

Revision ID: 0004_unit_names
Revises: 0003_recipes
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004_unit_names"
down_revision = "0003_recipes"
branch_labels = None
depends_on = None

COLUMNS = (("grid_dx_m", "dx_m"), ("grid_dy_m", "dy_m"))
SCORES = (("heightmap_cell_m", "heightmap_dx_m"),)


def _rename(columns: tuple[tuple[str, str], ...], scores: tuple[tuple[str, str], ...]) -> None:
    with op.batch_alter_table("scan", schema=None) as batch_op:
        for old, new in columns:
            batch_op.alter_column(old, new_column_name=new)
    update = sa.text("UPDATE score SET measure = :new WHERE measure = :old")
    for old, new in scores:
        op.get_bind().execute(update, {"old": old, "new": new})


def upgrade() -> None:
    _rename(COLUMNS, SCORES)


def downgrade() -> None:
    _rename(tuple((new, old) for old, new in COLUMNS), tuple((new, old) for old, new in SCORES))
