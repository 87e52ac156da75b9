"""CI version of tests/bench/report.py: its figures are finite and the report's log-loss and Brier
score equal scikit-learn's (``log_loss``, ``brier_score_loss``) on the rows as known then."""

from __future__ import annotations

import math

import pandas as pd
import pytest
import sqlalchemy as sa
from sklearn.metrics import brier_score_loss, log_loss
from tests.bench.report import AS_OF_PAST, YEAR_END, YEAR_START, run
from tests.conftest import _truncate_all

from calibrant.config import Settings
from calibrant.store.engine import make_engine


def _labels(engine: sa.Engine, model_id: int, as_of) -> pd.DataFrame:
    """Each prediction of the year with its latest label revision received by ``as_of`` (pandas)."""
    with engine.connect() as conn:
        predictions = pd.read_sql(sa.text(
            "SELECT case_id, probability FROM predictions WHERE model_id = :m "
            "AND scored_at >= :lo AND scored_at < :hi"), conn,
            params={"m": model_id, "lo": YEAR_START, "hi": YEAR_END})
        revisions = pd.read_sql(sa.text(
            "SELECT case_id, revision, label, received_at FROM outcome_revisions WHERE model_id = :m"),
            conn, params={"m": model_id})
    known = revisions[pd.to_datetime(revisions["received_at"], utc=True) <= pd.Timestamp(as_of)]
    latest = known.sort_values("revision").groupby("case_id").tail(1)[["case_id", "label"]]
    return predictions.merge(latest, on="case_id", how="inner")


def test_small_report_benchmark(postgres_schema_url: str) -> None:
    engine = make_engine(Settings(database_url=postgres_schema_url))
    try:
        _truncate_all(engine)
        result = run(postgres_schema_url, 20_000)
        for key in ("load_s", "bulk_join_s", "report_now_s", "report_past_s", "rows_per_s_now",
                    "ratio_now_to_bulk", "html_s", "pdf_s"):
            assert math.isfinite(result[key]), key
            assert result[key] > 0, key
        now, past = result["now_report"].body, result["past_report"].body
        assert len(now["periods"]) == 52
        assert now["overall"]["n_predictions"] == 20_000
        for body, as_of in ((now, YEAR_START.replace(year=2030)), (past, AS_OF_PAST)):
            rows = _labels(engine, result["model_id"], as_of)
            assert body["overall"]["n_labeled"] == len(rows)
            assert body["overall"]["log_loss"] == pytest.approx(
                log_loss(rows["label"], rows["probability"]), rel=1e-9)
            assert body["overall"]["brier"] == pytest.approx(
                brier_score_loss(rows["label"], rows["probability"]), rel=1e-9)
        arrived = result["past_report"].restatements["arrived_after_as_of"]
        assert arrived["first_labels"] > 0
        assert arrived["corrections"] > 0
        assert result["pdf_bytes"] > 0
    finally:
        engine.dispose()
