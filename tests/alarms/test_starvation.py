"""The feed-starvation decision on given counts: its two checks, its exact test, its parameters.

The outcome_arrival p-value is checked against ``scipy.stats.fisher_exact``
(alternative="less", the one-sided Fisher exact test on the 2×2 table of
labeled / unlabeled × recent / history) and against the published tea-tasting
example (Agresti, Categorical Data Analysis, 2nd ed. 2002, §3.5.2, Table 3.8:
one-sided P = 0.243, exactly 17/70). Every other expectation is a count or a
comparison read off the inputs the test builds.
"""

from __future__ import annotations

import pytest
from pydantic import ValidationError
from scipy.stats import fisher_exact

from calibrant.alarms.kinds.base import FeedInputs, LabelCounts
from calibrant.alarms.kinds.starvation import (
    ARRIVAL,
    SILENCE,
    StarvationParams,
    decide,
    describe,
    in_budget,
    lower_share_p_value,
)

PARAMS = StarvationParams()
HOURLY_LEVEL = 1.0 / (24 * 365.25)  # one false alarm a year, all of it this rule's, tested every hour


def _feeds(silence: float | None, recent: tuple[int, int] | None, history: tuple[int, int] | None, *,
           implicit: bool = False, horizon: bool = True) -> FeedInputs:
    return FeedInputs(silence_hours=silence, implicit_negatives=implicit, has_horizon=horizon,
                      recent=None if recent is None else LabelCounts(*recent),
                      history=None if history is None else LabelCounts(*history))


def _table(recent: LabelCounts, history: LabelCounts) -> list[list[int]]:
    return [[recent.labeled, recent.mature - recent.labeled],
            [history.labeled, history.mature - history.labeled]]


@pytest.mark.parametrize(("recent", "history"), [
    ((336, 40), (1344, 403)),
    ((336, 95), (1344, 403)),
    ((60, 12), (240, 70)),
    ((50, 0), (50, 0)),
    ((50, 50), (200, 3)),
    ((5000, 1400), (20000, 6100)),
])
def test_p_value_is_the_one_sided_fisher_exact_test_of_scipy(recent: tuple[int, int],
                                                             history: tuple[int, int]) -> None:
    r, h = LabelCounts(*recent), LabelCounts(*history)
    expected = fisher_exact(_table(r, h), alternative="less").pvalue  # scipy.stats.fisher_exact
    assert lower_share_p_value(r, h) == pytest.approx(expected, rel=1e-9, abs=1e-300)


def test_p_value_of_the_published_tea_tasting_example() -> None:
    # Agresti (2002) §3.5.2: 3 of 4 "milk first" cups guessed right; P(n11 ≥ 3) = 17/70 ≈ 0.243.
    # As a lower-tail test: the "wrong" row 1 of 4, so P(n11 ≤ 1) with the same margins.
    assert lower_share_p_value(LabelCounts(4, 1), LabelCounts(4, 3)) == pytest.approx(17 / 70, rel=1e-12)


def test_outcomes_that_stopped_cross_outcome_arrival() -> None:
    feeds = _feeds(2.0, recent=(336, 10), history=(1344, 800))
    d = decide(PARAMS, feeds, HOURLY_LEVEL)
    arrival = d.detail["checks"][ARRIVAL]
    assert d.crossed is True
    assert arrival["crossed"] is True
    assert d.detail["checks"][SILENCE]["crossed"] is False
    expected = fisher_exact([[10, 326], [800, 544]], alternative="less").pvalue  # scipy.stats.fisher_exact
    assert arrival["p_value"] == pytest.approx(expected, rel=1e-9, abs=1e-300)
    assert arrival["p_value"] <= HOURLY_LEVEL
    assert arrival["recent_rate"] == 10 / 336
    assert arrival["history_rate"] == 800 / 1344
    assert d.statistic == arrival["p_value"]
    assert d.detail["statistic_of"] == ARRIVAL
    assert d.n == 336 + 1344
    assert d.detail["level"] == HOURLY_LEVEL == arrival["level"]
    assert f"{ARRIVAL}: " in d.summary
    assert f"{SILENCE}: " in d.summary


def test_a_significant_drop_above_the_effect_floor_does_not_cross() -> None:
    # 40 % against 60 %: p is tiny, but 0.40 ≥ 0.5 × 0.60.
    feeds = _feeds(1.0, recent=(2000, 800), history=(8000, 4800))
    d = decide(PARAMS, feeds, HOURLY_LEVEL)
    arrival = d.detail["checks"][ARRIVAL]
    assert arrival["p_value"] < 1e-30
    assert arrival["recent_rate"] >= arrival["minimum_effect_rate"] == 0.5 * 0.6
    assert d.crossed is False
    # The same counts with a floor at 0.7 × history (0.42 > 0.40) do cross.
    assert decide(StarvationParams(min_rate_ratio=0.7), feeds, HOURLY_LEVEL).crossed is True


