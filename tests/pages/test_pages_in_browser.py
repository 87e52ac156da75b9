"""The pages in a real browser (Debian's Chromium via Playwright) against a seeded service, on
SQLite and PostgreSQL: every page loads with its plots drawn, no console error, no failed
request and no request to another host; model → alarm by clicking; screenshots are kept.

A plot counts as drawn when the plotting library's SVG is in its container and the traces
the page names (the segment's series, the CUSUM path, its limit line, the crossing) are in
that SVG: a figure that fails to render fails these tests (see the last test, which takes
the plotting script away and checks that the same check then fails).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from playwright.sync_api import Browser, Page, expect

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, iso
from tests.api.issued_keys import create_key
from tests.api.payloads import post_predictions, prediction
from tests.conftest import Database, make_client
from tests.pages.browser import PageWatch, screenshot
from tests.pages.live_server import serving
from tests.pages.seed import DRIFTING, MODEL, QUIET_MODEL, SETTINGS, seed

SCREENSHOTS = Path(__file__).resolve().parents[2] / "var" / "page-screenshots"
SERIES = ("log_loss", "brier", "calibration_intercept", "calibration_slope", "oe_ratio")
RENDER_TIMEOUT_MS = 20_000


def plot_drawn(page: Page, testid: str, timeout_ms: int = RENDER_TIMEOUT_MS) -> None:
    """The plot's container holds the library's SVG and says it finished drawing."""
    plot = page.get_by_test_id(f"plot-{testid}")
    expect(plot).to_have_attribute("data-rendered", "true", timeout=timeout_ms)
    expect(plot.locator("svg.main-svg").first).to_be_attached()


def test_overview_model_and_alarm_pages_render_and_click_through(db: Database, browser: Browser) -> None:
    seeded = seed(db)
    shots = SCREENSHOTS / db.dialect
    with serving(db, seeded.clock, **SETTINGS) as base:
        context = browser.new_context(viewport={"width": 1360, "height": 900})
        page = context.new_page()
        watch = PageWatch(host=base.removeprefix("http://"))
        watch.attach(page)

        page.goto(base + "/")
        rows = page.get_by_test_id("model-row")
        expect(rows).to_have_count(2)
        expect(page.locator(f"[data-model='{MODEL}'] [data-testid=open-alarm-count]")).to_have_text(
            str(seeded.open_alarms))
        expect(page.locator(f"[data-model='{QUIET_MODEL}']")).to_contain_text("no labeled week yet")
        expect(page.get_by_test_id("caution")).to_contain_text("does not replace, validation")
        screenshot(page, shots, "overview")

        page.locator(f"[data-model='{MODEL}'] [data-testid=model-link]").click()
        page.wait_for_url(f"{base}/models/{MODEL}")
        for key in SERIES:
            plot_drawn(page, f"series-{key}")
        for testid in ("coverage", "reliability", "drift"):
            plot_drawn(page, testid)
        # The drifting segment's own series is drawn beside all cases, named as the segment in alarm.
        log_loss = page.get_by_test_id("plot-series-log_loss")
        expect(log_loss.get_by_test_id("trace-log_loss-all")).to_have_count(1)
        expect(log_loss.get_by_test_id("trace-log_loss-segment")).to_have_count(1)
        expect(log_loss.locator(".legendtext", has_text=f"{DRIFTING[0]}={DRIFTING[1]}")).to_have_count(1)
        expect(page.get_by_test_id("reliability-bins").locator("path.point").first).to_be_attached()
        expect(page.get_by_test_id("alarm-row")).to_have_count(seeded.open_alarms)
        drifting_alarm = page.get_by_test_id("alarm-row").filter(has_text=f"{DRIFTING[0]}={DRIFTING[1]}")
        expect(drifting_alarm).to_have_count(1)
        expect(page.get_by_test_id("segment-row")).to_have_count(2)
        expect(page.get_by_test_id("caution")).to_be_visible()
        screenshot(page, shots, "model")

        drifting_alarm.get_by_test_id("alarm-link").click()
        page.wait_for_url(f"{base}/models/{MODEL}/alarms/{seeded.alarm_id}")
        plot_drawn(page, "cusum")
        cusum = page.get_by_test_id("plot-cusum")
        expect(cusum.get_by_test_id("cusum-path").locator("path.js-line")).to_have_count(1)
        expect(cusum.get_by_test_id("limit-line").locator("path.js-line")).to_have_count(1)
        expect(cusum.get_by_test_id("crossing-marker").locator("path.point")).to_have_count(1)
        expect(page.get_by_test_id("alarm-state")).to_have_text("open")
        expect(page.get_by_test_id("crossing-step")).to_have_count(1)
        expect(page.get_by_test_id("crossing-case")).to_contain_text("outcome")
        expect(page.get_by_test_id("nearby-case").filter(has_text=seeded.crossing_case)).to_have_count(1)
        assert page.get_by_test_id("nearby-case").count() > 1
        expect(page.get_by_test_id("deliveries")).to_contain_text("alarm.opened")
        expect(page.get_by_test_id("caution")).to_be_visible()
        screenshot(page, shots, "alarm")

        # Everything came from the server itself, including the plotting library.
        assert any(url.endswith("/pages-static/plotly.min.js") for url in watch.requests)
        watch.assert_clean()
        context.close()


def test_the_render_check_fails_when_the_plotting_script_is_missing(db: Database, browser: Browser) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        assert post_predictions(client, QUIET_MODEL, [prediction("a", scored_at=iso(T0))]).status_code == 200
    with serving(db, clock) as base:
        context = browser.new_context()
        page = context.new_page()
        page.goto(f"{base}/models/{QUIET_MODEL}")
        plot_drawn(page, "series-log_loss")  # drawn when the script is there
        page.route("**/pages-static/plotly.min.js", lambda route: route.abort())
        page.reload()
        with pytest.raises(AssertionError):
            plot_drawn(page, "series-log_loss", timeout_ms=2000)
        expect(page.get_by_test_id("plot-series-log_loss").locator("svg.main-svg")).to_have_count(0)
        context.close()


def test_signing_in_in_the_browser_opens_the_pages_and_never_the_api(
        db: Database, browser: Browser, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        assert post_predictions(client, QUIET_MODEL, [prediction("a", scored_at=iso(T0))]).status_code == 200
    token = create_key(db, monkeypatch, capsys, "read")
    with serving(db, clock, auth="required") as base:
        context = browser.new_context()
        page = context.new_page()
        watch = PageWatch(host=base.removeprefix("http://"))
        watch.attach(page)
        page.goto(base + "/")
        page.wait_for_url(f"{base}/sign-in?next=%2F")
        page.get_by_test_id("key-input").fill(token)
        page.get_by_test_id("sign-in-button").click()
        page.wait_for_url(f"{base}/")
        expect(page.get_by_test_id("model-row")).to_have_count(1)
        screenshot(page, SCREENSHOTS / db.dialect, "signed-in")
        (cookie,) = context.cookies()
        assert (cookie["httpOnly"], cookie["sameSite"]) == (True, "Strict")
        assert page.evaluate("document.cookie") == ""  # the page's scripts cannot read it
        assert page.request.get(base + "/v1/models").status == 401  # the cookie is sent, and refused
        page.get_by_test_id("sign-out").click()
        page.wait_for_url(f"{base}/sign-in")
        assert context.cookies() == []
        watch.assert_clean()
        context.close()
