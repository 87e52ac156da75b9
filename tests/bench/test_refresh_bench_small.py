"""CI version of tests/bench/refresh.py on both databases: its figures are finite, the refresh read
every loaded row once, and the stored "all" summaries add up to what SQL counts in the tables."""

from __future__ import annotations

import math

import sqlalchemy as sa
from tests.bench.refresh import run
from tests.conftest import Database

from calibrant.stats.summary import Summary
from calibrant.vocabulary.segments import ALL_SEGMENT

ROWS = 6_000
DAYS = 7


def test_small_refresh_benchmark(db: Database) -> None:
    result = run(db.dialect, db.url, ROWS, days=DAYS)
    figures = [result[k] for k in ("read_rows_per_s", "full_rows_per_s", "ratio")]
    assert all(math.isfinite(f) and f > 0 for f in figures), result
    assert math.isfinite(result["memory_added_mib"])
    # two versions, every hour of the week scored: 2 × 7 × 24 buckets, 7 days per version
    assert result["buckets"] == 2 * DAYS * 24
    assert result["days"] == 2 * DAYS
    for share, inc in zip((0.01, 0.10), result["incremental"], strict=True):
        assert inc["buckets"] == round(result["buckets"] * share)
        assert 0 < inc["rows"] < ROWS

    with db.engine.connect() as conn:
        n_predictions, n_labeled, positives = conn.execute(sa.text(
            "SELECT count(*), count(o.label), coalesce(sum(o.label), 0) FROM predictions p "
            "LEFT JOIN outcomes o ON o.model_id = p.model_id AND o.case_id = p.case_id")).one()
        payloads = conn.execute(sa.text("SELECT payload FROM bucket_summaries WHERE segment_key = :a"),
                                {"a": ALL_SEGMENT}).scalars().all()
        by_region = conn.execute(sa.text(
            "SELECT segment_value, sum(n) FROM bucket_summaries WHERE segment_key = 'region' "
            "GROUP BY segment_value ORDER BY segment_value")).all()
    counts = [Summary.from_bytes(bytes(p)).counts() for p in payloads]
    assert n_predictions == ROWS
    assert sum(c["positive"] + c["negative"] + c["unlabeled"] for c in counts) == ROWS
    assert sum(c["positive"] for c in counts) == positives
    assert sum(c["unlabeled"] for c in counts) == ROWS - n_labeled
    # region r0..r3 by (case number // 3) % 4, as loaded
    assert [v for v, _ in by_region] == ["r0", "r1", "r2", "r3"]
    assert sum(n for _, n in by_region) == ROWS
