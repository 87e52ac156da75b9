"""GET /v1/models/{m}/reliability: uniform bins against numpy on the raw rows, Wilson intervals
against statsmodels' proportion_confint(method="wilson")."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.rollup.reference import assert_strict_json
from tests.rollup.synthetic import make_traffic, post_all, refresh

MODEL = "diagram"
# Both ends inside a day (traffic sits at 00, 11 and 23 h): partial days at the edges come from
# hourly summaries, the whole days between from the daily tier.
START, END = datetime(2026, 3, 3, 5, tzinfo=UTC), datetime(2026, 3, 7, 12, tzinfo=UTC)


@pytest.mark.parametrize("n_bins", [10, 5, 20])
def test_uniform_bins_equal_numpy_and_wilson(db: Database, n_bins: int) -> None:
    traffic = make_traffic(n_cases=900, days=7)
    with make_client(db, clock=FixedClock(datetime(2026, 4, 1, tzinfo=UTC))) as client:
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        r = client.get(f"/v1/models/{MODEL}/reliability", params={
            "start": START.isoformat(), "end": END.isoformat(), "bins": str(n_bins), "strategy": "uniform"})
    assert r.status_code == 200, r.text
    body = assert_strict_json(r.text)
    rows = traffic.between(START, END).dropna(subset=["label"])  # plain pandas; no horizon: all mature
    p, y = rows.probability.to_numpy(), rows.label.to_numpy()
    k = np.searchsorted(np.arange(1, n_bins) / n_bins, p, side="right")  # numpy: [k/B, (k+1)/B)
    assert len(rows) > 0  # bins are checked against rows, not empty against empty
    assert body["n"] == len(rows)
    assert len(body["bins"]) == n_bins  # every bin is listed, empty ones included
    seen = 0
    for b in body["bins"]:
        j = round(b["lower"] * n_bins)
        assert b["lower"] == pytest.approx(j / n_bins)
        assert b["upper"] == pytest.approx((j + 1) / n_bins)
        mask = k == j
        assert b["count"] == int(mask.sum())
        if not mask.any():
            assert b["mean_predicted"] is None
            continue
        seen += int(mask.sum())
        assert b["mean_predicted"] == pytest.approx(float(np.mean(p[mask])), rel=1e-12)  # numpy
        assert b["observed_rate"] == pytest.approx(float(np.mean(y[mask])), rel=1e-12)  # numpy
        lo, hi = proportion_confint(int(y[mask].sum()), int(mask.sum()), alpha=0.05, method="wilson")
        assert b["observed_rate_ci"] == pytest.approx([lo, hi], rel=1e-9)  # statsmodels Wilson
    assert seen == len(rows)
