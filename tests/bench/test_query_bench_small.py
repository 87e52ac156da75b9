"""CI version of tests/bench/query.py: its figures are finite and its answers equal a direct
computation on the loaded rows (sklearn log_loss / brier_score_loss, numpy means)."""

from __future__ import annotations

import math
from datetime import UTC, datetime

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sklearn.metrics import brier_score_loss, log_loss
from sqlalchemy.orm import Session
from tests.bench.query import NOW, YEAR_END, run
from tests.conftest import _truncate_all

from calibrant.config import Settings
from calibrant.rollup import metrics_service
from calibrant.store.engine import make_engine


def test_small_query_benchmark(postgres_schema_url: str) -> None:
    engine = make_engine(Settings(database_url=postgres_schema_url))
    try:
        _truncate_all(engine)
        result = run(postgres_schema_url, 20_000, hours_per_day=2, repeats=3)
        figures = [result[k] for k in ("load_s", "full_refresh_rows_per_s", "incremental_s",
                                       "incremental_rows_per_s", "query_p50_s", "query_p95_s",
                                       "hours_only_p50_s")]
        assert all(math.isfinite(f) and f > 0 for f in figures), result
        assert result["buckets"] == 364 * 2
        assert result["incremental_buckets"] == 728 // 100
        assert result["full_refresh_days"] == 364  # each day merged once in a full refresh
        assert 1 <= result["incremental_days"] <= result["incremental_buckets"]
        periods = result["periods"]
        assert len(periods) == 52

        with engine.connect() as conn:
            rows = pd.read_sql(sa.text(
                "SELECT p.probability, o.label, p.scored_at FROM predictions p "
                "JOIN outcomes o ON o.model_id = p.model_id AND o.case_id = p.case_id"), conn)
        assert len(rows) == 20_000 == result["labeled_rows"]
        assert sum(p["n_predictions"] for p in periods) == 20_000
        # every week against sklearn on the rows pandas puts in it
        for period in periods:
            lo, hi = period["start"], period["end"]  # the service function answers datetimes
            week = rows[(rows.scored_at >= lo) & (rows.scored_at < hi)]
            assert period["n_predictions"] == len(week)
            assert math.isclose(period["log_loss"], log_loss(week.label, week.probability, labels=[0, 1]),
                                rel_tol=1e-12)
            brier = brier_score_loss(week.label, week.probability)
            assert math.isclose(period["brier"], brier, rel_tol=1e-12)
        assert periods[0]["start"] == datetime(2025, 1, 6, tzinfo=UTC)  # YEAR_START, a Monday
        # the whole year in one trailing window ending at the last week's end
        year = query_window(engine)
        assert year["n_predictions"] == 20_000
        assert math.isclose(year["log_loss"], log_loss(rows.label, rows.probability, labels=[0, 1]),
                            rel_tol=1e-12)
        assert math.isclose(year["mean_probability"], float(np.mean(rows.probability)), rel_tol=1e-12)
    finally:
        engine.dispose()


def query_window(engine: sa.Engine) -> dict:
    with Session(engine) as session:
        body = metrics_service.metrics(
            session, "bench-year", start=(YEAR_END - pd.Timedelta(days=1)).isoformat(),
            end=YEAR_END.isoformat(), granularity="day", window="366d", version=None, tag=[], now=NOW)
    (period,) = body["periods"]
    return period
