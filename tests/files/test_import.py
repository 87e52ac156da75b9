"""`calibrant import`: files go through the ingest service, as HTTP batches do.

The expected metrics are those of the same rows posted over HTTP to another model (the HTTP
path is itself checked against scikit-learn in tests/rollup); what is tested here is that a file
and a request give the same stored data, and what happens to bad rows and to a re-run.
"""

from __future__ import annotations

import csv
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from calibrant.clock import FixedClock
from calibrant.files.importing import import_file, reject_path
from calibrant.files.reading import Layout
from calibrant.store.engine import make_session_factory
from tests.alarms.streams import iso, refresh
from tests.api.payloads import count_rows, post_outcomes, post_predictions
from tests.conftest import REPLAY_TOLERANCE_HOURS, Database, make_client

T0 = datetime(2026, 3, 2, tzinfo=UTC)
NOW = datetime(2026, 4, 1, tzinfo=UTC)
N = 400


def _rows() -> tuple[list[dict], list[dict]]:
    rng = np.random.default_rng(22)
    p = rng.uniform(0.02, 0.98, N)
    y = (rng.uniform(size=N) < p).astype(int)
    scored = [T0 + timedelta(minutes=int(m)) for m in rng.integers(0, 14 * 24 * 60, N)]
    depots = rng.choice(["north", "south"], N)
    preds = [{"id": f"c{i}", "probability": float(p[i]), "scored_at": iso(scored[i]),
              "version": "v1", "tags": {"depot": str(depots[i])}} for i in range(N)]
    outs = [{"id": f"c{i}", "label": int(y[i]), "observed_at": iso(scored[i] + timedelta(days=1))}
            for i in range(N)]
    return preds, outs


def _prediction_frame(preds: list[dict]) -> pd.DataFrame:
    return pd.DataFrame({
        "id": [r["id"] for r in preds], "probability": [r["probability"] for r in preds],
        "scored_at": [r["scored_at"] for r in preds], "version": [r["version"] for r in preds],
        "tag.depot": [r["tags"]["depot"] for r in preds],
    })


def _import(db: Database, path: Path, kind: str, model: str, **layout: object):
    settings = db.settings(future_tolerance_hours=REPLAY_TOLERANCE_HOURS)
    return import_file(path, Layout(kind, **layout), model=model, sessions=make_session_factory(db.engine),
                       settings=settings, clock=FixedClock(NOW), chunk_rows=97, progress=False)


def _metrics(client, model: str) -> dict:
    r = client.get(f"/v1/models/{model}/metrics", params={
        "start": iso(T0), "end": iso(T0 + timedelta(days=14)), "granularity": "week"})
    assert r.status_code == 200, r.text
    return r.json()["periods"]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_a_file_gives_the_metrics_of_the_same_rows_posted_and_a_rerun_changes_nothing(
        db: Database, tmp_path: Path, fmt: str) -> None:
    preds, outs = _rows()
    pfile, ofile = tmp_path / f"p.{fmt}", tmp_path / f"o.{fmt}"
    frame = _prediction_frame(preds)
    outcomes = pd.DataFrame(outs)
    if fmt == "csv":
        frame.to_csv(pfile, index=False)
        outcomes.to_csv(ofile, index=False)
    else:
        frame.to_parquet(pfile)
        outcomes.to_parquet(ofile)
    first = _import(db, pfile, "predictions", "from-file")
    assert (first.rows, first.accepted, first.rejected) == (N, N, 0)
    assert _import(db, ofile, "outcomes", "from-file").accepted == N
    with make_client(db, FixedClock(NOW)) as client:
        for k in range(0, N, 200):
            assert post_predictions(client, "over-http", preds[k:k + 200]).status_code == 200
            assert post_outcomes(client, "over-http", outs[k:k + 200]).status_code == 200
        refresh(client)
        imported, posted = _metrics(client, "from-file"), _metrics(client, "over-http")
        assert imported == posted
        assert sum(period["n_labeled"] for period in imported) == N
        tags = client.get("/v1/models/from-file/cases/c7").json()["predictions"][0]["tags"]
        assert tags == preds[7]["tags"]
        rows_before = count_rows(db, "predictions"), count_rows(db, "outcomes")
        again = _import(db, pfile, "predictions", "from-file")
        again_out = _import(db, ofile, "outcomes", "from-file")
        assert (again.accepted, again.duplicates, again_out.accepted, again_out.corrected) == (0, N, 0, 0)
        assert (count_rows(db, "predictions"), count_rows(db, "outcomes")) == rows_before
        refresh(client)
        assert _metrics(client, "from-file") == imported
    imports = "SELECT COUNT(*) FROM audit_events WHERE actor = 'cli' AND action = 'import.predictions'"
    assert db.scalar(imports) == 2
    creator = "SELECT actor FROM audit_events WHERE action = 'model.created' AND target = 'from-file'"
    assert db.scalar(creator) == "cli"
    assert not reject_path(pfile).exists()


