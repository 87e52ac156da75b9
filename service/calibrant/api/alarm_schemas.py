"""Response models of /v1/models/{model}/rules and …/alarms: rules, chart streams, alarms, backtests."""

from __future__ import annotations

from typing import Any, ClassVar, Literal

from pydantic import BaseModel, ConfigDict, Field

from calibrant.alarms.budget import Basis as BudgetBasis
from calibrant.alarms.kinds import KindName
from calibrant.api.instant import Instant
from calibrant.api.sparse import SparseModel

VersionScope = Literal["version", "all_versions"]


class Segment(BaseModel):
    key: str = Field(description="A declared segment key.")
    value: str = Field(description="The tag value of that key.")


class FalseAlarmStatement(BaseModel):
    """The rule's part of the model's one false-alarm budget."""

    share_per_year: float | None = Field(
        description="Expected false alarms a year this rule may raise; null: outside the budget or disabled."
    )
    basis: BudgetBasis | None = Field(
        description="How the share is kept: markov_design (chart limits), per_test_level (each test's "
                    "level), simulation; null: outside the budget."
    )
    statement: str = Field(description="The promise in words, with how it is kept.")


class RuleShareOut(BaseModel):
    rule: str
    share_per_year: float
    basis: BudgetBasis


class BudgetOut(BaseModel):
    """One false-alarm budget per model, split across its enabled rules that make a test."""

    per_year: float = Field(description="The model's false_alarms_per_year setting.")
    rules: list[RuleShareOut] = Field(description="Each budgeted rule's share; the shares sum to per_year.")
    outside: list[str] = Field(description="Enabled rules outside the budget (hand-set thresholds).")


class ChartStreamOut(BaseModel):
    version: str
    segment: Segment | None = Field(description="null: every case of the version.")
    designed: bool = Field(description="Whether the chart has its control limit yet.")
    cusum_statistic: float | None = Field(description="The CUSUM statistic now; null before the design.")
    control_limit: float | None = Field(description="The CUSUM crosses when its statistic exceeds this.")
    cases_since_reset: int | None = Field(description="Cases fed since the chart last started at 0.")
    consumed: int = Field(description="Mature labeled cases fed to the stream in all.")
    skipped_late: int = Field(description="Cases that matured behind the watermark and were left out.")
    unlabeled_at_maturity: int = Field(description="Cases that matured without an outcome.")
    watermark_at: Instant | None = Field(description="Maturity time of the last case fed.")
    design_error: str | None = Field(description="Why the limit could not be designed, if so.")


class RuleOut(SparseModel):
    """A rule with its self-description; ``streams`` for a chart, ``evaluated_through`` for a window rule."""

    omitted_when_absent: ClassVar[frozenset[str]] = frozenset({"streams", "evaluated_through"})

    name: str
    kind: KindName
    enabled: bool
    is_default: bool = Field(description="Created by Calibrant for every model; may be changed or deleted.")
    params: dict[str, Any] = Field(description="The kind's parameters, defaults filled in.")
    detects: str = Field(description="What a crossing means.")
    minimum_data: str = Field(description="The data the rule needs before it judges.")
    false_alarms: FalseAlarmStatement
    created_at: Instant
    updated_at: Instant
    streams: list[ChartStreamOut] | None = Field(None, description="Chart rules: one chart per stream.")
    evaluated_through: Instant | None = Field(
        None, description="Window rules: end of the last period judged; null: none yet."
    )


class RuleList(BaseModel):
    model: str
    rules: list[RuleOut]
    count: int
    budget: BudgetOut


class AlarmEvidence(BaseModel):
    """Why the rule crossed. statistic, interval and n are common to every kind; the others depend
    on it (a window's period_start, period_end, granularity, detail and label_completeness; a
    chart's control_limit, chart_path, design and label_completeness: complete_after_days, the
    wait after maturity, the mean share of reports in at the ages of the cases read and whether
    the risk was adjusted for the delay; starvation's checked_at). Times inside are RFC 3339
    strings."""

    model_config = ConfigDict(extra="allow")

    statistic: float | None = Field(description="The value that was judged.")
    interval: tuple[float, float] | None = Field(description="Its 95 % interval, when it has one.")
    n: int = Field(description="Cases the statistic rests on.")


