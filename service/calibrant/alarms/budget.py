"""One false-alarm budget per model, split across its rules and, within a rule, across its streams.

The model setting ``false_alarms_per_year`` (B, default 1.0) is the expected
number of false alarms a year that all of a model's enabled rules together may
raise when its model is well calibrated and its feeds are healthy.

Across rules: fixed weights. Each enabled rule whose decision is a
statistical test (its kind's ``in_budget``) carries a ``budget_weight`` w_r
(kind defaults: each calibration chart 2, excess log-loss 2, calibration
slope 1, score drift 1, feed starvation 1); its share is

    B_r = B × w_r / Σ w   (Σ over the model's enabled budgeted rules),

so disabling a rule hands its share to the others, and adding one takes from
them. A rule a person sets by hand (a plain threshold without an interval
test) has no false-alarm rate to speak of: it is listed as outside.

Within a rule, by its basis:

* ``markov_design`` (charts): each of the rule's K streams is designed for an
  in-control ARL of K × (its cases a day) × 365.25 / B_r cases
  (``stats.cusum_design.arl0_for_false_alarm_budget``); K is the count of the
  rule's streams when the stream is designed, and a chart is redesigned when
  that target moves by more than its ``redesign_rate_ratio`` (1.5), so a new
  version or segment value re-divides the share at the other streams' next run.
* ``per_test_level`` (window and feed rules): each test is made at level
  α = B_r / (tests a year) / (streams live at that test); the streams of a
  period are the (version, segment) streams with a prediction in it, counted
  when the period is judged. Summed over a year's tests, the expected false
  alarms of the rule are at most B_r whatever versions come and go (a stream
  too small to judge spends nothing, so the sum is an upper bound).

The sum over rules of the expected false alarms is then at most B (union
bound; charts by their design; docs/methods.md §18.5). tests/bench/null_year.py checks it by
simulating well-calibrated model-years through the rules' own decision code.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, Literal

from calibrant.alarms.kinds import spec
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR
from calibrant.store import alarm_repo
from calibrant.store.alarm_tables import AlarmRule
from calibrant.store.tables import Model
from calibrant.store.unit import Session

Basis = Literal["markov_design", "per_test_level", "simulation"]
DEFAULT_FALSE_ALARMS_PER_YEAR = 1.0
HOURS_PER_YEAR = 365.25 * 24

_BASIS_OF_EVALUATION: dict[str, Basis] = {
    "chart": "markov_design", "window": "per_test_level", "feed": "per_test_level",
}


@dataclass(frozen=True, slots=True)
class RuleShare:
    rule: str
    share_per_year: float
    basis: Basis


@dataclass(frozen=True, slots=True)
class Budget:
    """A model's budget: each budgeted rule's share, and the rules outside it."""

    per_year: float
    shares: dict[str, RuleShare]
    outside: tuple[str, ...]

    def share_of(self, rule: str) -> float | None:
        """The rule's yearly share; None for a rule outside the budget (or not enabled)."""
        share = self.shares.get(rule)
        return None if share is None else share.share_per_year

    def to_dict(self) -> dict[str, Any]:
        return {
            "per_year": self.per_year,
            "rules": [{"rule": s.rule, "share_per_year": s.share_per_year, "basis": s.basis}
                      for s in self.shares.values()],
            "outside": list(self.outside),
        }


@dataclass(frozen=True, slots=True)
class RuleEntry:
    """What the split needs of a rule: its name, kind, stored parameters and whether it is enabled."""

    name: str
    kind: str
    params: dict[str, Any]
    enabled: bool


def split(per_year: float, rules: Iterable[RuleEntry]) -> Budget:
    """B_r = B × w_r / Σ w over the enabled rules inside the budget (module docstring)."""
    weighted: list[tuple[RuleEntry, float, Basis]] = []
    outside: list[str] = []
    for rule in rules:
        if not rule.enabled:
            continue
        kind = spec(rule.kind)
        params: Any = kind.params.model_validate(rule.params)  # a budgeted kind's params carry a weight
        if kind.in_budget(params):
            weighted.append((rule, float(params.budget_weight), _BASIS_OF_EVALUATION[kind.evaluation]))
        else:
            outside.append(rule.name)
    total = sum(w for _, w, _ in weighted)
    shares = {
        r.name: RuleShare(r.name, per_year * w / total, basis) for r, w, basis in weighted
    }
    return Budget(per_year=per_year, shares=shares, outside=tuple(outside))


def per_test_level(share_per_year: float, tests_per_year: float, streams: int) -> float:
    """α = B_r / (tests a year) / streams, capped below ½ (a test at α ≥ ½ says nothing)."""
    if share_per_year <= 0 or tests_per_year <= 0:
        raise ValueError("the share and the tests a year must be positive")
    return min(share_per_year / tests_per_year / max(streams, 1), 0.49)


def of_model(session: Session, model: Model) -> Budget:
    """The model's budget split over its rules as they are stored now."""
    return _stored_split(session, model, enable=None)


def statement(share: RuleShare | None, evaluation: str, granularity: str | None, streams: int) -> str:
    """The rule's false-alarm promise in words, with how it is kept (for the API)."""
    if share is None:
        return ("outside the model's budget: a threshold a person set (or a condition), with no test "
                "behind it, so no false-alarm rate can be stated")
    b = share.share_per_year
    if evaluation == "chart":
        return (f"{b:.3g} false alarm(s) a year for the rule: each of its {streams} chart stream(s) is "
                f"designed for an in-control ARL of streams × cases a day × 365.25 / {b:.3g} cases "
                "(Markov-chain design on the stream's recent risks)")
    if evaluation == "feed":
        level = per_test_level(b, HOURS_PER_YEAR, 1)
        return (f"{b:.3g} false alarm(s) a year for the rule: its outcome-arrival test is made on each "
                f"hour's window at level {b:.3g} / (24 × 365.25) = {level:.2g}; the silence check is a "
                "condition, not a test")
    per_year = EVALUATIONS_PER_YEAR[granularity or "week"]
    level = per_test_level(b, per_year, streams)
    return (f"{b:.3g} false alarm(s) a year for the rule: one test per {granularity} on each stream "
            f"with predictions in it, at level {b:.3g} / ({per_year:.4g} × streams); with "
            f"{max(streams, 1)} stream(s) now, {level:.2g}")


def share_as_enabled(session: Session, model: Model, rule: AlarmRule) -> float | None:
    """The rule's share were it enabled (backtests and restarts of a disabled rule); None: outside."""
    return _stored_split(session, model, enable=rule).share_of(rule.name)


def _stored_split(session: Session, model: Model, *, enable: AlarmRule | None) -> Budget:
    """The split of the stored rules; ``enable``, if given, counts as enabled whatever it says."""
    enabled_id = None if enable is None else enable.id
    entries = [RuleEntry(r.name, r.kind, dict(r.params or {}), r.enabled or r.id == enabled_id)
               for r in alarm_repo.rules_of(session, model.id)]
    return split(float(model.false_alarms_per_year or DEFAULT_FALSE_ALARMS_PER_YEAR), entries)
