"""The feed rule on a simulated model, evaluated every hour as the service's job evaluates it.

At each hour ``now`` (``alarms.feeds.feed_counts``): the silence is the hours
since the newest prediction; with a horizon and explicit outcomes, the recent
window holds the predictions scored in [now − H − L − window, now − H − L) (all
mature), the history the ``history_days`` before it, and a prediction counts as
labeled when its outcome has arrived by ``now``. The kind's ``decide`` judges
them at the per-hour level; the model-wide alarm opens when it crosses and no
alarm is open, and resolves when it is judged healthy (``alarms.feeds.evaluate_rule``).

Only outcomes later than H + L can be missing from a mature window, so the
counts are the window's size minus those late cases not arrived yet; the late
cases are few (a few per cent), which keeps 8,736 hourly evaluations cheap.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from tests.bench.null_year_traffic import Cases, Outcomes

from calibrant.alarms.kinds.base import FeedInputs, FeedKind, LabelCounts


def feed_openings(kind: FeedKind, params: Any, cases: Cases, outcomes: Outcomes, level: float,
                  start_day: float, end_day: float) -> list[float]:
    """Days (on the hour) at which the model-wide feed alarm opens in [start_day, end_day)."""
    scored = cases.scored  # sorted
    delay = outcomes.maturity_days
    late = np.flatnonzero(cases.arrival - scored > delay)  # sorted by scored, as ``scored`` is
    late_scored, late_arrival = scored[late], cases.arrival[late]
    window, history = float(params.window_days), float(params.history_days)
    hours = np.arange(np.ceil(start_day * 24.0), np.ceil(end_day * 24.0)) / 24.0
    openings: list[float] = []
    is_open = False
    for now in hours:
        end = now - delay
        cuts = (end - window - history, end - window, end)
        lo, mid, hi = np.searchsorted(scored, cuts)
        llo, lmid, lhi = np.searchsorted(late_scored, cuts)
        newest = int(np.searchsorted(scored, now, side="right")) - 1
        silence = None if newest < 0 else (now - scored[newest]) * 24.0
        missing_recent = int(np.count_nonzero(late_arrival[lmid:lhi] > now))
        missing_history = int(np.count_nonzero(late_arrival[llo:lmid] > now))
        recent = LabelCounts(mature=int(hi - mid), labeled=int(hi - mid) - missing_recent)
        past = LabelCounts(mature=int(mid - lo), labeled=int(mid - lo) - missing_history)
        feeds = FeedInputs(silence_hours=silence, implicit_negatives=outcomes.implicit, has_horizon=True,
                           recent=None if outcomes.implicit else recent,
                           history=None if outcomes.implicit else past)
        verdict = kind.decide(params, feeds, level)
        if verdict.crossed and not is_open:
            openings.append(float(now))
            is_open = True
        elif verdict.crossed is False:
            is_open = False
    return openings
