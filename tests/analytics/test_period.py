"""Periods of UTC days, read from the words a page or a person writes."""

from __future__ import annotations

import datetime as dt

import pytest

from fixture.analytics.period import parse_period
from fixture.errors import UserInputError

# 01:30 at UTC+03:00 is 22:30 UTC the day before: days are UTC days (common practice, no source).
NOW = dt.datetime(2026, 12, 5, 1, 30, tzinfo=dt.timezone(dt.timedelta(hours=3)))


def utc(*day: int) -> dt.datetime:
    return dt.datetime(*day, tzinfo=dt.UTC)


@pytest.mark.parametrize(("text", "since", "until"), [
    ("today", utc(2026, 12, 4), utc(2026, 12, 5)),
    ("7d", utc(2026, 11, 28), utc(2026, 12, 5)),  # 28, 29, 30 Nov and 1..4 Dec: seven days, today included
    ("1d", utc(2026, 12, 4), utc(2026, 12, 5)),
    ("2026-02-28", utc(2026, 2, 28), utc(2026, 3, 1)),
    ("2024-02-28..2024-03-01", utc(2024, 2, 28), utc(2024, 3, 2)),  # 2024 is a leap year: three days
])
def test_a_period_is_whole_utc_days(text: str, since: dt.datetime, until: dt.datetime) -> None:
    period = parse_period(text, NOW)
    assert (period.since, period.until) == (since, until)
    assert period.text == text


def test_all_is_open_at_both_ends() -> None:
    period = parse_period("all", NOW)
    assert period.is_all and period.words == "all runs"


def test_a_period_says_its_days_in_words() -> None:
    assert parse_period("7d", NOW).words == "the 7 UTC days 2026-11-28 to 2026-12-04"
    assert parse_period("today", NOW).words == "2026-12-04 (UTC)"


@pytest.mark.parametrize(("text", "says"), [
    ("<script>alert(1)</script>", "expected all, today, Nd"),
    ("0d", "expected 1 to 3660 days, found 0"),
    ("9999d", "expected 1 to 3660 days, found 9999"),
    ("2026-13-01", "where a date YYYY-MM-DD belongs"),
    ("2026-12-03..2026-12-01", "expected the first day on or before the last"),
    ("2026-12-01..", "where a date YYYY-MM-DD belongs"),
    ("x" * 500, "..."),
])
def test_bad_words_are_a_user_error(text: str, says: str) -> None:
    with pytest.raises(UserInputError, match="period") as caught:
        parse_period(text, NOW)
    assert says in caught.value.message
    assert len(caught.value.message) < 200  # a long input is cut, not echoed whole
