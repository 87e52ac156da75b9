"""Names of the v1 contract: one spelling (``labeled``), event ``types``, no ``"*"`` version.

- ``alarm_chart_streams.unlabelled_at_maturity`` becomes ``unlabeled_at_maturity``;
- ``webhook_targets.event_kinds`` becomes ``event_types`` (the API calls it ``types``);
- stored rule parameters ``min_labelled`` / ``max_unlabelled_share`` take the one spelling;
- a model-wide (feed) alarm stored its version as ``"*"``, a string a client could
  also post as a real version; it is stored as ``""`` now (no posted version is
  empty), and its ``open_key`` follows.

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03
"""

from __future__ import annotations

import json

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None

PARAM_RENAMES = {"min_labelled": "min_labeled", "max_unlabelled_share": "max_unlabeled_share"}


def _rename_params(renames: dict[str, str]) -> None:
    conn = op.get_bind()
    rows = conn.execute(sa.text("SELECT id, params FROM alarm_rules")).all()
    for rule_id, params in rows:
        doc = json.loads(params) if isinstance(params, str) else dict(params or {})
        if not any(old in doc for old in renames):
            continue
        doc = {renames.get(k, k): v for k, v in doc.items()}
        conn.execute(sa.text("UPDATE alarm_rules SET params = :p WHERE id = :i"),
                     {"p": json.dumps(doc), "i": rule_id})


def _move_version(old: str, new: str) -> None:
    conn = op.get_bind()
    conn.execute(sa.text("UPDATE alarms SET version = :new WHERE version = :old"), {"new": new, "old": old})
    rows = conn.execute(sa.text("SELECT id, open_key FROM alarms WHERE open_key IS NOT NULL")).all()
    for alarm_id, key in rows:
        parts = key.split("|")
        if len(parts) == 4 and parts[1] == old:
            parts[1] = new
            conn.execute(sa.text("UPDATE alarms SET open_key = :k WHERE id = :i"),
                         {"k": "|".join(parts), "i": alarm_id})


def upgrade() -> None:
    with op.batch_alter_table("alarm_chart_streams") as batch:
        batch.alter_column("unlabelled_at_maturity", new_column_name="unlabeled_at_maturity",
                           existing_type=sa.Integer(), existing_nullable=False)
    with op.batch_alter_table("webhook_targets") as batch:
        batch.alter_column("event_kinds", new_column_name="event_types", existing_type=sa.JSON(),
                           existing_nullable=False)
    _rename_params(PARAM_RENAMES)
    _move_version("*", "")


def downgrade() -> None:
    _move_version("", "*")
    _rename_params({new: old for old, new in PARAM_RENAMES.items()})
    with op.batch_alter_table("webhook_targets") as batch:
        batch.alter_column("event_types", new_column_name="event_kinds", existing_type=sa.JSON(),
                           existing_nullable=False)
    with op.batch_alter_table("alarm_chart_streams") as batch:
        batch.alter_column("unlabeled_at_maturity", new_column_name="unlabelled_at_maturity",
                           existing_type=sa.Integer(), existing_nullable=False)
