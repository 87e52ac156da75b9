"""GET /v1/models/{m}/metrics against scikit-learn/statsmodels/numpy on each period's raw rows.

Synthetic traffic (tests/rollup/synthetic.py) is posted through the API with a
fixed clock, refreshed with POST /v1/refresh, and every period's rows are
chosen by plain pandas from the frame the test generated.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime, timedelta

import pytest
from fastapi.testclient import TestClient

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.rollup.reference import assert_empty, assert_period_matches, assert_strict_json
from tests.rollup.synthetic import MONDAY, Traffic, make_traffic, post_all, refresh

MODEL = "parcel-delay"
NOW = datetime(2026, 6, 1, tzinfo=UTC)
# the four ISO weeks of [03-02, 03-30), the span of make_traffic's 28 days from MONDAY
FOUR_WEEKS = ["2026-03-02T00:00:00Z", "2026-03-09T00:00:00Z", "2026-03-16T00:00:00Z", "2026-03-23T00:00:00Z"]


@pytest.fixture
def loaded(db: Database) -> Iterator[tuple[TestClient, Traffic]]:
    traffic = make_traffic()
    with make_client(db, clock=FixedClock(NOW)) as client:
        assert client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["depot"]}).status_code in (200, 201)
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        yield client, traffic


def get(client: TestClient, **params: str) -> dict:
    r = client.get(f"/v1/models/{MODEL}/metrics", params=params)
    assert r.status_code == 200, r.text
    return assert_strict_json(r.text)  # no NaN/inf anywhere


def ts(text: str) -> datetime:
    return datetime.fromisoformat(text)


def test_weekly_periods_are_whole_iso_weeks_and_match_references(loaded) -> None:
    client, traffic = loaded
    # start is a Wednesday afternoon, end just after the Monday that follows the data
    body = get(client, start="2026-02-25T15:00:00Z", end="2026-03-30T01:00:00Z", granularity="week")
    starts = [p["start"] for p in body["periods"]]
    # hand-worked: the Monday on or before 02-25 is 02-23; the week of 03-30 overlaps [.., 03-30T01:00)
    assert starts == [f"2026-{d}T00:00:00Z" for d in ("02-23", "03-02", "03-09", "03-16", "03-23", "03-30")]
    assert body["granularity"] == "week"
    assert body["refreshed_at"] == "2026-06-01T00:00:00Z"
    for period in body["periods"]:
        assert ts(period["end"]) - ts(period["start"]) == timedelta(days=7)
        assert ts(period["start"]).weekday() == 0
        assert_period_matches(period, traffic.between(ts(period["start"]), ts(period["end"])))
    assert_empty(body["periods"][0])
    assert_empty(body["periods"][-1])


def test_pooled_versions_count_every_scored_row(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-30T00:00:00Z", granularity="week")
    total = sum(p["n_predictions"] for p in body["periods"])
    assert total == len(traffic.frame)
    # the shadow version re-scores cases under the same id: rows, not cases, are counted
    assert total > traffic.frame.id.nunique()


def test_daily_periods_match_references_including_boundary_hours(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-09T00:00:00Z", granularity="day")
    assert len(body["periods"]) == 7
    for period in body["periods"]:
        lo, hi = ts(period["start"]), ts(period["end"])
        assert hi - lo == timedelta(days=1)
        assert (lo.hour, lo.minute) == (0, 0)
        assert_period_matches(period, traffic.between(lo, hi))


def test_month_granularity_and_an_empty_month(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-02-15T00:00:00Z", end="2026-04-01T00:00:00Z", granularity="month")
    # end is exclusive: April does not overlap [02-15, 04-01)
    assert [(p["start"], p["end"]) for p in body["periods"]] == [
        ("2026-02-01T00:00:00Z", "2026-03-01T00:00:00Z"),
        ("2026-03-01T00:00:00Z", "2026-04-01T00:00:00Z"),
    ]
    assert_empty(body["periods"][0])
    assert_period_matches(body["periods"][1], traffic.between(ts("2026-03-01T00:00:00Z"),
                                                             ts("2026-04-01T00:00:00Z")))


def test_offset_times_are_instants(loaded) -> None:
    client, traffic = loaded
    # 2026-03-09T01:00+02:00 is Sunday 03-08 23:00 UTC; the end (03-09 00:00 UTC) is exclusive
    body = get(client, start="2026-03-09T01:00:00+02:00", end="2026-03-09T02:00:00+02:00", granularity="week")
    assert [p["start"] for p in body["periods"]] == ["2026-03-02T00:00:00Z"]
    assert_period_matches(body["periods"][0], traffic.between(MONDAY, MONDAY + timedelta(days=7)))


@pytest.mark.parametrize(("granularity", "days", "starts"), [
    ("week", 10, ["2026-03-09T00:00:00Z", "2026-03-16T00:00:00Z"]),
    ("day", 3, [f"2026-03-{d:02d}T00:00:00Z" for d in range(9, 23)]),
])
def test_trailing_window_covers_n_days_before_each_period_end(
    loaded, granularity: str, days: int, starts: list[str]
) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-09T00:00:00Z", end="2026-03-23T00:00:00Z", granularity=granularity,
               window=f"{days}d")
    assert [p["start"] for p in body["periods"]] == starts
    for period in body["periods"]:
        end = ts(period["end"])
        assert ts(period["window_start"]) == end - timedelta(days=days)
        assert_period_matches(period, traffic.between(end - timedelta(days=days), end))


def test_window_reaching_before_the_data_uses_what_there_is(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-03T00:00:00Z", granularity="day",
               window="30d")
    (period,) = body["periods"]
    assert period["window_start"] == "2026-02-01T00:00:00Z"  # 03-03 minus 30 days (February has 28)
    assert_period_matches(period, traffic.between(ts("2026-02-01T00:00:00Z"), ts("2026-03-03T00:00:00Z")))


def test_version_filter(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-30T00:00:00Z", version="shadow")
    assert body["version"] == "shadow"
    shadow = Traffic(traffic.frame[traffic.frame.version == "shadow"])
    assert [p["start"] for p in body["periods"]] == FOUR_WEEKS
    for period in body["periods"]:
        rows = shadow.between(ts(period["start"]), ts(period["end"]))
        assert len(rows) > 0  # the filter is checked against rows, not empty against empty
        assert_period_matches(period, rows)


def test_unknown_version_gives_empty_periods(loaded) -> None:
    client, _ = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-16T00:00:00Z", version="v9")
    assert len(body["periods"]) == 2
    for period in body["periods"]:
        assert_empty(period)


def test_tag_filter_on_declared_key(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-02T00:00:00Z", end="2026-03-30T00:00:00Z", tag="depot:hill")
    assert body["tag"] == "depot:hill"
    hill = Traffic(traffic.frame[traffic.frame.depot == "hill"])
    assert [p["start"] for p in body["periods"]] == FOUR_WEEKS
    for period in body["periods"]:
        rows = hill.between(ts(period["start"]), ts(period["end"]))
        assert len(rows) > 0  # the filter is checked against rows, not empty against empty
        assert_period_matches(period, rows)


def test_tag_and_version_together_with_window(loaded) -> None:
    client, traffic = loaded
    body = get(client, start="2026-03-16T00:00:00Z", end="2026-03-30T00:00:00Z", tag="depot:airport",
               version="v1", window="14d")
    f = traffic.frame
    subset = Traffic(f[(f.depot == "airport") & (f.version == "v1")])
    assert [p["start"] for p in body["periods"]] == FOUR_WEEKS[2:]
    for period in body["periods"]:
        end = ts(period["end"])
        rows = subset.between(end - timedelta(days=14), end)
        assert len(rows) > 0  # the filters are checked against rows, not empty against empty
        assert_period_matches(period, rows)


def test_each_tag_value_partitions_all(loaded) -> None:
    client, traffic = loaded
    params = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z"}
    whole = get(client, **params)["periods"][0]["n_predictions"]
    parts = [get(client, **params, tag=f"depot:{d}")["periods"][0]["n_predictions"]
             for d in ("harbour", "hill", "airport")]
    week = traffic.between(MONDAY, MONDAY + timedelta(days=7))
    assert parts == [int((week.depot == d).sum()) for d in ("harbour", "hill", "airport")]  # pandas
    assert sum(parts) == whole == len(week)
    assert whole > 0
