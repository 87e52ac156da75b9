"""Restatements of chart alarms: labels on the alarm's run changed by outcomes reported later.

A chart alarm's evidence is what the chart read up to its crossing, and is never rewritten.
Its *run* is the stretch of the stream's cases behind the crossing: from the hour of the
last point of the evidence's chart path where S stood at 0 (the run starts after it), or
from the path's first point when S stayed above 0 over the whole path (the entry says the
run was cut there, ``run_truncated``), to the crossing case, in the chart's order
(maturity time, case id). An outcome received after the alarm opened *changes* a case of
the run when the label the chart counts now differs from the label known when the alarm
opened: a late label (the case was passed over unlabeled, or read as 0 under implicit
negatives) or a corrected one.

The statistic at the crossing is restated with the chart's own weights (Steiner et al.
2000, ``stats.cusum.cusum_weights``), W(r, y) = y ln R − ln(1 − r + R r) for a read case
and 0 for one passed over: S' = S + Σ_changed [W(r, y_now) − W(r, y_then)]. It is exact
while the run stays above 0 after each changed case (the run's cases are summed without the
floor at 0) and a first-order figure otherwise; r is the risk the chart is fed
(``charts.Reading.risks`` at the alarm's opening: p, p · F̂(age) with implicit negatives, or
the labeled-by-age risk without a horizon).
``n`` adds the cases that would now be read to the evidence's n.

The job looks again only when some outcome of the run's span came after its last look; an
entry is added when the changed cases or the statistic moved (an outcome that leaves every
label as it read, say a 0 for a case read as 0, adds none). Alarms opened more than
``outcome_delay.MAX_DELAY_DAYS`` ago are left alone, as window alarms are.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np

from calibrant.alarms.charts import Reading, case_segments
from calibrant.clock import rfc3339
from calibrant.rollup import outcome_delay
from calibrant.rollup.compute import SegmentBook
from calibrant.stats.cusum import cusum_weights
from calibrant.store import rollup_repo, run_labels
from calibrant.store.alarm_tables import Alarm
from calibrant.store.tables import Model
from calibrant.store.unit import Session

REASON = "outcomes reported after the alarm changed labels of cases on the chart's run"


def _instant(text: str) -> datetime:
    return datetime.fromisoformat(text)


def run_span(evidence: dict[str, Any]) -> tuple[datetime, datetime, bool] | None:
    """(run start, crossing time, truncated) from the evidence's chart path; None without a path."""
    path = evidence.get("chart_path") or []
    if not path or "crossed_at" not in evidence:
        return None
    before = path[:-1]  # the last point is the crossing itself
    zeros = [i for i, (_, s) in enumerate(before) if float(s) <= 0.0]
    start = before[zeros[-1]][0] if zeros else path[0][0]
    return _instant(start), _instant(evidence["crossed_at"]), not zeros


def restate(session: Session, model: Model, alarm: Alarm, now: datetime) -> bool:
    """Add a restatement to the chart alarm if labels on its run changed; True when one was added."""
    evidence = alarm.evidence or {}
    span = run_span(evidence)
    if span is None:
        return False
    start, crossed, truncated = span
    history = list(alarm.restatements or [])
    looked = _instant(history[-1]["checked_at"]) if history else alarm.opened_at
    conn = session.connection()
    book = SegmentBook(list(model.segment_keys or []), rollup_repo.segment_values(conn, model.id))
    segment = (alarm.segment_key, alarm.segment_value)
    crossing = (crossed, str(evidence.get("crossing_case", "")))

    def on_run(since: datetime) -> list[run_labels.RunOutcome]:
        found = run_labels.received_in_span(conn, model, alarm.version, matured_from=start,
                                            matured_to=crossed, received_after=since)
        return [c for c in found if (c.matured_at, c.case_id) <= crossing
                and segment in case_segments(c.tags, book)]

    if not on_run(looked):
        return False
    cases = on_run(alarm.opened_at)
    then = run_labels.labels_at(conn, model, cases, alarm.opened_at)
    unread = 0 if model.implicit_negatives else -1  # what a case without a label read as
    before = np.array([then.get(c.case_id, unread) for c in cases], dtype=np.int64)
    after = np.array([c.label_now for c in cases], dtype=np.int64)
    had = np.array([c.case_id in then for c in cases], dtype=bool)
    moved = before != after
    if not history and not moved.any():  # outcomes came, but every label reads as it did
        return False
    entry = _entry(model, evidence, [c for c, m in zip(cases, moved, strict=True) if m],
                   before[moved], after[moved], had[moved], alarm.opened_at, now, start, truncated)
    last = history[-1] if history else None
    moved_since = last is None or (entry["changed_cases"], entry["statistic"]) != (
        last.get("changed_cases"), last.get("statistic"))
    if moved_since:
        alarm.restatements = [*history, entry]
        return True
    # nothing moved since the last entry: remember that we looked, so the next look starts here
    alarm.restatements = [*history[:-1], {**history[-1], "checked_at": rfc3339(now)}]
    return False


def _entry(model: Model, evidence: dict[str, Any], changed: list[run_labels.RunOutcome], before: np.ndarray,
           after: np.ndarray, had_label: np.ndarray, opened_at: datetime, now: datetime, start: datetime,
           truncated: bool) -> dict[str, Any]:
    """``before``/``after``: the labels counted then and now (−1: passed over); ``had_label``: a label
    was known when the alarm opened (else the change is a late label, not a correction)."""
    r_a = float(evidence["odds_ratio"])
    p = np.array([c.probability for c in changed], dtype=np.float64)
    reading = Reading.of(model, outcome_delay.stored(model))
    risk, _ = reading.risks(p, [c.matured_at for c in changed], opened_at)

    def weights(y: np.ndarray) -> np.ndarray:
        w = cusum_weights(risk, np.maximum(y, 0), r_a) if y.size else np.empty(0)
        return np.where(y >= 0, w, 0.0)

    statistic = float(evidence["statistic"]) + float(np.sum(weights(after) - weights(before)))
    late = int(np.sum(~had_label))
    added = int(np.sum(before == -1))
    return {
        "at": rfc3339(now),
        "checked_at": rfc3339(now),
        "reason": REASON,
        "statistic": round(statistic, 10),
        "n": int(evidence.get("n") or 0) + added,
        "label_completeness": None,
        "still_crosses": statistic > float(evidence["control_limit"]),
        "run_start": rfc3339(start),
        "run_truncated": truncated,
        "changed_cases": len(changed),
        "late_labels": late,
        "corrected_labels": len(changed) - late,
        "events_added": int(np.sum(after == 1) - np.sum(before == 1)),
    }
