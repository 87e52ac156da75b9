"""HTML and PDF carry the same report: contents, page numbers, charts, the model and its log-loss.

The PDF's text is read back with pypdf, an independent PDF reader; the log-loss printed is
checked against scikit-learn's ``log_loss`` of the scenario's labeled cases.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from io import BytesIO
from pathlib import Path

import pytest
from pypdf import PdfReader
from sklearn.metrics import log_loss

from calibrant.cli import main
from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.reports.scenario import CASES, FIRST_LABELS, MODEL, PLAN, SPAN, outcome, post, prediction

T0 = datetime(2026, 3, 2, 8, tzinfo=UTC)


def _load(client) -> None:
    post(client, "predictions", [prediction(*c) for c in CASES])
    post(client, "outcomes", [outcome(c, y) for c, y in FIRST_LABELS.items()])
    assert client.put(f"/v1/models/{MODEL}/plan", json=PLAN).status_code == 200


def _expected_log_loss() -> float:
    probs = {case: p for case, p, _, _ in CASES}
    cases = sorted(FIRST_LABELS)
    return log_loss([FIRST_LABELS[c] for c in cases], [probs[c] for c in cases])


def test_html_and_pdf_show_the_same_report_with_contents_page_numbers_and_charts(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        _load(client)
        clock.advance(timedelta(hours=1))
        document = client.get(f"/v1/models/{MODEL}/report", params=SPAN).json()
        html = client.get(f"/v1/models/{MODEL}/report", params={**SPAN, "format": "html"})
        pdf = client.get(f"/v1/models/{MODEL}/report", params={**SPAN, "format": "pdf"})
    assert html.status_code == 200
    assert html.headers["content-type"].startswith("text/html")
    assert pdf.status_code == 200
    assert pdf.headers["content-type"] == "application/pdf"

    printed = f"{_expected_log_loss():.4f}"  # the report prints figures to 4 decimals
    assert document["overall"]["log_loss"] == pytest.approx(_expected_log_loss(), rel=1e-12)
    page = html.text
    assert MODEL in page
    assert printed in page
    assert page.count("<svg") >= 3  # a chart per tolerance metric and the reliability diagram
    assert 'href="#restatements"' in page
    assert document["content_hash"] in page

    reader = PdfReader(BytesIO(pdf.content))
    text = "\n".join(p.extract_text() for p in reader.pages)
    assert len(reader.pages) >= 3
    assert MODEL in text
    assert printed in text
    assert "Contents" in text
    assert "Restatements" in text
    assert f"Page {len(reader.pages)}" in reader.pages[-1].extract_text()
    # The contents list each section with the page it starts on.
    first_page = reader.pages[0].extract_text()
    assert "Metrics against tolerances" in first_page
    assert "Monitoring plan" in first_page


def test_the_cli_writes_the_report_to_a_file(db: Database, tmp_path: Path, monkeypatch, capsys) -> None:
    clock = FixedClock(datetime.now(UTC) - timedelta(hours=1))
    with make_client(db, clock=clock) as client:
        _load(client)
    out = tmp_path / "report.pdf"
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    code = main(["report", MODEL, "--start", SPAN["start"], "--end", SPAN["end"], "--format", "pdf",
                 "--out", str(out)])
    assert code == 0
    assert "written to" in capsys.readouterr().out
    text = "\n".join(p.extract_text() for p in PdfReader(out).pages)
    assert MODEL in text
    assert f"{_expected_log_loss():.4f}" in text

    assert main(["report", MODEL, "--start", SPAN["end"], "--end", SPAN["start"], "--out", str(out)]) == 2
    assert "end: must be after start" in capsys.readouterr().err
