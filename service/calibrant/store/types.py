"""Column types that behave the same on SQLite and PostgreSQL."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import BigInteger, DateTime, Integer, String
from sqlalchemy.engine import Dialect
from sqlalchemy.types import TypeDecorator


class UTCDateTime(TypeDecorator[datetime]):
    """A timezone-aware instant, stored as UTC.

    PostgreSQL keeps ``timestamptz``; SQLite has no time zones and hands back
    naive values, so we store UTC there and re-attach it on the way out.
    Naive datetimes are refused on the way in: every time in Calibrant is an
    instant.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime reached the database layer")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: Any, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)


def case_id_type(length: int = 200) -> String:
    """Client ids compared byte-wise: the "C" collation is faster for b-tree keys on PostgreSQL."""
    return String(length).with_variant(String(length, collation="C"), "postgresql")


# SQLite only auto-increments a column declared exactly INTEGER PRIMARY KEY.
BigIntPK = BigInteger().with_variant(Integer(), "sqlite")

# The ids each key column can hold. A looked-up id outside them names no row; sending it to
# the database would be an error (an int beyond 64 bits cannot even be bound on SQLite).
INTEGER_IDS = range(-(2**31), 2**31)
BIG_INTEGER_IDS = range(-(2**63), 2**63)
