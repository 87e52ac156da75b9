"""``calibrant refresh``: start a refresh job (or join the running one) and follow it with a progress bar.

The job runs in a thread of this process when this command started it, or in whichever process
runs it (a server); either way its row in the database is what is followed, so the bar means
the same thing in both cases. A database that cannot answer for a while (locked, restarting, a
busy machine) is waited for, up to the overall ``timeout``; the command never ends in a raw
traceback, and its exit status says whether the job succeeded.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from functools import partial
from typing import TextIO, TypeVar

from tqdm import tqdm

from calibrant.jobs import worker_name
from calibrant.refresh_job import RefreshJobs
from calibrant.store.refresh_job_repo import FINAL_STATES, JobRow
from calibrant.store.unit import DatabaseError

POLL_S = 0.5
RETRY_S = 2.0
T = TypeVar("T")


def _retrying(call: Callable[[], T], deadline: float, what: str, stream: TextIO) -> T:
    """``call()`` until it answers or ``deadline`` passes (then the last error is raised)."""
    while True:
        try:
            return call()
        except DatabaseError as exc:
            if time.monotonic() + RETRY_S >= deadline:
                raise
            first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            stream.write(f"calibrant: {what}: database busy or unreachable ({first[:120]}); trying again\n")
            time.sleep(RETRY_S)


def run(runner: RefreshJobs, timeout: float, quiet: bool = False,
        stream: TextIO | None = None) -> tuple[JobRow, str]:
    """Start or join a job and follow it to its end: (the job as last seen, a line on how it ended)."""
    stream = stream or sys.stderr
    deadline = time.monotonic() + timeout
    job = _retrying(lambda: runner.start("cli"), deadline, "starting the refresh job", stream)
    whose = "started here" if job.worker == worker_name() else f"joined: {job.worker} runs it"
    stream.write(f"refresh job {job.id} ({whose})\n")
    bar = tqdm(total=0, unit="buckets", file=stream, disable=quiet, dynamic_ncols=True)
    try:
        while job.state not in FINAL_STATES and time.monotonic() < deadline:
            _show(bar, job)
            time.sleep(POLL_S)
            seen = _retrying(partial(runner.get, job.id), deadline, "reading the job", stream)
            job = seen if seen is not None else job
        _show(bar, job)
    finally:
        bar.close()
    if job.state not in FINAL_STATES:
        where = ("it stops with this command, and is marked abandoned once its lease lapses"
                 if job.worker == worker_name() else f"it goes on in {job.worker}")
        return job, f"refresh job {job.id} still running after {timeout:g} s; {where}"
    if job.state != "succeeded":
        return job, f"refresh job {job.id} {job.state}: {'; '.join(job.errors) or 'no reason recorded'}"
    return job, f"refresh job {job.id} succeeded"


def _show(bar: tqdm, job: JobRow) -> None:
    progress = job.progress or {}
    total, done = int(progress.get("buckets_total", 0)), int(progress.get("buckets_done", 0))
    if bar.total != total:
        bar.total = total
    bar.n = done
    phase = f"{progress.get('phase', 'starting')}, round {progress.get('round', 0)}"
    bar.set_postfix_str(phase, refresh=False)
    bar.refresh()
