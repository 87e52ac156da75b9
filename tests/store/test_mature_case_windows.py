"""Reading mature cases in windows gives exactly the cases, in exactly the order, that the
maturity definition gives (docs/architecture.md, data semantics, as restated in ``store.mature_cases``).

The expected list is computed by pandas from the rows the test posted: with a horizon H and
lag L a case matures at the end of its scored hour + H + L, without a horizon at the end of
its scored hour + L (whether or not a label came: an unlabeled case reads as −1), and must be
≤ now. Order is (maturity, case id). The data has a gap of weeks (a quiet stretch the reader skips in one
probe), an outcome observed before its prediction was scored, a corrected label, and
windows of 6 hours so that many windows are read.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.store import models_repo
from calibrant.store.mature_cases import mature_case_windows
from tests.conftest import Database, make_client

T0 = datetime(2026, 3, 2, tzinfo=UTC)
NOW = T0 + timedelta(days=40)
WINDOW = timedelta(hours=6)


def _post(client, model: str, rng: np.random.Generator) -> pd.DataFrame:
    days = [0, 1, 2, 25, 26]  # three weeks without traffic between day 2 and day 25
    scored = [T0 + timedelta(days=d, seconds=int(s)) for d in days for s in rng.integers(0, 86400, 30)]
    n = len(scored)
    frame = pd.DataFrame({
        "id": [f"k{i:03d}" for i in range(n)],
        "p": rng.uniform(0.05, 0.95, n),
        "scored_at": pd.to_datetime(scored, utc=True),
        "label": rng.integers(0, 2, n),
        # most outcomes 2-30 h after scoring; some observed before the score; some never
        "observed_at": pd.to_datetime(scored, utc=True) + pd.to_timedelta(rng.integers(-3, 30, n), unit="h"),
    })
    frame.loc[rng.random(n) < 0.2, "label"] = -1
    preds = [{"id": r.id, "probability": float(r.p), "scored_at": r.scored_at.isoformat()}
             for r in frame.itertuples()]
    assert client.post(f"/v1/models/{model}/predictions", json={"predictions": preds}).status_code == 200
    labeled = frame[frame.label >= 0]
    outs = [{"id": r.id, "label": int(r.label), "observed_at": r.observed_at.isoformat()}
            for r in labeled.itertuples()]
    assert client.post(f"/v1/models/{model}/outcomes", json={"outcomes": outs}).status_code == 200
    # a correction observed much later keeps the case's first observation time
    fix = labeled.iloc[0]
    late = {"id": fix.id, "label": 1 - int(fix.label), "observed_at": (fix.observed_at + pd.Timedelta(days=9))
            .isoformat()}
    r = client.post(f"/v1/models/{model}/outcomes", json={"outcomes": [late]})
    assert r.json()["corrected"] == 1
    frame.loc[frame.id == fix.id, "label"] = 1 - int(fix.label)
    return frame


def _expected(frame: pd.DataFrame, horizon: int | None, lag: int, after: datetime | None) -> list:
    f = frame.copy()
    f["matured"] = f.scored_at.dt.floor("h") + pd.Timedelta(hours=1) + pd.Timedelta(days=(horizon or 0) + lag)
    f = f[f.matured <= pd.Timestamp(NOW)]
    if after is not None:
        f = f[f.matured >= pd.Timestamp(after)]
    f = f.sort_values(["matured", "id"])
    return [(m.to_pydatetime(), i) for m, i in zip(f.matured, f.id, strict=True)]


@pytest.mark.parametrize("horizon", [2, None], ids=["horizon", "no-horizon"])
def test_windows_return_every_mature_case_once_in_maturity_order(db: Database, horizon: int | None) -> None:
    with make_client(db, clock=FixedClock(T0)) as client:
        r = client.put("/v1/models/w", json={"outcome_horizon_days": horizon, "outcome_lag_days": 1})
        assert r.status_code in (200, 201), r.text
        frame = _post(client, "w", np.random.default_rng(5))
    labeled = frame[frame.label >= 0]
    assert (labeled.observed_at < labeled.scored_at).any()  # some outcomes were observed early
    with Session(db.engine) as session:
        model = models_repo.get(session, "w")
        conn = session.connection()
        for after in (None, T0 + timedelta(days=1, hours=7)):
            windows = list(mature_case_windows(conn, model, "default", after=after, now=NOW, window=WINDOW))
            got = [(m, c) for w in windows for m, c in zip(w.matured_at, w.case_id, strict=True)]
            expected = _expected(frame, horizon, 1, after)
            assert got == expected
            assert len(windows) > 5  # many windows were read, not one
            for w in windows:  # each window spans at most its width
                assert w.matured_at[-1] - w.matured_at[0] <= WINDOW
            labels = {c: int(lab) for w in windows for c, lab in zip(w.case_id, w.label, strict=True)}
            current = dict(zip(frame.id, frame.label, strict=True))
            assert all(labels[c] == current[c] for c in labels)  # current labels, corrections included
