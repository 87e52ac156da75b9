"""Feed starvation: predictions stopped coming, or outcomes stopped arriving.

One rule, two checks, each named in the decision's summary and detail:

``prediction_silence``
    No prediction for more than ``max_silence_hours``. A deterministic
    condition on the feeds, not a test: it holds or it does not, so it has no
    false-alarm rate and spends nothing of the model's budget.

``outcome_arrival``
    The share of mature predictions that have an outcome fell, compared with
    the model's own history. The recent window is the ``window_days`` of mature
    predictions ending with the newest mature hour; the history is the
    ``history_days`` of mature predictions just before it. With n_r, k_r the
    recent window's mature and labeled counts and n_h, k_h the history's, the
    one-sided test of "recent labeled share lower" is Fisher's exact test: given
    both margins (N = n_r + n_h mature, K = k_r + k_h labeled), k_r is
    hypergeometric under equal shares, and

        p = P(X ≤ k_r),  X ~ Hypergeometric(N, K, n_r)

    (Fisher 1935; Agresti, Categorical Data Analysis, 2nd ed. 2002, §3.5;
    ``scipy.stats.fisher_exact(..., alternative="less")`` gives the same p).
    It crosses when p ≤ level and the recent share is below
    ``min_rate_ratio`` × the history's share. That effect floor (default ½) is
    common practice and our own choice, not from a published source: a test on
    weeks of predictions finds drops too small to matter.

    Never applied to a model with implicit negatives: there a mature prediction
    without outcome is an outcome (0), most predictions never get one, and a
    missing outcome says nothing about the feed. Not applied without an outcome
    horizon either: then no prediction is ever overdue. Each window needs
    ``min_mature`` mature predictions, else the check is not judged.

    Outcomes count when they have arrived by the evaluation; a model whose
    outcomes often come after its horizon + lag shows a lower share in the
    recent window than in its history, which this check reports: its horizon is
    then shorter than its outcomes take.

Feed rules are evaluated at every job run, on windows that move with the hour,
so the test is made once per evaluated hour: the level ``decide`` receives is
per hour, α = (the rule's share of the budget a year) / (24 × 365.25), and a
year's hourly tests together expect at most the rule's share of false alarms
(union bound; the consecutive windows overlap, so the true count is lower).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pydantic import Field
from scipy.stats import hypergeom

from calibrant.alarms.kinds.base import MIN_BUDGET_WEIGHT, Decision, FeedInputs, FeedKind, LabelCounts, Params

SILENCE = "prediction_silence"
ARRIVAL = "outcome_arrival"


class StarvationParams(Params):
    max_silence_hours: float = Field(24.0, gt=0, description="prediction_silence: longest gap allowed")
    window_days: int = Field(7, ge=1, le=366, description="outcome_arrival: the recent mature window")
    history_days: int = Field(28, ge=1, le=366,
                              description="outcome_arrival: the mature history just before the window")
    min_mature: int = Field(50, ge=1, description="outcome_arrival: mature predictions needed in each window")
    min_rate_ratio: float = Field(0.5, gt=0, le=1,
                                  description="outcome_arrival effect floor: recent labeled share below "
                                              "this × the history's (common practice, no published source)")
    budget_weight: float = Field(1.0, ge=MIN_BUDGET_WEIGHT, le=100,
                                 description="weight in the model's false-alarm budget "
                                 "(outcome_arrival only: prediction_silence is a condition, outside it)")




def describe(params: StarvationParams) -> dict[str, str]:
    return {
        "detects": f"{SILENCE}: no prediction for {params.max_silence_hours:g} h (a condition, outside the "
                   f"false-alarm budget); {ARRIVAL}: the labeled share of the last {params.window_days} "
                   f"days' mature predictions below the preceding {params.history_days} days' (one-sided "
                   f"Fisher exact test at the budget's hourly level, and below {params.min_rate_ratio:g} × "
                   "the history's share); not checked for models with implicit negatives",
        "minimum_data": f"{ARRIVAL}: an outcome horizon and {params.min_mature} mature predictions in each "
                        "of the two windows",
    }


def in_budget(params: StarvationParams) -> bool:
    """True: the outcome_arrival test spends the rule's share (prediction_silence is a condition)."""
    return True


def lower_share_p_value(recent: LabelCounts, history: LabelCounts) -> float:
    """One-sided Fisher exact p of a lower recent labeled share: P(X ≤ k_r), X ~ Hypergeom(N, K, n_r)."""
    total = recent.mature + history.mature
    labeled = recent.labeled + history.labeled
    return float(min(1.0, hypergeom.cdf(recent.labeled, total, labeled, recent.mature)))


