"""Refresh jobs: every scheduled job run in a background thread, followed through a row in the database.

``RefreshJobs.start`` answers at once: with the job already running anywhere on the
database (another request, another server process, ``calibrant refresh``), or with
a new one it starts in a thread of this process. The thread runs ``jobs.run_all``
under the job deadline (``store.deadlines``: its connections carry
``job_seconds``), and a second thread writes the job's heartbeat and progress every
``beat_seconds``. A process that dies stops beating; after ``lease_seconds`` the next
start marks its job abandoned and takes over (``store.refresh_job_repo``).

Progress is counted in hour buckets: the totals are the dirty marks per model when
the job starts; rows ingested during the job add buckets, so ``done`` may pass the
starting total, and the total then follows it.
"""

from __future__ import annotations

import dataclasses
import logging
import threading
import time
import uuid
from datetime import timedelta
from typing import Any

from calibrant import jobs
from calibrant.store import dirty, refresh_job_repo
from calibrant.store.dirty import BucketKey
from calibrant.store.refresh_job_repo import JobRow
from calibrant.store.unit import is_unavailable, reading

log = logging.getLogger("calibrant.jobs")
_FINISH_ATTEMPTS = 5


class Tracker:
    """How far one job got, in memory; thread-safe (the job thread writes, the heartbeat reads)."""

    def __init__(self, names: dict[int, str], totals: dict[int, int]) -> None:
        self._names = names
        self._totals = dict(totals)
        self._done: dict[int, int] = dict.fromkeys(totals, 0)
        self._phase = "starting"
        self._round = 0
        self._lock = threading.Lock()

    def phase(self, job: str, round_: int) -> None:
        with self._lock:
            self._phase, self._round = job, round_

    def buckets_done(self, keys: list[BucketKey]) -> None:
        with self._lock:
            for key in keys:
                self._done[key.model_id] = self._done.get(key.model_id, 0) + 1
                self._totals[key.model_id] = max(self._totals.get(key.model_id, 0), self._done[key.model_id])

    def finished(self) -> None:
        with self._lock:
            self._phase = "finished"

    def snapshot(self) -> dict[str, Any]:
        with self._lock:
            models = sorted(
                ({"model": self._names.get(mid, f"#{mid}"), "buckets_done": self._done.get(mid, 0),
                  "buckets_total": total} for mid, total in self._totals.items()),
                key=lambda m: str(m["model"]),
            )
            return {
                "phase": self._phase,
                "round": self._round,
                "buckets_done": sum(m["buckets_done"] for m in models),
                "buckets_total": sum(m["buckets_total"] for m in models),
                "models": models,
            }


class RefreshJobs:
    """The API's job port (``api.runtime.JobRunner``) and the CLI's: start jobs and read them."""

    def __init__(self, ctx: jobs.JobContext, *, lease_seconds: float, beat_seconds: float = 1.0) -> None:
        self.ctx = ctx
        self.lease = timedelta(seconds=lease_seconds)
        self.beat_seconds = beat_seconds

    # ------------------------------------------------------------------ the port
    def start(self, requested_by: str) -> JobRow:
        """The running job, or a new one started in a background thread of this process."""
        row, tracker = self._claim(requested_by)
        if tracker is not None:
            self._launch(row, tracker)
        return row

    def get(self, job_id: str) -> JobRow | None:
        with reading(self.ctx.engine) as conn:
            return refresh_job_repo.get(conn, job_id)

    # ------------------------------------------------------------------ running
    def _claim(self, requested_by: str) -> tuple[JobRow, Tracker | None]:
        ctx = self.ctx
        with reading(ctx.engine) as conn:
            names = refresh_job_repo.model_names(conn)
            totals = dirty.backlog_by_model(conn)
        tracker = Tracker(names, totals)
        now = ctx.clock.now()
        with ctx.engine.begin() as conn:
            row, started = refresh_job_repo.start_or_join(
                conn, uuid.uuid4().hex, worker=jobs.worker_name(), requested_by=requested_by[:64],
                now=now, stale_before=now - self.lease, progress=tracker.snapshot(),
            )
        if started:
            log.info("refresh job %s started (requested by %s)", row.id, requested_by)
        return row, tracker if started else None

    def _launch(self, row: JobRow, tracker: Tracker) -> None:
        # A fresh thread starts with an empty context: no request deadline, so the job's own applies.
        threading.Thread(target=self._run, args=(row, tracker), name=f"calibrant-refresh-{row.id[:8]}",
                         daemon=True).start()

    def _run(self, row: JobRow, tracker: Tracker) -> None:
        stop = threading.Event()
        beat = threading.Thread(target=self._beat, args=(row, tracker, stop), daemon=True,
                                name=f"calibrant-refresh-beat-{row.id[:8]}")
        beat.start()
        state, result, errors = "failed", None, []
        try:
            report = jobs.run_all(dataclasses.replace(self.ctx, progress=tracker))
            state, result = "succeeded", dict(report)
        except Exception as exc:
            kind = "database unavailable" if is_unavailable(exc) else type(exc).__name__
            errors.append(f"{kind}: {str(exc).splitlines()[0] if str(exc) else ''}"[:500])
            log.exception("refresh job %s failed", row.id)
        finally:
            stop.set()
            beat.join()
            tracker.finished()
            self._finish(row, state, tracker, result, errors)

    def _beat(self, row: JobRow, tracker: Tracker, stop: threading.Event) -> None:
        while not stop.wait(self.beat_seconds):
            try:
                with self.ctx.engine.begin() as conn:
                    mine = refresh_job_repo.beat(conn, row.id, row.worker, self.ctx.clock.now(),
                                                 tracker.snapshot())
            except Exception as exc:  # a locked or stalled database: the next beat tries again
                log.warning("refresh job %s: heartbeat not written (%s)", row.id, type(exc).__name__)
                continue
            if not mine:
                log.warning("refresh job %s was marked abandoned by another process; running on", row.id)
                return

    def _finish(self, row: JobRow, state: str, tracker: Tracker, result: dict[str, Any] | None,
                errors: list[str]) -> None:
        for attempt in range(1, _FINISH_ATTEMPTS + 1):
            try:
                with self.ctx.engine.begin() as conn:
                    refresh_job_repo.finish(conn, row.id, row.worker, state=state, now=self.ctx.clock.now(),
                                            progress=tracker.snapshot(), result=result, errors=errors)
                log.info("refresh job %s %s", row.id, state)
                return
            except Exception:
                if attempt == _FINISH_ATTEMPTS:
                    log.exception("refresh job %s: its end was not recorded; its lease will lapse", row.id)
                    return
                time.sleep(0.5 * attempt)
