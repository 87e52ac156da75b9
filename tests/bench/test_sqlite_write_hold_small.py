"""CI size of tests/bench/sqlite_write_hold.py: the refresh's write transactions on SQLite.

No timing bound (the machine is shared): the structure that keeps them short is asserted.
Every bucket is stored by a write transaction of its own group (at most 25 buckets), the
reading and summing happen in read transactions that take no lock, and a refresh of 60
buckets therefore takes several write transactions, not one.
"""

from __future__ import annotations

from pathlib import Path

from tests.bench.sqlite_write_hold import measure


def test_the_refresh_reads_without_the_lock_and_writes_in_groups(tmp_path: Path) -> None:
    held = measure(tmp_path, hours=60, rows=20, segments=3)
    assert held.buckets == 60
    # 60 buckets in groups of 25: 3 groups, each a claim and a store transaction, then days
    assert len(held.writes_ms) >= 6
    # candidates, each group's read, the day checks and merges' reads: none holds the write lock
    assert len(held.reads_ms) >= 4
    assert held.cases > 0  # the alarm phase ran on the same data
    print(f"refresh: longest write transaction {max(held.writes_ms):.1f} ms, longest read "
          f"{max(held.reads_ms):.1f} ms")
