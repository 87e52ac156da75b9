"""The whole loop: serve, post six months of an invented courier's traffic, refresh, alarm, webhook.

``python -m demo`` (``make demo``) runs the full scenario; ``run(config)``
returns what happened, for the end-to-end test that runs a shorter one.
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from urllib.parse import quote

from calibrant_client import CalibrantError, Client
from demo import scenario
from demo.progress import Progress
from demo.receiver import Delivery, WebhookReceiver
from demo.service import DemoServiceError, demo_service

CHART_RULES = ("calibration-chart-upper", "calibration-chart-lower")
POST_CHUNK = 10_000  # the server's batch limit: one progress step per request
DELIVERY_DEADLINE_S = 30.0
# A busy machine (a test suite alongside) slows every answer: each request may take two minutes,
# a 503 is retried up to 10 times honouring Retry-After, and the refresh job may run an hour.
REQUEST_TIMEOUT_S = 120.0
REQUEST_RETRIES = 10
REFRESH_TIMEOUT_S = 3600.0


@dataclass
class DemoResult:
    base_url: str
    start: datetime
    drift_date: datetime
    secret: str
    deliveries: list[Delivery] = field(default_factory=list)
    alarms: list[dict] = field(default_factory=list)  # GET .../alarms, as the server lists them
    seconds: float = 0.0


def say(text: str = "") -> None:
    print(text, flush=True)


def _post(client: Client, kind: str, items: list[dict]) -> None:
    bar = Progress(kind, len(items))
    send = client.send_predictions if kind == "predictions" else client.send_outcomes
    for offset in range(0, len(items), POST_CHUNK):
        chunk = items[offset:offset + POST_CHUNK]
        send(scenario.MODEL, chunk)
        bar.advance(len(chunk))


class _JobBar:
    """The refresh job's progress, in hour buckets, on the demo's progress line."""

    def __init__(self) -> None:
        self.bar: Progress | None = None
        self.asked = time.monotonic()

    def __call__(self, job: dict) -> None:
        if self.asked:  # the first call is POST /v1/refresh's answer
            say(f"  refresh job {job['id']} ({job['state']}) answered in "
                f"{(time.monotonic() - self.asked) * 1000:.0f} ms")
            self.asked = 0.0
        progress = job["progress"]
        if self.bar is None and progress["buckets_total"]:
            self.bar = Progress("summaries", progress["buckets_total"])
        if self.bar is not None:
            self.bar.advance(progress["buckets_done"] - self.bar.done)


def _keep_only_charts(client: Client, days: int) -> None:
    """Keep the two calibration charts; say what the other default rules would cost here."""
    rules = client.request("GET", f"/v1/models/{scenario.MODEL}/rules")["rules"]
    for rule in rules:
        if rule["name"] in CHART_RULES:
            continue
        client.request("PUT", f"/v1/models/{scenario.MODEL}/rules/{rule['name']}", json={"enabled": False})
        share = rule["false_alarms"].get("share_per_year")
        # The traffic is history that ended days ago: the feed is silent by construction.
        cost = ("the demo's feed is historical, so it is silent by construction"
                if rule["kind"] == "starvation" else
                f"its share of the budget, {share * days / 365.25:.2f} false alarms over {days} days"
                if share else "outside the budget")
        say(f"  rule {rule['name']} disabled for the demo ({cost})")
    say("  kept: the two calibration charts, which now share the model's whole budget of "
        "1 false alarm a year")


def _print_delivery(delivery: Delivery) -> None:
    if not delivery.valid:
        say(f"  webhook {delivery.webhook_id}: INVALID signature, ignored")
        return
    event = delivery.event or {}
    data = event.get("data", {})
    alarm = data.get("alarm") or {}
    segment = data.get("segment")
    where = f"{segment['key']}={segment['value']}" if segment else "all traffic"
    say(f"  webhook {event.get('type')} (signature valid): {alarm.get('rule')} on {where}, "
        f"crossed at {data.get('evidence', {}).get('crossed_at')}")


def _wait_for_deliveries(receiver: WebhookReceiver, expected: int) -> None:
    # Deliveries are made inside the refresh; polling only absorbs the HTTP round trips.
    deadline = time.monotonic() + DELIVERY_DEADLINE_S
    while len(receiver.alarms()) < expected and time.monotonic() < deadline:
        time.sleep(0.05)


def run(config: scenario.ScenarioConfig, workdir: Path) -> DemoResult:
    started = time.monotonic()
    now = datetime.now(UTC)
    say(f"{scenario.COMPANY} (an invented courier) scores every parcel with the probability that it "
        "misses its promised day.")
    traffic = scenario.generate(config, now)
    say(f"  {len(traffic.predictions):,} parcels booked from {traffic.start:%Y-%m-%d} over {config.days} "
        f"days; {len(traffic.outcomes):,} reported late (on-time parcels are never reported)")
    say(f"  from {traffic.drift_date:%Y-%m-%d} the odds of lateness double in the "
        f"{scenario.DRIFTING_DEPOT} depot only")
    with demo_service(workdir) as base_url, \
            Client(base_url, timeout=REQUEST_TIMEOUT_S, max_retries=REQUEST_RETRIES) as client, \
            WebhookReceiver(_print_delivery) as receiver:
        say(f"calibrant serving on {base_url} (database {workdir / 'calibrant.db'})")
        client.request("PUT", f"/v1/models/{scenario.MODEL}", json=scenario.MODEL_SETTINGS)
        _keep_only_charts(client, config.days)
        hook = client.request("POST", "/v1/webhooks", json={
            "url": receiver.url, "description": "demo receiver", "model": scenario.MODEL,
            "types": ["alarm.opened", "alarm.resolved"]})
        receiver.secret = hook["secret"]
        say(f"webhook receiver on {receiver.url}")
        # History is backfilled as a production system would send it: predictions, then outcomes.
        _post(client, "predictions", traffic.predictions)
        _post(client, "outcomes", traffic.outcomes)
        say("running the jobs (a refresh job, POST /v1/refresh): summaries, charts, webhook delivery ...")
        job = client.refresh(timeout=REFRESH_TIMEOUT_S, poll_seconds=0.5, on_progress=_JobBar())
        jobs = job["result"]["jobs"]
        say(f"  {jobs['refresh'].get('buckets', 0):,} hourly summaries, {jobs['alarms'].get('cases', 0):,} "
            f"chart cases, {jobs['alarms'].get('opened', 0)} alarm(s) opened")
        alarms = client.request("GET", f"/v1/models/{scenario.MODEL}/alarms")["alarms"]
        _wait_for_deliveries(receiver, len(alarms))
        result = DemoResult(base_url, traffic.start, traffic.drift_date, hook["secret"],
                            list(receiver.deliveries), alarms)
        _where_to_look(workdir, traffic, alarms, config)
    result.seconds = time.monotonic() - started
    return result


def _where_to_look(workdir: Path, traffic: scenario.Traffic, alarms: list[dict],
                   config: scenario.ScenarioConfig) -> None:
    def rfc(t: datetime) -> str:
        return t.strftime("%Y-%m-%dT%H:%M:%SZ")

    end = traffic.start + timedelta(days=config.days)
    span = f"start={rfc(traffic.start)}&end={rfc(end)}"
    m = f"http://127.0.0.1:8000/v1/models/{scenario.MODEL}"
    say("")
    say("Where to look: serve the demo's database, then ask it (another terminal):")
    say(f"  CALIBRANT_DATABASE_URL=sqlite:///{workdir / 'calibrant.db'} make run")
    say(f"  pages, in a browser: http://127.0.0.1:8000/models/{scenario.MODEL}?{span}")
    for depot in scenario.DEPOTS:
        tag = quote(f"{scenario.SEGMENT_KEY}:{depot.name}")
        say(f"  weekly metrics, {depot.name}: curl -s '{m}/metrics?{span}&granularity=week&tag={tag}'")
    say(f"  alarms:                     curl -s '{m}/alarms'")
    for alarm in alarms:
        seg = alarm["segment"]
        where = f"{seg['key']}={seg['value']}" if seg else "all traffic"
        say(f"  alarm {alarm['id']} ({alarm['rule']}, {where}): "
            f"curl -s '{m}/alarms/{alarm['id']}'")
        say(f"  its backtest:  curl -s -X POST '{m}/rules/{alarm['rule']}/backtest?{span}'")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m demo", description=__doc__)
    parser.add_argument("--workdir", type=Path, default=Path("var/demo"))
    args = parser.parse_args(argv)
    try:
        result = run(scenario.ScenarioConfig(), args.workdir)
    except (CalibrantError, DemoServiceError) as exc:  # say what stopped it, without a traceback
        say(f"\ndemo stopped: {exc}")
        return 1
    say(f"\ndemo finished in {result.seconds:.0f} s; {len(result.alarms)} alarm(s), "
        f"{sum(d.valid for d in result.deliveries)} signed webhook(s) verified")
    return 0


if __name__ == "__main__":
    sys.exit(main())
