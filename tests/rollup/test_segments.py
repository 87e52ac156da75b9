"""Segment keys: changing them rebuilds the model's summaries; past 50 values a key pools into "other"."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from tests.api.payloads import assert_problem
from tests.conftest import Database, make_client
from tests.rollup.reference import assert_period_matches
from tests.rollup.synthetic import MONDAY, Traffic, make_traffic, post_all, refresh

MODEL = "segments"
URL = f"/v1/models/{MODEL}/metrics"
PARAMS = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z"}


def test_changing_segment_keys_rebuilds_and_the_filter_follows(db: Database) -> None:
    traffic = make_traffic(n_cases=900, days=7)
    with make_client(db, clock=FixedClock(datetime(2026, 4, 1, tzinfo=UTC))) as client:
        client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["depot"]})
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        body = assert_problem(client.get(URL, params={**PARAMS, "tag": "channel:web"}), 422)
        assert body["errors"][0]["field"] == "tag"

        assert client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["channel"]}).status_code == 200
        assert int(db.scalar("SELECT COUNT(*) FROM dirty_buckets")) > 0  # every bucket marked
        done = refresh(client)
        assert done["jobs"]["refresh"]["buckets"] > 0

        r = client.get(f"/v1/models/{MODEL}/metrics", params={**PARAMS, "tag": "channel:web"})
        assert r.status_code == 200, r.text
        web = Traffic(traffic.frame[traffic.frame.channel == "web"])
        assert_period_matches(r.json()["periods"][0], web.between(MONDAY, MONDAY + timedelta(days=7)))
        gone = assert_problem(client.get(URL, params={**PARAMS, "tag": "depot:hill"}), 422)
        assert gone["errors"][0]["field"] == "tag"
        assert "segment_keys" in gone["errors"][0]["message"]
        segments = db.scalar("SELECT COUNT(*) FROM bucket_summaries WHERE segment_key = 'depot'")
        assert segments == 0  # the old key's summaries went with the rebuild


def test_values_past_the_fiftieth_pool_into_other(db: Database) -> None:
    # 50 shops in an early hour, then 10 more in a later hour: refresh works oldest hour first,
    # so the first 50 are admitted and the last 10 fall into "other"
    early = [{"id": f"a{i}", "probability": 0.1 + 0.01 * i, "scored_at": "2026-03-03T08:10:00Z",
              "tags": {"shop": f"s{i:02d}"}} for i in range(50)]
    late = [{"id": f"b{i}", "probability": 0.2 + 0.05 * i, "scored_at": "2026-03-04T15:10:00Z",
             "tags": {"shop": f"s{50 + i:02d}"}} for i in range(10)]
    with make_client(db, clock=FixedClock(datetime(2026, 4, 1, tzinfo=UTC))) as client:
        client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["shop"]})
        r = client.post(f"/v1/models/{MODEL}/predictions", json={"predictions": early + late})
        assert r.status_code == 200, r.text
        refresh(client)

        def week(tag: str) -> dict:
            r = client.get(f"/v1/models/{MODEL}/metrics", params={**PARAMS, "tag": tag})
            assert r.status_code == 200, r.text
            return r.json()["periods"][0]

        other = week("shop:other")
        assert other["n_predictions"] == 10
        expected_mean = sum(0.2 + 0.05 * i for i in range(10)) / 10  # the ten late rows
        assert other["mean_probability"] == pytest.approx(expected_mean, rel=1e-12)
        assert week("shop:s07")["n_predictions"] == 1
        assert week("shop:s55")["n_predictions"] == 0  # not tracked: its row is in "other"
    values = db.scalar("SELECT COUNT(*) FROM segment_values WHERE segment_key = 'shop'")
    assert values == 50
