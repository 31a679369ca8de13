"""Engine, sessions and migrations.

Nothing is built at import time: callers make an engine from a URL and pass it on.
"""

from __future__ import annotations

import ast
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import URL, Engine, create_engine, event, inspect, make_url, text
from sqlalchemy.orm import Session, sessionmaker

if TYPE_CHECKING:
    from alembic.config import Config

__all__ = [
    "DB_FILENAME",
    "alembic_config",
    "current_revision",
    "head_revision",
    "make_engine",
    "make_sessionmaker",
    "sqlite_url",
    "upgrade",
]

DB_FILENAME = "gaitscape.sqlite"
_HERE = Path(__file__).resolve().parent


def sqlite_url(data_dir: str | Path) -> str:
    """URL of the embedded default database ``DATA/gaitscape.sqlite`` (creates DATA)."""
    path = Path(data_dir).expanduser().resolve()
    path.mkdir(parents=True, exist_ok=True)
    return f"sqlite:///{path / DB_FILENAME}"


def make_engine(url: str | URL, *, echo: bool = False, busy_timeout_ms: int = 10_000) -> Engine:
    """An engine for any SQLAlchemy URL.

    For SQLite every new connection gets foreign keys on, a busy timeout (so a second
    writer waits instead of failing at once), and WAL for file databases (readers do not
    block the writer).
    """
    url = make_url(url)
    kwargs: dict[str, Any] = {"echo": echo}
    if url.get_backend_name() == "sqlite":
        kwargs["connect_args"] = {"timeout": busy_timeout_ms / 1000.0}
        in_memory = url.database in (None, "", ":memory:") or "mode=memory" in str(url)
        if not in_memory:
            # A request holds its connection while an upload streams in; the default pool
            # (5 + 10) ran dry under 40 concurrent clients (tests/test_load.py). File-backed
            # SQLite connections are cheap, and WAL lets the readers run side by side.
            kwargs.update(pool_size=32, max_overflow=64)
        engine = create_engine(url, **kwargs)
        in_memory = url.database in (None, "", ":memory:") or "mode=memory" in str(url)
        _install_sqlite_pragmas(engine, busy_timeout_ms=busy_timeout_ms, wal=not in_memory)
        return engine
    # Server databases: the same reason for a deep pool (40 concurrent clients gave 503s
    # with the default 5 + 10 on PostgreSQL, tests/test_load.py), kept under PostgreSQL's
    # default max_connections of 100 for one server process; pre-ping replaces connections
    # that died with a database restart.
    kwargs.update(pool_pre_ping=True, pool_size=24, max_overflow=48, pool_timeout=60)
    return create_engine(url, **kwargs)


def _install_sqlite_pragmas(engine: Engine, *, busy_timeout_ms: int, wal: bool) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        cursor = dbapi_connection.cursor()
        try:
            cursor.execute("PRAGMA foreign_keys=ON")
            cursor.execute(f"PRAGMA busy_timeout={int(busy_timeout_ms)}")
            if wal:
                cursor.execute("PRAGMA journal_mode=WAL")
                # NORMAL is durable across application crashes in WAL mode (SQLite docs).
                cursor.execute("PRAGMA synchronous=NORMAL")
        finally:
            cursor.close()


def make_sessionmaker(engine: Engine) -> sessionmaker[Session]:
    """Session factory; objects stay readable after commit (routes serialise them)."""
    return sessionmaker(bind=engine, expire_on_commit=False)


def alembic_config(engine: Engine | None = None) -> Config:
    """Alembic configuration from the packaged ``storage/alembic.ini``."""
    from alembic.config import Config

    cfg = Config(str(_HERE / "alembic.ini"))
    cfg.set_main_option("script_location", str(_HERE / "migrations"))
    if engine is not None:
        cfg.set_main_option(
            "sqlalchemy.url", engine.url.render_as_string(hide_password=False).replace("%", "%%")
        )
    return cfg


def head_revision() -> str:
    """The newest migration's revision id, read from the migration files.

    Parsed with ``ast`` rather than through Alembic, whose import (with Mako and Pygments)
    costs about half a second of the server's start-up; ``tests/test_migrations.py`` checks
    the result against Alembic's own script directory.
    """
    revisions: dict[str, str | None] = {}
    for path in sorted((_HERE / "migrations" / "versions").glob("*.py")):
        found: dict[str, str | None] = {}
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            if isinstance(node, ast.Assign) and len(node.targets) == 1:
                target = node.targets[0]
                if isinstance(target, ast.Name) and target.id in ("revision", "down_revision"):
                    found[target.id] = ast.literal_eval(node.value)
        if found.get("revision"):
            revisions[str(found["revision"])] = found.get("down_revision")
    heads = set(revisions) - {d for d in revisions.values() if d is not None}
    if len(heads) != 1:
        raise RuntimeError(f"migrations must have one head, found {sorted(heads)}")
    return heads.pop()


def _stored_revision(engine: Engine) -> str | None:
    # The version Alembic recorded, read with plain SQL (no Alembic import).
    with engine.connect() as connection:
        if not inspect(connection).has_table("alembic_version"):
            return None
        rows = connection.execute(text("SELECT version_num FROM alembic_version")).all()
    return str(rows[0][0]) if len(rows) == 1 else None


def _create_at_head(engine: Engine) -> bool:
    """Build an empty database from the models and record the head revision.

    Returns False (and writes nothing) when the database holds any table: only a store
    that has never been migrated may skip the migrations. ``tests/test_migrations.py``
    checks that this schema and the migrated one are the same, table by table (columns,
    types, nullability, keys, indexes, unique and check constraints).
    """
    from storage.models import Base

    with engine.begin() as connection:
        if inspect(connection).get_table_names():
            return False
        Base.metadata.create_all(connection)
        connection.execute(
            text("CREATE TABLE alembic_version (version_num VARCHAR(32) NOT NULL, "
                 "CONSTRAINT alembic_version_pkc PRIMARY KEY (version_num))")
        )  # fmt: skip
        connection.execute(
            text("INSERT INTO alembic_version (version_num) VALUES (:v)"), {"v": head_revision()}
        )
    return True


def upgrade(engine: Engine, revision: str = "head", *, migrate_empty: bool = False) -> None:
    """Bring the database schema up to ``revision`` (Alembic, on the engine's connection).

    A database already at the head revision is left alone without loading Alembic, and an
    empty one is built from the models at the head revision (importing and running every
    migration costs a new server about half a second before it answers). Pass
    ``migrate_empty=True`` to run the migrations on an empty database all the same.
    """
    if revision == "head":
        stored = _stored_revision(engine)
        if stored == head_revision():
            return
        if stored is None and not migrate_empty and _create_at_head(engine):
            return
    from alembic import command

    cfg = alembic_config(engine)
    with engine.begin() as connection:
        cfg.attributes["connection"] = connection
        command.upgrade(cfg, revision)


def current_revision(engine: Engine) -> str | None:
    """The Alembic revision the database is at (None when never migrated)."""
    from alembic.runtime.migration import MigrationContext

    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()
