"""Set-based merge of the day tier: many days claimed, read, merged and written together.

A day's summaries are the merge of its stored hourly summaries per segment
(``rollup.refresh``). Here the hours of up to ``group`` days of one model are
read in one query, merged for every (day, segment) at once
(``stats.summary_grouped.merged_by_group``), and written in one transaction
with the clearing of their marks (generation protocol of ``store.dirty``).
"""

from __future__ import annotations

from collections.abc import Callable
from contextlib import suppress
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np

from calibrant.stats.summary_grouped import merged_payloads
from calibrant.store import dirty, dirty_bulk, summary_writes
from calibrant.store.dirty import DayKey
from calibrant.store.unit import DatabaseError, Engine, reading


@dataclass(frozen=True, slots=True)
class DayOutcome:
    key: DayKey
    generation: int
    clean: bool  # False: one of its hours was stored meanwhile, so it stays dirty


def mergeable(engine: Engine, days: list[DayKey]) -> list[DayKey]:
    """Those of ``days`` none of whose hours is still dirty (a day is merged after its hours)."""
    with reading(engine) as conn:
        pending = summary_writes.days_with_dirty_hours(conn, days)
    return [d for d in days if d not in pending]


def merge_days(engine: Engine, now: Callable[[], datetime], days: list[DayKey], worker: str,
               lease: timedelta, group: int) -> tuple[list[DayOutcome], int]:
    """Merge the days (of any models), ``group`` days per transaction; (outcomes, days held elsewhere)."""
    outcomes: list[DayOutcome] = []
    busy = 0
    by_model: dict[int, list[DayKey]] = {}
    for d in sorted(days):
        by_model.setdefault(d.model_id, []).append(d)
    for mine in by_model.values():
        for i in range(0, len(mine), group):
            part = mine[i:i + group]
            with engine.begin() as conn:
                claims = dirty_bulk.claim_many(conn, dirty.DAYS, part, worker, now(), lease)
            busy += len(part) - len(claims)
            if not claims:
                continue
            try:
                with reading(engine) as conn:
                    stored = summary_writes.hours_of_days(conn, [c.key for c in claims])
                encoded = _merged(stored)
                with engine.begin() as conn:
                    summary_writes.replace_many(conn, [(c.key, encoded.get(c.key, {})) for c in claims],
                                                now())
                    clean = dirty_bulk.finish_many(conn, dirty.DAYS, claims)
            except BaseException:
                _give_back(engine, claims)
                raise
            outcomes += [DayOutcome(c.key, c.generation, clean[c.key]) for c in claims]
    return outcomes, busy


def _give_back(engine: Engine, claims: list[dirty.Claim[DayKey]]) -> None:
    """The merge raised: give the claims back so a retry need not wait for the lease to lapse."""
    with suppress(DatabaseError), engine.begin() as conn:  # a failed database: the leases lapse
        dirty.release(conn, claims)


def _merged(stored: list[tuple[DayKey, str, str, bytes]]) -> dict[DayKey, summary_writes.Encoded]:
    groups: dict[tuple[DayKey, str, str], int] = {}
    part_groups = [groups.setdefault((day, seg_key, seg_value), len(groups))
                   for day, seg_key, seg_value, _ in stored]
    payloads = [payload for *_, payload in stored]
    ids, merged = merged_payloads(payloads, np.asarray(part_groups, dtype=np.int64))
    names = list(groups)
    out: dict[DayKey, summary_writes.Encoded] = {}
    for g, s in zip(ids.tolist(), merged, strict=True):
        day, seg_key, seg_value = names[g]
        out.setdefault(day, {})[(seg_key, seg_value)] = (round(sum(s.counts().values())), s.to_bytes())
    return out