def test_a_large_drop_on_few_cases_is_not_significant_at_the_hourly_level() -> None:
    recent, history = LabelCounts(50, 10), LabelCounts(50, 22)  # 20 % vs 44 %: below the floor
    p = fisher_exact(_table(recent, history), alternative="less").pvalue
    assert HOURLY_LEVEL < p < 0.05
    d = decide(PARAMS, _feeds(1.0, (50, 10), (50, 22)), HOURLY_LEVEL)
    assert d.detail["checks"][ARRIVAL]["crossed"] is False
    assert d.crossed is False
    assert decide(PARAMS, _feeds(1.0, (50, 10), (50, 22)), 0.05).crossed is True


def test_implicit_negatives_are_never_checked_for_outcome_arrival() -> None:
    d = decide(PARAMS, _feeds(3.0, None, None, implicit=True), HOURLY_LEVEL)
    arrival = d.detail["checks"][ARRIVAL]
    assert arrival["crossed"] is None
    assert "not checked: implicit negatives" in arrival["message"]
    assert "not checked: implicit negatives" in d.summary
    assert d.crossed is False  # the silence check is judged and holds not
    assert d.statistic == 3.0
    assert d.detail["statistic_of"] == SILENCE


def test_without_a_horizon_only_silence_is_checked() -> None:
    d = decide(PARAMS, _feeds(30.0, None, None, horizon=False), HOURLY_LEVEL)
    assert d.detail["checks"][ARRIVAL]["crossed"] is None
    assert "no outcome horizon" in d.detail["checks"][ARRIVAL]["message"]
    assert d.crossed is True
    assert d.detail["checks"][SILENCE]["crossed"] is True


def test_silence_is_a_condition_outside_the_budget() -> None:
    quiet = decide(PARAMS, _feeds(24.5, (336, 100), (1344, 400)), HOURLY_LEVEL)
    silence = quiet.detail["checks"][SILENCE]
    assert quiet.crossed is True
    assert silence["crossed"] is True
    assert quiet.detail["checks"][ARRIVAL]["crossed"] is False
    assert "not a test" in silence["basis"]
    assert "outside the false-alarm budget" in silence["basis"]
    assert quiet.statistic == 24.5
    assert quiet.detail["statistic_of"] == SILENCE
    at_limit = decide(PARAMS, _feeds(24.0, (336, 100), (1344, 400)), HOURLY_LEVEL)
    assert at_limit.crossed is False  # more than the limit, not equal to it


@pytest.mark.parametrize(("recent", "history"), [((49, 0), (1344, 400)), ((336, 0), (49, 40))])
def test_too_few_mature_in_either_window_is_not_judged(recent: tuple[int, int],
                                                       history: tuple[int, int]) -> None:
    d = decide(PARAMS, _feeds(None, recent, history), HOURLY_LEVEL)
    arrival = d.detail["checks"][ARRIVAL]
    assert arrival["crossed"] is None
    assert arrival["message"].startswith("not judged")
    assert arrival["n_mature_recent"] == recent[0]
    assert arrival["n_mature_history"] == history[0]
    assert d.crossed is None  # neither check could be judged
    assert decide(PARAMS, _feeds(2.0, recent, history), HOURLY_LEVEL).crossed is False


def test_counts_in_the_detail_are_integers() -> None:
    d = decide(PARAMS, _feeds(2.0, (336, 100), (1344, 400)), HOURLY_LEVEL)
    arrival = d.detail["checks"][ARRIVAL]
    for key in ("n_mature_recent", "n_labeled_recent", "n_mature_history", "n_labeled_history"):
        assert type(arrival[key]) is int
    assert type(d.n) is int


def test_parameters_defaults_and_bounds() -> None:
    assert PARAMS.model_dump() == {"max_silence_hours": 24.0, "window_days": 7, "history_days": 28,
                                   "min_mature": 50, "min_rate_ratio": 0.5, "budget_weight": 1.0}
    for bad in ({"min_rate_ratio": 1.5}, {"min_rate_ratio": 0}, {"budget_weight": 0},
                {"history_days": 0}, {"max_silence_hours": 0}, {"max_unlabeled_share": 0.5}):
        with pytest.raises(ValidationError) as err:
            StarvationParams.model_validate(bad)
        assert err.value.errors()[0]["loc"] == (next(iter(bad)),)


def test_description_names_both_checks_and_its_budget() -> None:
    text = describe(StarvationParams(window_days=5, history_days=20, min_mature=80))
    assert set(text) == {"detects", "minimum_data"}
    assert SILENCE in text["detects"]
    assert ARRIVAL in text["detects"]
    assert "last 5 days" in text["detects"]
    assert "preceding 20 days" in text["detects"]
    assert "80 mature predictions" in text["minimum_data"]
    assert in_budget(PARAMS) is True


def test_level_zero_never_judges_the_test_even_when_p_underflows() -> None:
    feeds = _feeds(1.0, recent=(20000, 0), history=(80000, 80000))
    assert lower_share_p_value(LabelCounts(20000, 0), LabelCounts(80000, 80000)) == 0.0  # below float range
    d = decide(PARAMS, feeds, 0.0)
    assert d.detail["checks"][ARRIVAL]["crossed"] is None
    assert d.crossed is False
    assert decide(PARAMS, feeds, HOURLY_LEVEL).crossed is True
