"""Alembic migrations produce exactly the ORM schema (alembic.autogenerate.compare_metadata)."""

from __future__ import annotations

import json
import os

import pytest
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import inspect

from storage.db import (
    alembic_config,
    current_revision,
    head_revision,
    make_engine,
    sqlite_url,
    upgrade,
)
from storage.models import Base


def _diff(engine):
    with engine.connect() as conn:
        ctx = MigrationContext.configure(conn, opts={"compare_type": True})
        return compare_metadata(ctx, Base.metadata)


def test_upgrade_head_on_empty_db_equals_models(tmp_path):
    engine = make_engine(sqlite_url(tmp_path))
    assert current_revision(engine) is None
    upgrade(engine, migrate_empty=True)  # every migration, as an old store gets them
    heads = ScriptDirectory.from_config(alembic_config()).get_heads()
    assert len(heads) == 1  # one line of revisions: a second head means a missing merge
    assert current_revision(engine) == heads[0]
    assert _diff(engine) == []
    tables = set(inspect(engine).get_table_names())
    assert set(Base.metadata.tables) <= tables
    upgrade(engine)  # idempotent
    engine.dispose()


def _schema(engine):
    """Every table's columns, keys, indexes and constraints, as the database reports them."""
    insp = inspect(engine)
    out = {}
    for table in sorted(insp.get_table_names()):
        out[table] = {
            # By name: ALTER TABLE ... ADD COLUMN appends, the models list a column where it
            # reads best; nothing in gaitscape selects by position.
            "columns": sorted(
                (c["name"], str(c["type"]), c["nullable"], str(c.get("default")))
                for c in insp.get_columns(table)
            ),
            "pk": insp.get_pk_constraint(table)["constrained_columns"],
            "fks": sorted(
                (
                    tuple(f["constrained_columns"]),
                    f["referred_table"],
                    tuple(f["referred_columns"]),
                    str(f.get("options")),
                )
                for f in insp.get_foreign_keys(table)
            ),
            "indexes": sorted(
                (i["name"], tuple(i["column_names"]), bool(i["unique"]))
                for i in insp.get_indexes(table)
            ),
            "unique": sorted(
                (u["name"], tuple(u["column_names"])) for u in insp.get_unique_constraints(table)
            ),
            "checks": sorted(
                (c["name"], " ".join(c["sqltext"].split()))
                for c in insp.get_check_constraints(table)
            ),
        }
    return out


def test_new_store_built_from_models_equals_the_migrated_one(tmp_path):
    # A new, empty store skips the migrations (start-up time) and is built from the models:
    # it must be exactly what the migrations build, down to check constraints and index
    # names, which compare_metadata does not look at.
    created = make_engine(sqlite_url(tmp_path / "created"))
    migrated = make_engine(sqlite_url(tmp_path / "migrated"))
    upgrade(created)
    upgrade(migrated, migrate_empty=True)
    assert current_revision(created) == current_revision(migrated) == head_revision()
    a, b = _schema(created), _schema(migrated)
    assert set(a) == set(b)
    for table in a:
        assert a[table] == b[table], table
    assert any(v["checks"] for v in a.values())  # the comparison saw constraints
    upgrade(created)  # at head now: nothing to do
    created.dispose()
    migrated.dispose()


def test_a_store_with_tables_but_no_revision_is_not_rebuilt(tmp_path):
    # Tables without Alembic's record are not "empty": the models must not be laid over them.
    from sqlalchemy import text

    engine = make_engine(sqlite_url(tmp_path))
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE stray (x INTEGER)"))
    upgrade(engine)  # the migrations run (and succeed beside the stray table)
    assert current_revision(engine) == head_revision()
    assert "stray" in inspect(engine).get_table_names()
    engine.dispose()


@pytest.mark.postgres
@pytest.mark.skipif(not os.environ.get("GAITSCAPE_TEST_POSTGRES_URL"), reason="no PostgreSQL")
def test_upgrade_head_on_postgres_equals_models():
    engine = make_engine(os.environ["GAITSCAPE_TEST_POSTGRES_URL"])
    upgrade(engine, migrate_empty=True)
    assert _diff(engine) == []