def test_refused_rows_go_to_the_reject_file_with_their_lines_and_the_rest_is_stored(
        db: Database, tmp_path: Path) -> None:
    path = tmp_path / "scores.csv"
    path.write_text(
        "case,p,when,tag.depot\n"
        "a,0.2,2026-03-03T10:00:00Z,north\n"          # line 2: good
        "b,1.7,2026-03-03T10:00:00Z,north\n"          # line 3: probability outside [0, 1]
        "c,0.3,2026-03-03 11:00:00,\n"                # line 4: naive time, taken in the given zone
        "d,high,1999-12-31T23:00:00Z,south\n"         # line 5: two problems
        "a,0.2,2026-03-03T10:00:00Z,north\n"          # line 6: repeats line 2 in the same chunk
        "e,0.4,2036-03-03T10:00:00Z,south\n",         # line 7: later than the accepted window
        encoding="utf-8",
    )
    settings = db.settings()  # the default window: one day past the clock
    counts = import_file(path, Layout("predictions", {"id": "case", "probability": "p", "scored_at": "when"},
                                      "Europe/Berlin"),
                         model="depots", sessions=make_session_factory(db.engine), settings=settings,
                         clock=FixedClock(NOW), chunk_rows=1000, progress=False)
    assert (counts.rows, counts.accepted, counts.rejected) == (6, 2, 4)
    with reject_path(path).open(encoding="utf-8") as handle:
        rejected = list(csv.DictReader(handle))
    by_line: dict[str, list[str]] = {}
    for row in rejected:
        by_line.setdefault(row["line"], []).append(row["field"])
    assert by_line == {"3": ["probability"], "5": ["probability", "scored_at"], "6": ["id"],
                       "7": ["scored_at"]}
    assert "earliest accepted instant" in next(r["reason"] for r in rejected if r["line"] == "5"
                                               and r["field"] == "scored_at")
    # 11:00 in Berlin in March (winter time, UTC+1) is 10:00 UTC.
    with make_client(db, FixedClock(NOW)) as client:
        case = client.get("/v1/models/depots/cases/c").json()["predictions"][0]
    assert datetime.fromisoformat(case["scored_at"]) == datetime(2026, 3, 3, 10, tzinfo=UTC)
    assert count_rows(db, "predictions") == 2


def test_a_naive_time_without_a_zone_is_refused_and_a_changed_prediction_is_a_rejected_conflict(
        db: Database, tmp_path: Path) -> None:
    path = tmp_path / "p.csv"
    path.write_text("id,probability,scored_at\na,0.2,2026-03-03T10:00:00Z\nb,0.3,2026-03-03 11:00:00\n",
                    encoding="utf-8")
    assert _import(db, path, "predictions", "m").rejected == 1
    assert "no UTC offset" in reject_path(path).read_text(encoding="utf-8")
    path.write_text("id,probability,scored_at\na,0.9,2026-03-03T10:00:00Z\n", encoding="utf-8")
    counts = _import(db, path, "predictions", "m")
    assert (counts.accepted, counts.rejected) == (0, 1)
    assert "immutable" in reject_path(path).read_text(encoding="utf-8")
    assert db.scalar("SELECT probability FROM predictions WHERE case_id = 'a'") == pytest.approx(0.2)


def test_the_command_names_a_missing_column_and_writes_nothing(db: Database, tmp_path: Path, capsys,
                                                                monkeypatch) -> None:
    from calibrant.cli import main

    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    path = tmp_path / "o.csv"
    path.write_text("case,label,observed_at\na,1,2026-03-03T10:00:00Z\n", encoding="utf-8")
    assert main(["import", "outcomes", str(path), "--model", "m", "--quiet"]) == 2
    assert "id (column 'id')" in capsys.readouterr().err
    assert count_rows(db, "outcomes") == 0
    assert main(["import", "outcomes", str(path), "--model", "m", "--quiet", "--column", "id=case"]) == 0
    assert "accepted 1" in capsys.readouterr().out
    assert count_rows(db, "outcomes") == 1


def test_an_unknown_time_zone_is_refused_before_anything_is_read(db: Database, tmp_path: Path, capsys,
                                                                  monkeypatch) -> None:
    from calibrant.cli import main

    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    path = tmp_path / "p.csv"
    path.write_text("id,probability,scored_at\na,0.2,2026-03-03 10:00:00\n", encoding="utf-8")
    argv = ["import", "predictions", str(path), "--model", "m", "--quiet", "--time-zone", "Nowhere/Town"]
    assert main(argv) == 2
    assert "--time-zone: unknown time zone 'Nowhere/Town'" in capsys.readouterr().err
    assert count_rows(db, "predictions") == 0
