"""The demo end to end, shortened: real server, real HTTP, the drifting depot's chart alarm by webhook.

Sizing (why this is reliable): 10 weeks of 500 parcels a day; Uplands gets 35 %
of them (175 a day), so each depot's chart stream reaches the 2,000 mature
cases its design needs within ~12-29 days and runs in control until the drift
on day 42. The charts are designed for 1 false alarm a year for the whole
model (8 streams: 2 rules × all + 3 depots), so over the ~0.1-0.15 year the
charts run, the four streams of the two undisturbed depots expect ≈ 0.07
false alarms together. The data is generated from a fixed seed and the
timeline is anchored to Monday 00:00 UTC (``ScenarioConfig.start``), so the
run is deterministic: the seed below was checked to give no false alarm, and
the test cannot flip from one run to the next. A different seed would fail
with probability ≈ 7 % — that would be the charts' stated rate, not a bug.
After the drift Uplands' odds double, and its upper chart (175 cases a day)
is expected to cross within a few days.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

from demo import scenario
from demo.run import run

from tests.notify.receiver import verify_standard_webhook

SHORT = scenario.ScenarioConfig(days=70, drift_day=42, parcels_per_day=500, seed=20261)


def _segment_value(event: dict) -> str | None:
    segment = event["data"]["segment"]
    return None if segment is None else segment["value"]


def test_shortened_demo_alarms_only_the_drifting_depot_after_the_drift(tmp_path: Path) -> None:
    result = run(SHORT, tmp_path / "demo")

    opened = [d for d in result.deliveries if d.event and d.event["type"] == "alarm.opened"]
    # Every delivery, checked here with the tests' own Standard Webhooks check, not the demo's.
    assert result.deliveries
    assert all(verify_standard_webhook(result.secret, d.headers, d.body) for d in result.deliveries)
    assert all(d.valid for d in result.deliveries)

    uplands = [d.event for d in opened if _segment_value(d.event) == scenario.DRIFTING_DEPOT]
    assert [e["data"]["alarm"]["rule"] for e in uplands] == ["calibration-chart-upper"]
    crossed = datetime.fromisoformat(uplands[0]["data"]["evidence"]["crossed_at"].replace("Z", "+00:00"))
    assert crossed > result.drift_date

    # No other depot alarmed, by webhook or in the server's own list (the pooled "all" stream,
    # which contains Uplands, may).
    others = {d.name for d in scenario.DEPOTS} - {scenario.DRIFTING_DEPOT}
    assert not [e for e in (d.event for d in opened) if _segment_value(e) in others]
    listed = {(a["rule"], a["segment"]["value"] if a["segment"] else None) for a in result.alarms}
    assert ("calibration-chart-upper", scenario.DRIFTING_DEPOT) in listed
    assert not {v for _, v in listed} & others
    # Each alarm the server opened was delivered once.
    assert len(opened) == len(result.alarms)