def _snapshot(engine):
    """Every row of every table, as sorted lists of (column, value) pairs as strings."""
    from sqlalchemy import MetaData, select

    meta = MetaData()
    meta.reflect(bind=engine)
    out = {}
    with engine.connect() as conn:
        for name, table in meta.tables.items():
            if name == "alembic_version":
                continue
            rows = conn.execute(select(table)).mappings().all()
            out[name] = sorted(tuple(sorted((k, str(v)) for k, v in row.items())) for row in rows)
    return out


def _renamed(rows, old, new, extra=()):
    return sorted(
        tuple(sorted([*((new if k == old else k, v) for k, v in row), *extra])) for row in rows
    )


def test_upgrade_from_the_second_release_keeps_every_row(tmp_path):
    # A store at revision 0002_studies (the first release's "profiles"), filled through
    # plain SQL for the renamed tables and the repository for the rest, then upgraded to
    # head: every row survives; profiles become recipes, profile_hash becomes recipe_hash,
    # scores gain an empty note.
    from sqlalchemy import text

    from storage import repo
    from storage.db import make_sessionmaker

    engine = make_engine(sqlite_url(tmp_path))
    upgrade(engine, "0002_studies")
    with make_sessionmaker(engine)() as session:
        arena = repo.create_arena(session=session, name="tray", kind="runway")
        roles = {"anterior": "a", "posterior": "b", "feet": {"LF": "c", "RF": "d"}}
        subject = repo.create_subject(session=session, label="s1", species="x", marker_roles=roles)
        repo.create_token(session=session, scopes=["read"], label="old")
        arena_id, subject_id = arena.id, subject.id
    now = "2026-12-01 10:00:00.000000"
    with engine.begin() as conn:
        conn.execute(
            text(
                "INSERT INTO trial (id, arena_id, subject_id, sha256, filename, format, units,"
                " size_bytes, frame_rate_hz, n_frames, n_markers, marker_names, condition,"
                " meta, created_at) VALUES (1, :a, :s, :h, 't.csv', 'csv', 'mm', 10, 300.0, 20,"
                ' 4, \'["a", "b", "c", "d"]\', \'\', \'{}\', :now)'
            ),
            {"a": arena_id, "s": subject_id, "h": "ab" * 32, "now": now},
        )
        conn.execute(
            text(
                "INSERT INTO profile (id, name, version, parameters, hash, created_at)"
                " VALUES (1, 'default', 1, '{\"a\": 1}', :h, :now)"
            ),
            {"h": "cd" * 32, "now": now},
        )
        conn.execute(
            text(
                "INSERT INTO score (id, target_kind, target_id, profile_hash, measure, value,"
                " unit, code_version, input_sha256, computed_at) VALUES (1, 'trial', 1, :p,"
                " 'rqa_det', 0.9, '1', '0.1.0', :h, :now)"
            ),
            {"p": "cd" * 32, "h": "ab" * 32, "now": now},
        )
        conn.execute(
            text(
                "INSERT INTO job (id, kind, target_kind, target_id, profile_hash, state,"
                " progress, message, attempts, max_attempts, created_at, updated_at)"
                " VALUES (1, 'score', 'trial', 1, :p, 'queued', 0.0, '', 0, 3, :now, :now)"
            ),
            {"p": "cd" * 32, "now": now},
        )
    before = _snapshot(engine)
    assert all(before[t] for t in ("arena", "subject", "trial", "profile", "score", "job", "token"))
    upgrade(engine)
    after = _snapshot(engine)
    assert "profile" not in after
    assert after["recipe"] == before["profile"]
    assert after["score"] == _renamed(
        before["score"], "profile_hash", "recipe_hash", extra=[("note", "")]
    )
    assert after["job"] == _renamed(before["job"], "profile_hash", "recipe_hash")
    for table in ("arena", "subject", "trial", "token", "study", "marker_set"):
        assert after[table] == before[table], table
    assert _diff(engine) == []
    engine.dispose()


