"""One false-alarm budget per model: a model setting, and rule parameters that no longer carry their own.

- ``models.false_alarms_per_year`` (default 1.0): the budget all of a model's rules share;
- chart rules lose ``false_alarms_per_year``; excess log-loss and score drift rules lose
  ``level`` (each test's level now comes from the rule's share of the budget);
- the default ``calibration-slope-weekly`` rule, a metric threshold on the slope, becomes a
  ``calibration_slope`` rule (plain and robust slope must agree);
- starvation rules lose ``max_unlabeled_share`` (a fixed share of unlabeled cases): outcome
  arrival is now compared with the model's own history.

Dropped parameters are not kept (a stored value would fail the kinds' validation); the
downgrade writes back the old defaults.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-03
"""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

import sqlalchemy as sa
from alembic import op

revision = "0008"
down_revision = "0007"
branch_labels = None
depends_on = None

DROPPED = {
    "calibration_chart": ("false_alarms_per_year",),
    "excess_log_loss": ("level",),
    "score_drift": ("level",),
    "starvation": ("max_unlabeled_share",),
}
RESTORED = {
    "calibration_chart": {"false_alarms_per_year": 1.0},
    "excess_log_loss": {"level": 0.01},
    "score_drift": {"level": 0.01},
    "starvation": {"max_unlabeled_share": 0.5},
}
NEW_KEYS = {
    "calibration_chart": ("budget_weight",),
    "excess_log_loss": ("budget_weight",),
    "score_drift": ("budget_weight",),
    "starvation": ("budget_weight", "history_days", "min_rate_ratio"),
    "metric_threshold": ("budget_weight",),
}
SLOPE_RULE = "calibration-slope-weekly"


def _rules() -> list[tuple[int, str, str, dict[str, Any]]]:
    rows = op.get_bind().execute(sa.text("SELECT id, name, kind, params FROM alarm_rules")).all()
    return [(i, name, kind, json.loads(p) if isinstance(p, str) else dict(p or {}))
            for i, name, kind, p in rows]


def _store(rule_id: int, kind: str, params: dict[str, Any]) -> None:
    op.get_bind().execute(sa.text("UPDATE alarm_rules SET kind = :k, params = :p WHERE id = :i"),
                          {"k": kind, "p": json.dumps(params), "i": rule_id})


def _each_rule(change: Callable[[str, str, dict[str, Any]], tuple[str, dict[str, Any]]]) -> None:
    for rule_id, name, kind, params in _rules():
        new_kind, new_params = change(name, kind, params)
        if (new_kind, new_params) != (kind, params):
            _store(rule_id, new_kind, new_params)


def _up(name: str, kind: str, params: dict[str, Any]) -> tuple[str, dict[str, Any]]:
    if (kind == "metric_threshold" and name == SLOPE_RULE
            and params.get("metric") == "calibration_slope" and params.get("interval_excludes") == 1.0):
        return "calibration_slope", {
            "granularity": params.get("granularity", "week"),
            "lower": params.get("lower", 0.8), "upper": params.get("upper", 1.2),
            "min_labeled": max(int(params.get("min_n", 200)), 20),
        }
    return kind, {k: v for k, v in params.items() if k not in DROPPED.get(kind, ())}


def _down(name: str, kind: str, params: dict[str, Any]) -> tuple[str, dict[str, Any]]:
    if kind == "calibration_slope":
        return "metric_threshold", {
            "metric": "calibration_slope", "lower": params.get("lower", 0.8),
            "upper": params.get("upper", 1.2), "interval_excludes": 1.0,
            "min_n": params.get("min_labeled", 200), "granularity": params.get("granularity", "week"),
        }
    kept = {k: v for k, v in params.items() if k not in NEW_KEYS.get(kind, ())}
    return kind, {**kept, **RESTORED.get(kind, {})}


def upgrade() -> None:
    with op.batch_alter_table("models") as batch:
        batch.add_column(sa.Column("false_alarms_per_year", sa.Double(), nullable=False,
                                   server_default=sa.text("1.0")))
    _each_rule(_up)


def downgrade() -> None:
    _each_rule(_down)
    with op.batch_alter_table("models") as batch:
        batch.drop_column("false_alarms_per_year")
