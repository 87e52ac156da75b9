"""Two refreshers on one database, forced to overlap: each (bucket or day, generation) runs once.

Each thread stands for a scheduler process: its own engine on the same URL,
its own worker name. A start barrier releases them together; a second barrier
inside the write step holds each thread's first unit until the other thread
has also claimed and read one, so both are provably mid-unit at once.
"""

from __future__ import annotations

import threading
from collections import Counter
from datetime import UTC, datetime

import numpy as np
import pytest
import sqlalchemy as sa

from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.rollup import refresh as refresh_module
from calibrant.stats.summary import Summary
from calibrant.store import dirty
from calibrant.store.dirty import BucketKey
from calibrant.store.engine import make_engine
from calibrant.store.rollup_tables import BucketSummary, DaySummary, DirtyBucket
from tests.conftest import Database, make_client
from tests.rollup.synthetic import make_traffic, post_all

NOW = datetime(2026, 4, 1, tzinfo=UTC)
TIMEOUT_S = 60


def dirty_units(db: Database) -> set[tuple[BucketKey, int]]:
    with db.engine.connect() as conn:
        rows = conn.execute(sa.select(DirtyBucket.model_id, DirtyBucket.version, DirtyBucket.hour,
                                      DirtyBucket.generation))
        return {(BucketKey(m, v, h), g) for m, v, h, g in rows}


def stored_summaries(db: Database, t: type = BucketSummary) -> dict[tuple, Summary]:
    with db.engine.connect() as conn:
        when = t.hour if t is BucketSummary else t.day
        columns = (t.model_id, t.version, t.segment_key, t.segment_value, when, t.payload)
        rows = conn.execute(sa.select(*columns))
        return {tuple(r[:5]): Summary.from_bytes(bytes(r[5])) for r in rows}


def test_two_overlapping_refreshers_run_every_unit_exactly_once(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock) as client:
        client.put("/v1/models/overlap", json={"segment_keys": ["depot"]})
        post_all(client, "overlap", make_traffic(n_cases=500, days=5).frame)
    units = dirty_units(db)
    assert len(units) > 10

    executions: Counter = Counter()
    by_worker: dict[str, list] = {"north": [], "south": []}
    lock = threading.Lock()
    overlap = threading.Barrier(2, timeout=TIMEOUT_S)
    first_unit_done: set[int] = set()
    real_write = refresh_module._write_buckets

    def counting_write(engine, clock_, work):
        with lock:
            for claim, _ in work:
                executions[(claim.key, claim.generation)] += 1
                by_worker[claim.worker].append(claim.key)
            first = threading.get_ident() not in first_unit_done
            first_unit_done.add(threading.get_ident())
        if first:
            overlap.wait()  # both threads hold claimed, read, unwritten buckets here
        return real_write(engine, clock_, work)

    monkeypatch.setattr(refresh_module, "_write_buckets", counting_write)
    start = threading.Barrier(2, timeout=TIMEOUT_S)
    reports: dict[str, refresh_module.RefreshReport] = {}
    errors: list[BaseException] = []

    def scheduler(worker: str) -> None:
        engine = make_engine(Settings(database_url=db.url))
        try:
            start.wait()
            reports[worker] = refresh_module.refresh_dirty(engine, clock, worker=worker, batch=8, group=4)
        except BaseException as exc:
            errors.append(exc)
        finally:
            engine.dispose()

    threads = [threading.Thread(target=scheduler, args=(w,)) for w in by_worker]
    for t in threads:
        t.start()
    for t in threads:
        t.join(TIMEOUT_S)
    assert not errors, errors
    assert not any(t.is_alive() for t in threads)

    # exactly once per unit, counted where the work is done and in the reports
    assert set(executions) == units
    assert set(executions.values()) == {1}
    reported = reports["north"].recomputed + reports["south"].recomputed
    assert Counter(reported) == executions
    assert by_worker["north"]
    assert by_worker["south"]
    assert not set(by_worker["north"]) & set(by_worker["south"])
    assert reports["north"].requeued == reports["south"].requeued == 0
    assert dirty_units(db) == set()
    # days: every (day, generation) merged by exactly one of the two, and none left dirty
    merged_days = Counter(reports["north"].merged_days + reports["south"].merged_days)
    assert merged_days
    assert set(merged_days.values()) == {1}
    assert db.scalar("SELECT COUNT(*) FROM dirty_days") == 0

    # the same summaries a single runner builds
    concurrent = stored_summaries(db)
    concurrent_days = stored_summaries(db, DaySummary)
    monkeypatch.setattr(refresh_module, "_write_buckets", real_write)
    with db.engine.begin() as conn:
        dirty.mark(conn, (k for k, _ in units), NOW)
    single = refresh_module.refresh_dirty(db.engine, clock, worker="alone")
    assert len(single.recomputed) == len(units)
    alone = stored_summaries(db)
    alone_days = stored_summaries(db, DaySummary)
    for mine, theirs in ((alone, concurrent), (alone_days, concurrent_days)):
        assert mine.keys() == theirs.keys()
        for key, summary in mine.items():
            other = theirs[key]
            assert np.array_equal(summary.cells, other.cells), key
            np.testing.assert_allclose(other.fields, summary.fields, rtol=1e-12, atol=1e-12)
