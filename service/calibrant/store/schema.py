"""Every table module, imported so that ``Base.metadata`` is complete.

Alembic's env and the tests import this module, not the table modules one by one: a table
module that is not listed here would be invisible to ``alembic check``.
"""

from __future__ import annotations

from calibrant.store import (
    alarm_tables,
    history_tables,
    job_failure_tables,
    page_session_tables,
    refresh_job_tables,
    retention_tables,
    rollup_tables,
    tables,
    webhook_tables,
)
from calibrant.store.tables import Base

metadata = Base.metadata

__all__ = [
    "Base", "alarm_tables", "history_tables", "job_failure_tables", "metadata", "page_session_tables",
    "refresh_job_tables", "retention_tables", "rollup_tables", "tables", "webhook_tables",
]