def test_head_revision_read_from_files_is_alembics_head(tmp_path):
    # storage.db.upgrade skips Alembic when the database is at head_revision(); that id
    # must be the head Alembic itself finds, or a new migration would be skipped.
    from alembic.script import ScriptDirectory
    from sqlalchemy import text

    from storage.db import head_revision

    assert head_revision() == ScriptDirectory.from_config(alembic_config()).get_current_head()
    engine = make_engine(sqlite_url(tmp_path))
    upgrade(engine, "0002_studies")
    upgrade(engine)  # not at head: Alembic runs
    with engine.connect() as connection:
        assert connection.execute(text("SELECT version_num FROM alembic_version")).scalar() == (
            head_revision()
        )
    upgrade(engine)  # at head: a no-op
    engine.dispose()


def test_upgrade_from_the_third_release_keeps_every_row(tmp_path):
    # A store at revision 0003_recipes with a gridded scan, a recipe stored under the old
    # parameter names and a heightmap_cell_m score; upgraded to head, every row survives:
    # the scan's grid_dx_m/grid_dy_m become dx_m/dy_m, the score is renamed heightmap_dx_m,
    # and the recipe (its JSON and the hash its scores are keyed by) is left as it was.
    from sqlalchemy import text

    from storage import repo
    from storage.db import make_sessionmaker

    engine = make_engine(sqlite_url(tmp_path))
    upgrade(engine, "0003_recipes")
    with make_sessionmaker(engine)() as session:
        arena = repo.create_arena(session=session, name="tray", kind="runway")
        repo.create_token(session=session, scopes=["read"], label="old")
        arena_id = arena.id
    now = "2026-12-02 10:00:00.000000"
    recipe = '{"heightmap": {"cell_m": 0.001}}'
    with engine.begin() as conn:
        conn.execute(
            text(
                "INSERT INTO scan (id, arena_id, sha256, filename, format, kind, units,"
                " size_bytes, grid_nx, grid_ny, meta, grid_dx_m, grid_dy_m, created_at)"
                " VALUES (1, :a, :h, 'g.npy', 'npy', 'heightmap', 'm', 10, 6, 5, '{}', 0.001,"
                " 0.002, :now)"
            ),
            {"a": arena_id, "h": "ab" * 32, "now": now},
        )
        conn.execute(
            text(
                "INSERT INTO recipe (id, name, version, parameters, hash, created_at)"
                " VALUES (1, 'default', 1, :p, :h, :now)"
            ),
            {"p": recipe, "h": "cd" * 32, "now": now},
        )
        for k, measure in enumerate(("heightmap_cell_m", "sq_m"), start=1):
            conn.execute(
                text(
                    "INSERT INTO score (id, target_kind, target_id, recipe_hash, measure, value,"
                    " unit, code_version, input_sha256, computed_at, note) VALUES (:k, 'scan',"
                    " 1, :p, :m, 0.001, 'm', '0.2.0', :h, :now, 'cell fixed')"
                ),
                {"k": k, "m": measure, "p": "cd" * 32, "h": "ab" * 32, "now": now},
            )
    before = _snapshot(engine)
    upgrade(engine)
    after = _snapshot(engine)
    scan = _renamed(_renamed(before["scan"], "grid_dx_m", "dx_m"), "grid_dy_m", "dy_m")
    assert after["scan"] == scan
    assert ("dx_m", "0.001") in after["scan"][0] and ("dy_m", "0.002") in after["scan"][0]
    renamed = [
        tuple(sorted((k, "heightmap_dx_m" if v == "heightmap_cell_m" else v) for k, v in row))
        for row in before["score"]
    ]
    assert after["score"] == sorted(renamed)
    assert {dict(r)["measure"] for r in after["score"]} == {"heightmap_dx_m", "sq_m"}
    for table in ("arena", "recipe", "token", "study", "derived", "job", "trial"):
        assert after[table] == before[table], table
    assert dict(after["recipe"][0])["parameters"] == str(json.loads(recipe))
    assert _diff(engine) == []
    # and back: the downgrade restores the third release's names
    from alembic import command

    with engine.begin() as conn:
        cfg = alembic_config(engine)
        cfg.attributes["connection"] = conn
        command.downgrade(cfg, "0003_recipes")
    assert _snapshot(engine)["score"] == before["score"]
    assert _snapshot(engine)["scan"] == before["scan"]
    engine.dispose()
