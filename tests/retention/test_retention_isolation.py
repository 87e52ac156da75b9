"""One model whose pruning raises is held back by the retention job; the others are still pruned.

The guard is the one every job uses (``models.isolation``); here it is the retention job's turn:
the model "parcel-delay" prunes as usual while a second model, whose deletes raise, is recorded
as failing the ``retention`` job and named in /healthz.
"""

from __future__ import annotations

from typing import Any

import pytest

from calibrant.clock import FixedClock
from calibrant.retention import job as retention_job
from calibrant.store import retention_repo
from tests.conftest import Database, make_client
from tests.retention.scenario import BOUNDARY, MODEL, NOW, load, rfc, run_jobs

BROKEN = "parcel-delay-shadow"


def test_a_model_whose_pruning_raises_does_not_stop_the_others(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    real_delete = retention_repo.delete_predictions
    broken_id: list[int] = []

    def delete_predictions(conn: Any, model_id: int, *args: Any, **kwargs: Any) -> int:
        if model_id in broken_id:
            raise RuntimeError("injected retention fault")
        return int(real_delete(conn, model_id, *args, **kwargs))

    monkeypatch.setattr(retention_repo, "delete_predictions", delete_predictions)
    with make_client(db, clock=FixedClock(NOW)) as client:
        every = load(client)
        old = [c for c in every if c["scored_at"] < BOUNDARY]
        r = client.post(f"/v1/models/{BROKEN}/predictions", json={"predictions": [
            {"id": c["id"], "probability": c["p"], "scored_at": rfc(c["scored_at"])} for c in old]})
        assert r.status_code == 200, r.text
        broken_id.append(int(db.scalar("SELECT id FROM models WHERE name = :n", n=BROKEN)))
        for name in (MODEL, BROKEN):
            r = client.put(f"/v1/models/{name}", json={"retention_days": 30})
            assert r.status_code == 200, r.text
        run_jobs(client)
        health = client.get("/healthz").json()

    sound_id = int(db.scalar("SELECT id FROM models WHERE name = :n", n=MODEL))
    left = db.scalar("SELECT count(*) FROM predictions WHERE model_id = :m", m=sound_id)
    assert left == len(every) - len(old)  # the sound model lost its old rows all the same
    kept = db.scalar("SELECT count(*) FROM predictions WHERE model_id = :m", m=broken_id[0])
    assert kept == len(old)  # nothing of the failing model was removed
    assert health["status"] == "degraded"
    assert [(f["model"], f["job"]) for f in health["job_failures"]] == [(BROKEN, retention_job.JOB_NAME)]

