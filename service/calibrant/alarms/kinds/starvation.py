"""Feed starvation: no predictions for too long, or too many mature predictions without an outcome.

A deterministic condition on the feeds, not a test: it alarms exactly when it holds.
"""

from __future__ import annotations

from typing import Any

from pydantic import Field

from calibrant.alarms.kinds.base import Decision, FeedInputs, FeedKind, Params, whole


class StarvationParams(Params):
    max_silence_hours: float = Field(24.0, gt=0)
    max_unlabeled_share: float = Field(0.5, gt=0, le=1)
    window_days: int = Field(7, ge=1, le=366)
    min_mature: int = Field(50, ge=1)


def describe(params: StarvationParams, *, streams: int, chart_streams: int) -> dict[str, Any]:
    return {
        "detects": f"no predictions for {params.max_silence_hours:g} h, or more than "
                   f"{params.max_unlabeled_share:.0%} of the last {params.window_days} days' mature "
                   "predictions without an outcome",
        "minimum_data": f"{params.min_mature} mature predictions for the outcome share",
        "false_alarms": {"per_year": None, "level": None, "scope": "rule",
                         "statement": "a deterministic condition on the feeds, not a statistical test: "
                                      "it alarms exactly when the condition holds"},
    }


def starvation(silence_hours: float | None, mature: float, unlabeled: float,
               params: StarvationParams) -> Decision:
    """Silence longer than allowed, or too large an unlabeled share of mature predictions."""
    if silence_hours is None:
        return Decision(None, None, 0, "no predictions yet")
    silent = silence_hours > params.max_silence_hours
    share = unlabeled / mature if mature >= params.min_mature else None
    starved = share is not None and share > params.max_unlabeled_share
    parts = [f"last prediction {silence_hours:.1f} h ago (limit {params.max_silence_hours:g} h)"]
    if share is not None:
        parts.append(f"{share:.0%} of {mature:g} mature predictions without outcome "
                     f"(limit {params.max_unlabeled_share:.0%})")
    return Decision(bool(silent or starved), share if share is not None else silence_hours, whole(mature),
                    "; ".join(parts), None,
                    {"silence_hours": silence_hours, "unlabeled_share": share, "mature": whole(mature),
                     "silent": silent, "outcomes_missing": starved})


def decide(params: StarvationParams, feeds: FeedInputs) -> Decision:
    return starvation(feeds.silence_hours, feeds.mature, feeds.unlabeled, params)


SPEC = FeedKind(params=StarvationParams, describe=describe, decide=decide)
