"""Engine factory: SQLite pragmas (SQLite documentation, "PRAGMA statements")."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone

import pytest
from sqlalchemy import text
from sqlalchemy.exc import IntegrityError

from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade
from storage.models import Arena, Scan


@pytest.fixture
def engine(tmp_path):
    eng = make_engine(sqlite_url(tmp_path / "data"))
    upgrade(eng)
    yield eng
    eng.dispose()


def test_sqlite_url_points_into_the_data_dir(tmp_path):
    url = sqlite_url(tmp_path / "d")
    assert url == f"sqlite:///{(tmp_path / 'd').resolve()}/gaitscape.sqlite"
    assert (tmp_path / "d").is_dir()


def test_pragmas_are_set_on_every_connection(engine):
    with engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 10_000


def test_foreign_keys_are_enforced(engine):
    with make_sessionmaker(engine)() as session:
        session.add(Scan(arena_id=999, sha256="a" * 64, format="ply", kind="points",
                         units="m", size_bytes=1))  # fmt: skip
        with pytest.raises(IntegrityError):
            session.commit()


def test_datetimes_come_back_aware_utc(engine):
    plus2 = timezone(timedelta(hours=2))
    with make_sessionmaker(engine)() as session:
        arena = Arena(name="a", kind="runway", notes="")
        session.add(arena)
        session.commit()
        arena.created_at = datetime(2026, 5, 1, 12, 0, tzinfo=plus2)
        session.commit()
        session.expire_all()
        got = session.get(Arena, arena.id).created_at
    assert got == datetime(2026, 5, 1, 10, 0, tzinfo=UTC) and got.tzinfo is UTC


def test_in_memory_sqlite_works(tmp_path):
    eng = make_engine("sqlite://")
    with eng.connect() as conn:
        assert conn.execute(text("select 1")).scalar() == 1
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
