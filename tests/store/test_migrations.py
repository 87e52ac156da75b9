"""The migrations are the only source of the schema, on both dialects."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine
from calibrant.store.tables import Base
from tests.conftest import Database


def test_upgrade_matches_tables_and_round_trips(db: Database) -> None:
    # The fixture database is already at head; alembic check compares it with tables.py.
    migrate.check(db.engine)
    migrate.downgrade(db.engine, "base")
    names = set(sa.inspect(db.engine).get_table_names())
    assert not names & {t.name for t in Base.metadata.sorted_tables}
    migrate.upgrade(db.engine)
    migrate.check(db.engine)


def test_check_fails_when_tables_drift(db: Database) -> None:
    with db.engine.begin() as conn:
        conn.exec_driver_sql("CREATE INDEX ix_drift ON predictions (probability)")
    with pytest.raises(Exception, match="New upgrade operations detected"):
        migrate.check(db.engine)
    with db.engine.begin() as conn:
        conn.exec_driver_sql("DROP INDEX ix_drift")


def test_probability_column_is_float64(db: Database) -> None:
    columns = {c["name"]: c for c in sa.inspect(db.engine).get_columns("predictions")}
    type_name = str(columns["probability"]["type"]).upper()
    # PostgreSQL: DOUBLE PRECISION (float8). SQLite: REAL, which is always 8 bytes there.
    assert type_name in {"DOUBLE PRECISION", "FLOAT", "DOUBLE", "REAL"}
    if db.dialect == "postgresql":
        assert type_name == "DOUBLE PRECISION"


def test_sqlite_connection_pragmas(tmp_path) -> None:
    engine = make_engine(Settings(database_url=f"sqlite:///{tmp_path / 'p.db'}"))
    with engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 30000
    engine.dispose()
