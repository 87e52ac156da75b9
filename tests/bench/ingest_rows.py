"""The rows the ingest benchmark writes, and a checksum to compare what two paths stored.

Rows look like live traffic: random text ids (random b-tree positions), two
versions, float64 probabilities, an RFC 3339 time within one day and two
tags. The day matters: ingest marks every (version, hour) bucket a batch
touches for the rollup, and a day gives 48 per batch, as a live feed would;
a back-fill spread over months pays more per batch for those marks.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import orjson
import sqlalchemy as sa

SEED = 20260301
VERSIONS = ("v7", "v8")
REGIONS = ("north", "south", "east", "west", "centre", "islands", "coast", "hills")
CHANNELS = ("web", "branch", "phone")
EPOCH = datetime(2026, 3, 1, tzinfo=UTC)
SPAN_S = 86_400


@dataclass(frozen=True)
class BenchRows:
    case_id: list[str]
    version: list[str]
    probability: list[float]
    scored_at: list[datetime]
    tags: list[dict[str, str]]

    def __len__(self) -> int:
        return len(self.case_id)

    def canonical_tags(self) -> list[str]:
        """Tags as the service stores them: JSON with sorted keys."""
        return [orjson.dumps(t, option=orjson.OPT_SORT_KEYS).decode() for t in self.tags]


def make_rows(n: int, seed: int = SEED) -> BenchRows:
    rng = random.Random(seed)
    ids = {f"{rng.getrandbits(64):016x}" for _ in range(n)}
    while len(ids) < n:  # a 64-bit collision is very unlikely, but the count must be exact
        ids.add(f"{rng.getrandbits(64):016x}")
    case_ids = sorted(ids)
    rng.shuffle(case_ids)
    return BenchRows(
        case_id=case_ids,
        version=[VERSIONS[i % 2] for i in range(n)],
        probability=[rng.betavariate(2, 5) for _ in range(n)],
        scored_at=[EPOCH + timedelta(seconds=rng.randrange(SPAN_S)) for _ in range(n)],
        tags=[{"region": rng.choice(REGIONS), "channel": rng.choice(CHANNELS)} for _ in range(n)],
    )


def http_bodies(rows: BenchRows, batch_size: int) -> list[tuple[int, bytes]]:
    """Request bodies of ``batch_size`` items, serialised ahead of any timing."""
    bodies = []
    for start in range(0, len(rows), batch_size):
        stop = min(start + batch_size, len(rows))
        items = [
            {
                "id": rows.case_id[i],
                "version": rows.version[i],
                "probability": rows.probability[i],
                "scored_at": rows.scored_at[i].strftime("%Y-%m-%dT%H:%M:%SZ"),
                "tags": rows.tags[i],
            }
            for i in range(start, stop)
        ]
        bodies.append((stop - start, orjson.dumps({"predictions": items})))
    return bodies


@dataclass(frozen=True)
class Checksum:
    rows: int
    distinct_ids: int
    probability_sum: float
    tags_length_sum: int
    latest_scored_at: str

    def agrees_with(self, other: Checksum) -> bool:
        # Sums taken in a different row order differ in the last bits only.
        return (
            self.rows == other.rows
            and self.distinct_ids == other.distinct_ids
            and math.isclose(self.probability_sum, other.probability_sum, rel_tol=1e-12)
            and self.tags_length_sum == other.tags_length_sum
            and self.latest_scored_at == other.latest_scored_at
        )


def checksum(conn: sa.Connection, table: str) -> Checksum:
    row = conn.exec_driver_sql(
        f"SELECT count(*), count(DISTINCT case_id), sum(probability), "  # noqa: S608 — our own table names
        f"sum(length(tags)), max(scored_at) FROM {table}"
    ).one()
    latest = row[4]
    latest_text = latest.strftime("%Y-%m-%d %H:%M:%S") if isinstance(latest, datetime) else str(latest)[:19]
    return Checksum(int(row[0]), int(row[1]), float(row[2] or 0.0), int(row[3] or 0), latest_text)


def outcome_bodies(rows: BenchRows, batch_size: int, seed: int = SEED) -> list[tuple[int, bytes]]:
    """Outcome bodies for every case of ``rows`` (label Bernoulli(p)), a day after scoring."""
    rng = random.Random(seed + 1)
    bodies = []
    for start in range(0, len(rows), batch_size):
        stop = min(start + batch_size, len(rows))
        items = [
            {
                "id": rows.case_id[i],
                "label": int(rng.random() < rows.probability[i]),
                "observed_at": (rows.scored_at[i] + timedelta(days=1)).strftime("%Y-%m-%dT%H:%M:%SZ"),
            }
            for i in range(start, stop)
        ]
        bodies.append((stop - start, orjson.dumps({"outcomes": items})))
    return bodies
