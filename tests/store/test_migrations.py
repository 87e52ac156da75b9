"""The migrations are the only source of the schema, on both dialects."""

from __future__ import annotations

import json

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


def test_budget_migration_moves_rule_parameters_and_back(db: Database) -> None:
    """0008: per-rule budgets and levels go, the slope threshold becomes a calibration_slope rule."""
    migrate.downgrade(db.engine, "0007")
    old = {
        "chart": ("calibration_chart", {"odds_ratio": 2.0, "false_alarms_per_year": 1.0}),
        "calibration-slope-weekly": ("metric_threshold", {
            "metric": "calibration_slope", "lower": 0.8, "upper": 1.2, "interval_excludes": 1.0,
            "min_n": 300, "granularity": "week"}),
        "brier-cap": ("metric_threshold", {"metric": "brier", "upper": 0.2}),
        "ell": ("excess_log_loss", {"level": 0.01, "min_labeled": 200}),
        "feed": ("starvation", {"max_silence_hours": 12.0, "max_unlabeled_share": 0.5}),
    }
    with db.engine.begin() as conn:
        conn.execute(sa.text("INSERT INTO models (name, description, outcome_lag_days, implicit_negatives, "
                             "segment_keys, settings_generation, created_at, updated_at) VALUES "
                             "('m', '', 0, false, '[]', 1, '2026-01-01', '2026-01-01')"))
        model_id = conn.execute(sa.text("SELECT id FROM models")).scalar_one()
        for name, (kind, params) in old.items():
            conn.execute(sa.text(
                "INSERT INTO alarm_rules (model_id, name, kind, params, enabled, is_default, created_at, "
                "updated_at) VALUES (:m, :n, :k, :p, true, true, '2026-01-01', '2026-01-01')"),
                {"m": model_id, "n": name, "k": kind, "p": json.dumps(params)})
    migrate.upgrade(db.engine)
    rules = _rules(db)
    assert rules["chart"] == ("calibration_chart", {"odds_ratio": 2.0})
    assert rules["calibration-slope-weekly"] == ("calibration_slope", {
        "granularity": "week", "lower": 0.8, "upper": 1.2, "min_labeled": 300})
    assert rules["brier-cap"] == old["brier-cap"]
    assert rules["ell"] == ("excess_log_loss", {"min_labeled": 200})
    assert rules["feed"] == ("starvation", {"max_silence_hours": 12.0})
    assert db.scalar("SELECT false_alarms_per_year FROM models") == 1.0
    migrate.downgrade(db.engine, "0007")
    back = _rules(db)
    assert back["calibration-slope-weekly"] == old["calibration-slope-weekly"]
    assert back["ell"] == old["ell"]
    migrate.upgrade(db.engine)


def _rules(db: Database) -> dict[str, tuple[str, dict]]:
    with db.engine.connect() as conn:
        rows = conn.execute(sa.text("SELECT name, kind, params FROM alarm_rules")).all()
    return {n: (k, json.loads(p) if isinstance(p, str) else p) for n, k, p in rows}
