"""CALIBRANT_POSTGRES_PREPARED_STATEMENTS=false turns psycopg's server-side preparing off, which a
transaction-mode pooler needs (tests/bench/pooler_transaction_mode.py shows the failure without it)."""

from __future__ import annotations

from calibrant.config import Settings
from calibrant.store.engine import make_engine


def _threshold(url: str, **settings: object) -> object:
    engine = make_engine(Settings(database_url=url, **settings))
    with engine.connect() as conn:
        raw = conn.connection.driver_connection
        threshold = raw.prepare_threshold  # type: ignore[union-attr]
    engine.dispose()
    return threshold


def test_preparing_is_psycopgs_default_unless_turned_off(postgres_schema_url: str) -> None:
    assert _threshold(postgres_schema_url) == 5  # psycopg 3's documented default
    assert _threshold(postgres_schema_url, postgres_prepared_statements=False) is None
