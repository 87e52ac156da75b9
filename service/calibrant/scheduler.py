"""The in-process scheduler (APScheduler 3.x): runs every job each CALIBRANT_REFRESH_SECONDS.

`make run` starts it inside the server; `calibrant scheduler` runs it alone for
deployments with several API replicas (start those with --no-scheduler). It is
safe to run several: every job claims its work in the database.
"""

from __future__ import annotations

import asyncio
import logging

from apscheduler.schedulers.asyncio import AsyncIOScheduler
from starlette.concurrency import run_in_threadpool

from calibrant.jobs import JobContext, run_all

log = logging.getLogger("calibrant.scheduler")


def build(ctx: JobContext) -> AsyncIOScheduler:
    scheduler = AsyncIOScheduler(job_defaults={"coalesce": True, "max_instances": 1})

    async def tick() -> None:
        try:
            # numpy and database work off the event loop, so requests keep flowing
            report = await run_in_threadpool(run_all, ctx)
            log.debug("scheduled run: %s", report)
        except Exception:
            log.exception("scheduled run failed; will retry at the next interval")

    scheduler.add_job(tick, "interval", seconds=ctx.settings.refresh_seconds, id="run_all")
    return scheduler


def run_forever(ctx: JobContext) -> None:
    """`calibrant scheduler`: the scheduler alone, until interrupted."""

    async def main() -> None:
        scheduler = build(ctx)
        scheduler.start()
        try:
            await asyncio.Event().wait()
        finally:
            scheduler.shutdown(wait=False)

    asyncio.run(main())
