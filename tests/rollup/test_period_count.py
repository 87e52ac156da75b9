"""``period_count`` says how many periods ``periods`` would build, without building them."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from hypothesis import given
from hypothesis import strategies as st

from calibrant.rollup.periods import Granularity, period_count, periods

INSTANTS = st.datetimes(min_value=datetime(1990, 1, 1), max_value=datetime(2040, 1, 1),
                        timezones=st.just(UTC))


@given(start=INSTANTS, length=st.timedeltas(min_value=timedelta(0), max_value=timedelta(days=900)),
       granularity=st.sampled_from(list(Granularity)))
def test_the_count_equals_the_periods_built(start: datetime, length: timedelta,
                                            granularity: Granularity) -> None:
    end = start + length
    assert period_count(start, end, granularity) == len(periods(start, end, granularity))


def test_a_century_of_days_is_counted_not_built() -> None:
    start, end = datetime(1900, 1, 1, tzinfo=UTC), datetime(2173, 10, 16, tzinfo=UTC)
    assert period_count(start, end, Granularity.DAY) == (end.date() - start.date()).days == 100_000
    assert period_count(start, end, Granularity.MONTH) == 273 * 12 + 10  # Jan 1900 .. Oct 2173
