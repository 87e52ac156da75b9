"""The set-based refresh against the per-bucket one, on both databases.

Every stored bucket summary of the set-based refresh equals the one the
per-bucket path (``refresh._read_buckets``: one query and one
``Summary.from_arrays`` per bucket and segment) computes from the same rows, to
1e-12 relative; every day summary equals ``Summary.merge_many`` of its stored
hours. The traffic has three versions, two declared segment keys, rows without
an outcome, and a horizon with events after it (the counted label).
An incremental refresh reads the rows of its dirty buckets and no others.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from calibrant.clock import FixedClock
from calibrant.rollup import refresh as refresh_module
from calibrant.stats.summary import Summary
from calibrant.store import dirty
from calibrant.store.dirty import BucketKey
from calibrant.store.rollup_tables import BucketSummary, DaySummary
from calibrant.vocabulary.segments import ALL_SEGMENT
from tests.conftest import Database, make_client
from tests.rollup.synthetic import make_traffic, prediction_items

NOW = datetime(2026, 4, 20, tzinfo=UTC)
HORIZON_DAYS = 2


def stored(db: Database, table: type) -> dict[tuple, Summary]:
    when = table.hour if table is BucketSummary else table.day
    with db.engine.connect() as conn:
        rows = conn.execute(sa.select(table.model_id, table.version, when, table.segment_key,
                                      table.segment_value, table.payload))
        return {tuple(r[:5]): Summary.from_bytes(bytes(r[5])) for r in rows}


def assert_close(mine: Summary, reference: Summary, key: tuple) -> None:
    assert np.array_equal(mine.cells, reference.cells), key
    np.testing.assert_allclose(mine.fields, reference.fields, rtol=1e-12, atol=0, err_msg=str(key))


def load(db: Database, clock: FixedClock) -> pd.DataFrame:
    frame = make_traffic(n_cases=1500, days=21).frame
    with make_client(db, clock=clock) as client:
        r = client.put("/v1/models/bulk", json={"segment_keys": ["depot", "channel"],
                                                "outcome_horizon_days": HORIZON_DAYS})
        assert r.status_code == 201, r.text
        items = prediction_items(frame)
        assert client.post("/v1/models/bulk/predictions", json={"predictions": items}).status_code == 200
        cases = frame.dropna(subset=["label"]).drop_duplicates("id").reset_index(drop=True)
        # every third event happened after the horizon: it counts as a 0
        outcomes = [{"id": r.id, "label": int(r.label),
                     "observed_at": (r.scored_at + pd.Timedelta(days=4)).isoformat(),
                     "occurred_at": (r.scored_at + pd.Timedelta(days=3 if i % 3 == 0 else 1)).isoformat()}
                    for i, r in enumerate(cases.itertuples())]
        assert client.post("/v1/models/bulk/outcomes", json={"outcomes": outcomes}).status_code == 200
    return frame


def test_set_based_summaries_equal_the_per_bucket_ones(db: Database) -> None:
    clock = FixedClock(NOW)
    frame = load(db, clock)
    report = refresh_module.refresh_dirty(db.engine, clock, worker="bulk", chunk_rows=300)
    assert report.rows_read == len(frame)
    hours = stored(db, BucketSummary)
    versions = {k[1] for k in hours}
    assert versions == {"v1", "v2", "shadow"}
    assert {k[3] for k in hours} == {ALL_SEGMENT, "depot", "channel"}

    keys = sorted({BucketKey(m, v, h) for m, v, h, _, _ in hours})
    assert len(keys) == report.buckets
    computed = refresh_module._read_buckets(db.engine, keys, 1000)  # the per-bucket path
    compared = 0
    for key, done in zip(keys, computed, strict=True):
        mine = {k[3:]: s for k, s in hours.items() if k[:3] == (key.model_id, key.version, key.hour)}
        assert mine.keys() == done.summaries.keys(), key
        for segment, reference in done.summaries.items():
            assert_close(mine[segment], reference, (key, segment))
            compared += 1
    assert compared == len(hours)

    days = stored(db, DaySummary)
    assert {(m, v, h.replace(hour=0)) for m, v, h, _, _ in hours} == {k[:3] for k in days}
    for (m, v, day, seg_key, seg_value), summary in days.items():
        parts = [s for k, s in hours.items() if k[:2] == (m, v) and k[3:] == (seg_key, seg_value)
                 and day <= k[2] < day + timedelta(days=1)]
        assert_close(summary, Summary.merge_many(parts), (m, v, day, seg_key, seg_value))


def test_summary_totals_match_a_pandas_group_by_of_the_rows(db: Database) -> None:
    """Counts and Σp per (version, hour), and per depot, against pandas on the posted rows."""
    clock = FixedClock(NOW)
    frame = load(db, clock)
    refresh_module.refresh_dirty(db.engine, clock, worker="bulk", chunk_rows=500)
    hours = stored(db, BucketSummary)
    frame = frame.assign(hour=frame.scored_at.dt.floor("h"))
    for (version, hour), rows in frame.groupby(["version", "hour"]):
        summary = hours[(1, version, hour.to_pydatetime(), ALL_SEGMENT, ALL_SEGMENT)]
        assert summary.field_total("n") == len(rows)
        assert summary.field_total("s1") == pytest.approx(rows.probability.sum(), rel=1e-12)
        for depot, part in rows.groupby("depot"):
            by_depot = hours[(1, version, hour.to_pydatetime(), "depot", depot)]
            assert by_depot.field_total("n") == len(part)


def test_an_incremental_refresh_reads_only_its_dirty_buckets(db: Database) -> None:
    clock = FixedClock(NOW)
    frame = load(db, clock)
    refresh_module.refresh_dirty(db.engine, clock, worker="full")
    before = stored(db, BucketSummary)
    frame = frame.assign(hour=frame.scored_at.dt.floor("h"))
    sizes = frame.groupby(["version", "hour"]).size()
    chosen = sizes.index[::7]
    with db.engine.begin() as conn:
        dirty.mark(conn, [BucketKey(1, v, h.to_pydatetime()) for v, h in chosen], NOW)
    report = refresh_module.refresh_dirty(db.engine, clock, worker="again")
    assert report.buckets == len(chosen)
    assert report.rows_read == int(sizes.loc[chosen].sum())
    assert stored(db, BucketSummary) == before  # same rows, same sums
