"""Several client processes post overlapping batches to one real server at once.

Whatever order the server interleaves them in, every (version, id) must be
stored exactly once, and the counts in the responses must add up to what is
stored: a row reported ``accepted`` twice, or not at all, is a race.
"""

from __future__ import annotations

import itertools
import random
from collections.abc import Iterator
from pathlib import Path

import orjson
import pytest

from tests.conftest import Database
from tests.system.clients import Reply, post_from_processes
from tests.system.server import ServerProcess, running_server

CLIENTS = 4
BATCHES_PER_CLIENT = 6
UNIVERSE = 2400  # distinct case ids
WINDOW = 800  # ids per batch; windows start every 400 ids, so each id is posted many times
VERSIONS = ("champion", "challenger")
MODEL = "overlap"


@pytest.fixture
def server(db: Database, tmp_path: Path) -> Iterator[ServerProcess]:
    with running_server(db.url, tmp_path / "server.log", {"CALIBRANT_LOG_LEVEL": "warning"}) as srv:
        yield srv


def window(client: int, batch: int) -> list[int]:
    start = ((client + batch) % (UNIVERSE // 400)) * 400
    return [(start + k) % UNIVERSE for k in range(WINDOW)]


def probability_of(case: int, version: str) -> float:
    # Same content on every re-post, so overlaps are duplicates, never conflicts.
    return ((case * 7919 + len(version) * 104729) % 10007) / 10007


def prediction_bodies(client: int) -> list[tuple[int, bytes]]:
    rng = random.Random(client)
    bodies = []
    for batch in range(BATCHES_PER_CLIENT):
        items = [
            {
                "id": f"case-{case:05d}",
                "version": version,
                "probability": probability_of(case, version),
                "scored_at": f"2026-03-01T{case % 24:02d}:00:00Z",
                "tags": {"region": f"r{case % 5}"},
            }
            for case in window(client, batch)
            for version in VERSIONS
        ]
        rng.shuffle(items)  # arrival order differs from key order in every batch
        bodies.append((len(items), orjson.dumps({"predictions": items})))
    return bodies


def label_of(case: int, client: int) -> int:
    # Even and odd clients disagree on every third case, so corrections must occur.
    base = (case * 31) % 2
    return 1 - base if case % 3 == 0 and client % 2 else base


def outcome_bodies(client: int) -> list[tuple[int, bytes]]:
    rng = random.Random(100 + client)
    bodies = []
    for batch in range(BATCHES_PER_CLIENT):
        items = [
            {
                "id": f"case-{case:05d}",
                "label": label_of(case, client),
                "observed_at": f"2026-03-0{2 + client}T{batch:02d}:00:00Z",
            }
            for case in window(client, batch)
        ]
        rng.shuffle(items)
        bodies.append((len(items), orjson.dumps({"outcomes": items})))
    return bodies


def assert_all_succeeded(replies: list[Reply]) -> None:
    assert len(replies) == CLIENTS * BATCHES_PER_CLIENT
    failed = [(r.client, r.status, r.body) for r in replies if r.status != 200]
    assert not failed, f"requests that did not succeed: {failed[:5]}"


def posted_cases() -> set[int]:
    return {c for client in range(CLIENTS) for b in range(BATCHES_PER_CLIENT) for c in window(client, b)}


def test_overlapping_prediction_batches_store_each_row_once(db: Database, server: ServerProcess):
    replies = post_from_processes(
        server.base_url,
        f"/v1/models/{MODEL}/predictions",
        [prediction_bodies(c) for c in range(CLIENTS)],
    )
    assert_all_succeeded(replies)
    for r in replies:
        assert r.body["accepted"] + r.body["duplicates"] == r.items

    expected_keys = {(f"case-{c:05d}", v) for c in posted_cases() for v in VERSIONS}
    with db.engine.connect() as conn:
        stored = conn.exec_driver_sql("SELECT case_id, version, probability FROM predictions").all()
    stored_keys = [(case_id, version) for case_id, version, _ in stored]
    assert len(stored_keys) == len(set(stored_keys)), "a (version, id) is stored twice"
    assert set(stored_keys) == expected_keys, "rows were lost or invented"
    assert sum(r.body["accepted"] for r in replies) == len(stored)
    assert sum(r.body["duplicates"] for r in replies) == sum(r.items for r in replies) - len(stored)
    for case_id, version, probability in stored:
        assert probability == probability_of(int(case_id.removeprefix("case-")), version)


def test_overlapping_outcome_batches_count_corrections_once(db: Database, server: ServerProcess):
    replies = post_from_processes(
        server.base_url,
        f"/v1/models/{MODEL}/outcomes",
        [outcome_bodies(c) for c in range(CLIENTS)],
    )
    assert_all_succeeded(replies)
    for r in replies:
        assert r.body["accepted"] + r.body["duplicates"] + r.body["corrected"] == r.items
    accepted = sum(r.body["accepted"] for r in replies)
    corrected = sum(r.body["corrected"] for r in replies)
    assert corrected > 0, "the clients disagree on labels, so some posts must be corrections"

    with db.engine.connect() as conn:
        current = {
            case_id: (label, revision)
            for case_id, label, revision in conn.exec_driver_sql(
                "SELECT case_id, label, revision FROM outcomes"
            )
        }
        history: dict[str, list[tuple[int, int]]] = {}
        for case_id, revision, label in conn.exec_driver_sql(
            "SELECT case_id, revision, label FROM outcome_revisions ORDER BY case_id, revision"
        ):
            history.setdefault(case_id, []).append((revision, label))

    assert set(current) == {f"case-{c:05d}" for c in posted_cases()}
    assert accepted == len(current), "each case is new exactly once"
    assert sum(len(h) for h in history.values()) == accepted + corrected
    for case_id, (label, revision) in current.items():
        revisions = history[case_id]
        # History numbers 1..n without gaps or repeats, and ends at the current label.
        assert [rev for rev, _ in revisions] == list(range(1, revision + 1))
        assert revisions[-1][1] == label
        for (_, before), (_, after) in itertools.pairwise(revisions):
            assert before != after, f"{case_id}: a repeated label was recorded as a correction"
