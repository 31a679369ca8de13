"""Alembic environment for gaitscape's storage schema."""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection, create_engine, pool

from storage.models import Base

config = context.config
target_metadata = Base.metadata


def _configure(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        # SQLite cannot ALTER most things; batch mode copies the table instead.
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def _url() -> str:
    url = context.get_x_argument(as_dictionary=True).get("url")
    return url or config.get_main_option("sqlalchemy.url") or ""


def run_offline() -> None:
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _configure(connection)
        return
    engine = create_engine(_url(), poolclass=pool.NullPool)
    with engine.connect() as conn:
        _configure(conn)
        conn.commit()


if context.is_offline_mode():
    run_offline()
else:
    run_online()
