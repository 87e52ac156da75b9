"""Run the Alembic migrations programmatically (``calibrant migrate``, tests)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from alembic import command
from alembic.config import Config
from sqlalchemy import Engine

# The project is installed editable from its checkout (src layout), so the
# top-level migrations/ folder sits two levels above this package.
PROJECT_ROOT = Path(__file__).resolve().parents[3]


def alembic_config(engine: Engine | None = None) -> Config:
    cfg = Config(str(PROJECT_ROOT / "alembic.ini"))
    cfg.set_main_option("script_location", str(PROJECT_ROOT / "migrations"))
    cfg.attributes["engine"] = engine
    return cfg


def _with_connection(engine: Engine, action: Callable[..., None], *args: str) -> None:
    cfg = alembic_config(engine)
    with engine.begin() as conn:
        cfg.attributes["connection"] = conn
        action(cfg, *args)


def upgrade(engine: Engine, revision: str = "heads") -> None:
    _with_connection(engine, command.upgrade, revision)


def downgrade(engine: Engine, revision: str = "base") -> None:
    _with_connection(engine, command.downgrade, revision)


def check(engine: Engine) -> None:
    """Raise if the tables in ``store.tables`` differ from what the migrations build."""
    _with_connection(engine, command.check)
