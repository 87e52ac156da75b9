"""Planner statistics gathered by the service itself after a large share of a table changed.

PostgreSQL plans from statistics that ANALYZE gathers; autoanalyze gathers them
only when autovacuum runs (it may be off, and on any server it lags a bulk
load). A chart query planned on a freshly loaded table without statistics ran
as a nested loop over 16 million row pairs a window (7.0 s against 1.1 ms after
ANALYZE, measured). So after a refresh the service looks at the server's own
count of rows changed since the last ANALYZE of each table the hot queries
read (``pg_stat_user_tables.n_mod_since_analyze``) and analyzes a table when it
passes both a fixed number and a share of the table, the rule autoanalyze uses
(its defaults are 50 rows and 10 %, from memory; here 10,000 rows and 10 %, as
a refresh follows every ingest). A table is analyzed at most once per
``MIN_INTERVAL`` per process, so a steady trickle of ingest cannot make every
refresh pay for an ANALYZE.

SQLite plans without gathered statistics unless ANALYZE was run; the service
never runs it there, so there is nothing to keep fresh.
"""

from __future__ import annotations

import threading
from datetime import datetime, timedelta

from sqlalchemy import Engine, text

TABLES = ("predictions", "outcomes", "bucket_summaries", "day_summaries")
MIN_ROWS = 10_000
MIN_SHARE = 0.10
MIN_INTERVAL = timedelta(minutes=10)

_last: dict[tuple[str, str], datetime] = {}  # (database URL, table) → last ANALYZE by this process
_lock = threading.Lock()


def analyze_if_stale(engine: Engine, now: datetime) -> list[str]:
    """ANALYZE each of :data:`TABLES` whose changes since its last ANALYZE pass the thresholds.

    Returns the tables analyzed (empty on SQLite).
    """
    if engine.dialect.name != "postgresql":
        return []
    with engine.connect() as conn:
        rows = conn.execute(text(
            "SELECT relname, n_mod_since_analyze, n_live_tup FROM pg_stat_user_tables "
            "WHERE schemaname = current_schema() AND relname = ANY(:tables)"), {"tables": list(TABLES)}).all()
        conn.rollback()
    stale = [name for name, changed, live in rows
             if changed >= MIN_ROWS and changed >= MIN_SHARE * max(live, 1)]
    done = []
    for name in sorted(stale):
        key = (str(engine.url), name)
        with _lock:
            last = _last.get(key)
            if last is not None and now - last < MIN_INTERVAL:
                continue
            _last[key] = now
        with engine.begin() as conn:
            conn.exec_driver_sql(f"ANALYZE {name}")  # a name from TABLES, never from input
        done.append(name)
    return done
