"""Alembic migrations produce exactly the ORM schema (alembic.autogenerate.compare_metadata)."""

from __future__ import annotations

import os

import pytest
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import inspect

from storage.db import alembic_config, current_revision, make_engine, sqlite_url, upgrade
from storage.models import Base


def _diff(engine):
    with engine.connect() as conn:
        ctx = MigrationContext.configure(conn, opts={"compare_type": True})
        return compare_metadata(ctx, Base.metadata)


def test_upgrade_head_on_empty_db_equals_models(tmp_path):
    engine = make_engine(sqlite_url(tmp_path))
    assert current_revision(engine) is None
    upgrade(engine)
    heads = ScriptDirectory.from_config(alembic_config()).get_heads()
    assert len(heads) == 1  # one line of revisions: a second head means a missing merge
    assert current_revision(engine) == heads[0]
    assert _diff(engine) == []
    tables = set(inspect(engine).get_table_names())
    assert set(Base.metadata.tables) <= tables
    upgrade(engine)  # idempotent
    engine.dispose()


@pytest.mark.postgres
@pytest.mark.skipif(not os.environ.get("GAITSCAPE_TEST_POSTGRES_URL"), reason="no PostgreSQL")
def test_upgrade_head_on_postgres_equals_models():
    engine = make_engine(os.environ["GAITSCAPE_TEST_POSTGRES_URL"])
    upgrade(engine)
    assert _diff(engine) == []