class AlarmResolution(BaseModel):
    """How an alarm was resolved; other fields depend on who resolved it and why."""

    model_config = ConfigDict(extra="allow")

    reason: str


class AlarmRestatement(BaseModel):
    """The alarm's data judged again after later outcomes changed it; the evidence stays as raised.

    A window alarm: its period judged again at the same level. A chart alarm: the cases on
    its run (from the chart path's last point at S = 0 to the crossing case) whose label now
    differs from the label known when the alarm opened, and the statistic at the crossing
    restated with the chart's weights (docs/methods.md §23).
    """

    at: Instant = Field(description="When the change was seen.")
    checked_at: Instant = Field(description="When the alarm's data was last looked at again.")
    reason: str
    statistic: float | None = Field(description="The statistic on the data now (a chart: S at the crossing).")
    n: int = Field(description="Cases it rests on now (a chart: the evidence's n plus cases now labeled "
                               "that the chart had passed over).")
    label_completeness: float | None = Field(description="A window alarm: the period's label completeness "
                                                         "now; null for a chart alarm.")
    still_crosses: bool | None = Field(description="Whether the data would still raise the alarm; "
                                                   "null: too little data to judge.")
    run_start: Instant | None = Field(None, description="Chart alarms: the hour the run starts (the "
                                                        "path's last point at S = 0, or its first).")
    run_truncated: bool | None = Field(None, description="Chart alarms: S stayed above 0 over the whole "
                                                         "kept path, so the run is cut at its first point.")
    changed_cases: int | None = Field(None, description="Chart alarms: cases on the run whose label changed "
                                                        "since the alarm opened.")
    late_labels: int | None = Field(None, description="Chart alarms: of those, cases without a label when "
                                                      "the alarm opened (read as 0 under implicit negatives, "
                                                      "passed over otherwise).")
    corrected_labels: int | None = Field(None, description="Chart alarms: of those, cases whose label was "
                                                           "corrected.")
    events_added: int | None = Field(None, description="Chart alarms: events on the run now minus then "
                                                       "(negative: fewer).")


class AlarmOut(BaseModel):
    id: int
    rule: str
    state: Literal["open", "resolved"]
    version: str | None = Field(description="The version the alarm is about; null when about all of them.")
    scope: VersionScope
    segment: Segment | None = Field(description="null: every case.")
    summary: str
    crossed_at: Instant
    opened_at: Instant
    resolved_at: Instant | None
    resolved_by: str | None = Field(description="'system', or the actor who resolved it.")
    resolution: AlarmResolution | None
    evidence: AlarmEvidence
    budget_share_per_year: float | None = Field(
        description="The raising rule's yearly share of the model's false-alarm budget when it crossed; "
                    "null: a rule outside the budget, or an alarm raised before budgets existed."
    )
    restatements: list[AlarmRestatement] = Field(
        default_factory=list,
        description="Each time outcomes reported later changed the alarm's data (a window alarm's "
                    "period, the labels on a chart alarm's run), oldest first (empty: unchanged).",
    )


class AlarmList(BaseModel):
    model: str
    alarms: list[AlarmOut]
    count: int


class BacktestCrossing(BaseModel):
    """One time the rule would have crossed its limit in a backtest."""

    crossed_at: Instant
    version: str | None = Field(description="null: the crossing is about all versions.")
    scope: VersionScope
    segment: Segment | None
    summary: str
    evidence: AlarmEvidence


class BacktestOut(BaseModel):
    model: str
    rule: str
    kind: KindName
    start: Instant
    end: Instant
    crossing_count: int = Field(description="Every crossing found, also beyond those listed.")
    crossings: list[BacktestCrossing] = Field(description="Oldest first, at most 1000.")
    sent: int = Field(description="Notifications sent: always 0, a backtest sends nothing.")
