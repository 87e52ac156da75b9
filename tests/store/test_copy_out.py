"""The report's COPY reader on PostgreSQL: whole output read, errors raised, connection left usable."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from calibrant.store.as_of_rows import _copy_out


def test_copy_out_reads_everything_and_recovers_from_an_error(postgres_schema_url: str) -> None:
    engine = sa.create_engine(postgres_schema_url)
    try:
        with engine.connect() as conn:
            raw = conn.connection.driver_connection
            text = _copy_out(raw.pgconn, b"COPY (SELECT g FROM generate_series(1, 1000) g) TO STDOUT")
            assert text.decode().split() == [str(g) for g in range(1, 1001)]
            with pytest.raises(RuntimeError, match="division by zero"):
                _copy_out(raw.pgconn,
                          b"COPY (SELECT 1 / (g - 500) FROM generate_series(1, 1000) g) TO STDOUT")
            conn.rollback()
            with pytest.raises(RuntimeError, match="did not start"):
                _copy_out(raw.pgconn, b"COPY (SELEC 1) TO STDOUT")
            conn.rollback()
            assert conn.execute(sa.text("SELECT 42")).scalar() == 42
    finally:
        engine.dispose()
