"""A migrated database of its own for one bench run: a PostgreSQL schema dropped afterwards, or
a SQLite file."""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import sqlalchemy as sa

from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine


@contextmanager
def migrated_postgres_schema(base_url: str) -> Iterator[str]:
    """Yield a database URL whose search path is a fresh schema at head; drop it on exit."""
    schema = f"calibrant_bench_{uuid.uuid4().hex[:8]}"
    admin = sa.create_engine(base_url)
    with admin.begin() as conn:
        conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    try:
        sep = "&" if "?" in base_url else "?"
        url = f"{base_url}{sep}options=-csearch_path%3D{schema}"
        engine = make_engine(Settings(database_url=url))
        migrate.upgrade(engine)
        engine.dispose()
        yield url
    finally:
        with admin.begin() as conn:
            conn.exec_driver_sql(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')
        admin.dispose()


def migrated_sqlite(path: Path) -> str:
    """The URL of a SQLite file at ``path``, migrated to head."""
    url = f"sqlite:///{path}"
    engine = make_engine(Settings(database_url=url))
    migrate.upgrade(engine)
    engine.dispose()
    return url