@dataclass(frozen=True, slots=True)
class Check:
    """One check's verdict (``crossed`` None: not judged), its message and its figures."""

    crossed: bool | None
    message: str
    figures: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return {"crossed": self.crossed, "message": self.message, **self.figures}


def prediction_silence(silence_hours: float | None, params: StarvationParams) -> Check:
    """Crossed when the newest prediction is more than ``max_silence_hours`` old."""
    figures: dict[str, Any] = {
        "silence_hours": silence_hours, "max_silence_hours": params.max_silence_hours,
        "basis": "a deterministic condition, not a test: outside the false-alarm budget",
    }
    if silence_hours is None:
        return Check(None, "no predictions yet", figures)
    crossed = silence_hours > params.max_silence_hours
    return Check(crossed, f"last prediction {silence_hours:.1f} h ago (limit {params.max_silence_hours:g} h)",
                 figures)


def outcome_arrival(feeds: FeedInputs, params: StarvationParams, level: float) -> Check:
    """Crossed when p ≤ level and recent share < min_rate_ratio × history share (module docstring)."""
    if feeds.implicit_negatives:
        return Check(None, "not checked: implicit negatives (a prediction without outcome counts as 0)", {})
    if not feeds.has_horizon or feeds.recent is None or feeds.history is None:
        return Check(None, "not checked: the model has no outcome horizon, so no outcome is ever overdue", {})
    recent, history = feeds.recent, feeds.history
    figures: dict[str, Any] = {
        "n_mature_recent": recent.mature, "n_labeled_recent": recent.labeled,
        "n_mature_history": history.mature, "n_labeled_history": history.labeled,
        "window_days": params.window_days, "history_days": params.history_days,
    }
    if min(recent.mature, history.mature) < params.min_mature:
        return Check(None, f"not judged: {recent.mature} mature predictions in the last {params.window_days} "
                           f"days and {history.mature} in the {params.history_days} days before; needs "
                           f"{params.min_mature} in each", figures)
    if level <= 0:
        return Check(None, "not judged: the rule has no share of the false-alarm budget (level 0)", figures)
    p_value = lower_share_p_value(recent, history)
    floor = params.min_rate_ratio * history.rate
    crossed = p_value <= level and recent.rate < floor
    figures |= {
        "recent_rate": recent.rate, "history_rate": history.rate, "minimum_effect_rate": floor,
        "p_value": p_value, "level": level,
        "basis": "one-sided Fisher exact test (hypergeometric, both margins fixed) at the per-hour level, "
                 f"and an effect floor of {params.min_rate_ratio:g} × the history's rate (common practice, "
                 "our choice)",
    }
    return Check(crossed, f"{recent.rate:.1%} of {recent.mature} recent mature predictions have an outcome, "
                          f"{history.rate:.1%} of {history.mature} before (exact p = {p_value:.3g}, level "
                          f"{level:.3g}; floor {floor:.1%})", figures)


def decide(params: StarvationParams, feeds: FeedInputs, level: float) -> Decision:
    """Crossed when either check holds; None only when neither can be judged.

    ``statistic`` is the outcome_arrival p-value when that check was judged,
    unless only the silence crossed; else the hours of silence (``detail["statistic_of"]`` names which).
    """
    silence = prediction_silence(feeds.silence_hours, params)
    arrival = outcome_arrival(feeds, params, level)
    verdicts = [c.crossed for c in (silence, arrival) if c.crossed is not None]
    crossed = None if not verdicts else any(verdicts)
    if arrival.crossed is None or (silence.crossed and not arrival.crossed):
        statistic, statistic_of, n = feeds.silence_hours, SILENCE, 0
    else:
        figures = arrival.figures
        statistic, statistic_of = figures["p_value"], ARRIVAL
        n = figures["n_mature_recent"] + figures["n_mature_history"]
    detail = {"level": level, "statistic_of": statistic_of,
              "checks": {SILENCE: silence.to_dict(), ARRIVAL: arrival.to_dict()}}
    summary = "; ".join(f"{name}: {c.message}" for name, c in ((SILENCE, silence), (ARRIVAL, arrival)))
    return Decision(crossed, statistic, n, summary, None, detail)


SPEC = FeedKind(params=StarvationParams, describe=describe, in_budget=in_budget, decide=decide)
