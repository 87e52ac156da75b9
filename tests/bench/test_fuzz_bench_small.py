"""CI version of tests/bench/fuzz.py: a few schema-driven cases of every operation, both modes,
on both databases; none may be a server error, and every case is counted once."""

from __future__ import annotations

from tests.bench.fuzz import NOW, fuzz_settings, run_campaign
from tests.conftest import Database

from calibrant.app import create_app
from calibrant.clock import FixedClock


def test_small_fuzz_finds_no_server_error(db: Database) -> None:
    app = create_app(fuzz_settings(db.url), engine=db.engine, clock=FixedClock(NOW))
    report = run_campaign(app, db.dialect, cases_per_mode=3, run_seed=17)
    operations = len(app.openapi()["paths"])
    assert report.cases >= 2 * operations  # at least one case of each path in each mode
    assert sum(report.statuses.values()) == report.cases
    assert report.server_errors == 0, "\n".join(report.lines())
    assert report.long_range_status == 422
    assert report.long_range_ms > 0
