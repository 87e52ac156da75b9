"""`calibrant export`: the file holds what the API answers for the same range and filters."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest

from calibrant.cli import main
from calibrant.clock import FixedClock
from calibrant.files.exporting import export_cases, export_metrics, flatten
from calibrant.store.engine import make_session_factory
from tests.alarms.streams import iso, refresh
from tests.api.payloads import post_outcomes, post_predictions
from tests.conftest import Database, make_client
from tests.files.test_import import T0, _rows

NOW = datetime(2026, 4, 1, tzinfo=UTC)
RANGE = {"start": iso(T0), "end": iso(T0 + timedelta(days=14))}


def _read(path: Path, fmt: str) -> pd.DataFrame:
    return pd.read_csv(path) if fmt == "csv" else pd.read_parquet(path)


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_exported_metrics_and_cases_match_the_api(db: Database, tmp_path: Path, fmt: str) -> None:
    preds, outs = _rows()
    preds[0]["version"] = "v2"
    with make_client(db, FixedClock(NOW)) as client:
        assert client.put("/v1/models/ex", json={"segment_keys": ["depot"]}).status_code in (200, 201)
        assert post_predictions(client, "ex", preds).status_code == 200
        assert post_outcomes(client, "ex", outs[: len(outs) // 2]).status_code == 200
        refresh(client)
        api = client.get("/v1/models/ex/metrics", params={**RANGE, "granularity": "week",
                                                         "tag": "depot:north"}).json()["periods"]
    sessions = make_session_factory(db.engine)
    with sessions() as session:
        assert export_metrics(session, "ex", tmp_path / f"m.{fmt}", fmt, granularity="week", window=None,
                              version=None, tag=["depot:north"], now=NOW, **RANGE) == len(api)
        cases = export_cases(session, "ex", tmp_path / f"c.{fmt}", fmt, version="v1", tag=["depot:south"],
                             **RANGE)
    metrics = _read(tmp_path / f"m.{fmt}", fmt)
    for row, period in zip(metrics.to_dict("records"), api, strict=True):
        expected = flatten(period)
        assert row["n_labeled"] == expected["n_labeled"]
        assert row["brier"] == pytest.approx(expected["brier"])
        assert row["log_loss_ci_low"] == pytest.approx(expected["log_loss_ci_low"])
    south = [p for p in preds if p["version"] == "v1" and p["tags"]["depot"] == "south"]
    exported = _read(tmp_path / f"c.{fmt}", fmt)
    assert cases == len(south) == len(exported)
    assert set(exported["id"]) == {p["id"] for p in south}
    labelled = {o["id"]: o["label"] for o in outs[: len(outs) // 2]}
    for row in exported.to_dict("records"):
        assert (None if pd.isna(row["label"]) else int(row["label"])) == labelled.get(row["id"])


def test_the_command_refuses_a_bad_range_with_the_field_named(db: Database, tmp_path: Path, capsys,
                                                              monkeypatch) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    with make_client(db, FixedClock(NOW)) as client:
        assert post_predictions(client, "ex", _rows()[0][:5]).status_code == 200
    code = main(["export", "cases", "--model", "ex", "--start", RANGE["end"], "--end", RANGE["start"],
                 "--out", str(tmp_path / "c.csv")])
    assert code == 2
    assert "end: must be after start" in capsys.readouterr().err
    assert not (tmp_path / "c.csv").exists()
