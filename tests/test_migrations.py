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


def _snapshot(engine):
    """Every row of every table, as sorted tuples of strings (types vary by backend)."""
    from sqlalchemy import MetaData, select

    meta = MetaData()
    meta.reflect(bind=engine)
    out = {}
    with engine.connect() as conn:
        for name, table in meta.tables.items():
            if name == "alembic_version":
                continue
            rows = conn.execute(select(table)).all()
            out[name] = sorted(tuple(str(v) for v in row) for row in rows)
    return out


def test_upgrade_from_the_first_release_keeps_every_row(tmp_path):
    # A store created by the first release (revision 0001_initial), filled through the
    # repository, then upgraded to head: every row of every old table is unchanged.
    import numpy as np

    from measures import Score
    from storage import repo
    from storage.artifacts import ArtifactStore
    from storage.db import make_sessionmaker

    engine = make_engine(sqlite_url(tmp_path))
    upgrade(engine, "0001_initial")
    store = ArtifactStore(tmp_path / "store")
    with make_sessionmaker(engine)() as session:
        arena = repo.create_arena(session=session, name="tray", kind="runway")
        roles = {"anterior": "a", "posterior": "b", "feet": {"LF": "c", "RF": "d"}}
        subject = repo.create_subject(session=session, label="s1", species="x", marker_roles=roles)
        csv = tmp_path / "t.csv"
        walk = np.cumsum(np.ones((20, 12)), axis=0)
        header = "time," + ",".join(f"{m}_{ax}" for m in "abcd" for ax in "xyz")
        rows = [",".join([f"{k / 300:.9f}", *map(str, r)]) for k, r in enumerate(walk)]
        csv.write_text(header + "\n" + "\n".join(rows) + "\n")
        trial, _ = repo.ingest_trial(
            session=session, store=store, staged=store.put_file(csv), filename="t.csv",
            meta={"arena_id": arena.id, "subject_id": subject.id, "units": "mm",
                  "frame_rate_hz": 300.0},
        )  # fmt: skip
        prof, _ = repo.create_profile(session=session, name="default", parameters={"a": 1})
        repo.save_scores(
            session=session, target_kind="trial", target_id=trial.id, profile_hash=prof.hash,
            scores=[Score("rqa_det", 0.9, "1")], code_version="0.1.0", input_sha256=trial.sha256,
        )  # fmt: skip
        repo.enqueue_job(session=session, kind="score", target_kind="trial", target_id=trial.id)
        repo.create_token(session=session, scopes=["read"], label="old")
    before = _snapshot(engine)
    assert all(before[t] for t in ("arena", "subject", "trial", "profile", "score", "job", "token"))
    upgrade(engine)
    after = _snapshot(engine)
    assert {t: after[t] for t in before} == before
    assert _diff(engine) == []
    engine.dispose()
