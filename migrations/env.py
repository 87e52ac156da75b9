"""Alembic environment: one code path for SQLite and PostgreSQL.

The URL comes from ``config.attributes["connection"]`` (tests, ``calibrant
migrate``) or from Settings. Batch mode is used on SQLite only, because SQLite
cannot ALTER most things in place.
"""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from calibrant.config import Settings
from calibrant.store.engine import make_engine
from calibrant.store.schema import Base

target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = context.config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(Settings())
    with engine.connect() as conn:
        _run(conn)
    engine.dispose()


if context.is_offline_mode():
    raise SystemExit("offline SQL generation is not supported; run `calibrant migrate`")
run_migrations_online()
