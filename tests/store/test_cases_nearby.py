"""The cases scored around an alarm's crossing case (``store.cases.nearby``), on both databases.

Expected lists are built here from the posted items themselves: the cases of the version and
segment, in scoring order, five on each side of the instant (the case at it on the earlier side).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.store import cases, models_repo
from tests.api.payloads import post_outcomes, post_predictions
from tests.conftest import Database, make_client

T0 = datetime(2026, 3, 2, tzinfo=UTC)


def _iso(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def test_nearby_keeps_the_version_and_segment_in_scoring_order(db: Database) -> None:
    items = []
    for i in range(40):  # alternate regions; a second version scored at the same instants
        region = "south" if i % 2 else "north"
        items.append({"id": f"c{i:02d}", "probability": 0.01 * (i + 1),
                      "scored_at": _iso(T0 + timedelta(minutes=i)), "tags": {"region": region}})
    other = [{**item, "version": "v2"} for item in items]
    with make_client(db, clock=FixedClock(T0 + timedelta(days=1))) as client:
        assert client.put("/v1/models/m", json={"segment_keys": ["region"]}).status_code == 201
        assert post_predictions(client, "m", items).status_code == 200
        assert post_predictions(client, "m", other).status_code == 200
        event = {"id": "c21", "label": 1, "observed_at": _iso(T0 + timedelta(hours=2))}
        labeled = post_outcomes(client, "m", [event])
        assert labeled.status_code == 200
    at = T0 + timedelta(minutes=21)  # c21, a south case
    south = [item for item in items if item["tags"]["region"] == "south"]
    position = next(i for i, item in enumerate(south) if item["id"] == "c21")
    expected = [item["id"] for item in south[position - 4: position + 6]]
    with Session(db.engine) as session:
        model = models_repo.get(session, "m")
        assert model is not None
        found = cases.nearby(session, model.id, "default", at, ("region", "south"))
        every = cases.nearby(session, model.id, "default", at, None, each_side=2)
    assert [c.case_id for c in found] == expected
    assert {c.case_id: c.label for c in found}["c21"] == 1
    assert all(c.label is None for c in found if c.case_id != "c21")
    assert [c.case_id for c in every] == ["c20", "c21", "c22", "c23"]
