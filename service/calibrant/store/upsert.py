"""The dialect's own INSERT, whose ``on_conflict_do_*`` both SQLite and PostgreSQL support."""

from __future__ import annotations

from typing import Any

from sqlalchemy.dialects.postgresql import insert as postgresql_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert

_BY_DIALECT = {"postgresql": postgresql_insert, "sqlite": sqlite_insert}


def insert_for(dialect_name: str, table: Any) -> Any:
    """``insert(table)`` of the named dialect, for statements with ON CONFLICT."""
    return _BY_DIALECT[dialect_name](table)
