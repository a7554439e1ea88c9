"""UTC text <-> seconds since 1970, against the standard library's own conversions."""

from __future__ import annotations

import calendar
import random
import time
from datetime import datetime

import pytest

from hosttool.errors import InputError
from hosttool.util.utctime import (
    TIME_MAX,
    TIME_MIN,
    format_time_utc,
    parse_time_utc,
    parse_times_utc,
)


def test_seconds_agree_with_calendar_timegm_over_the_whole_range() -> None:
    # Source: Python's calendar.timegm (POSIX time of a UTC struct_time) and time.gmtime.
    rng = random.Random(20261202)
    stamps = [TIME_MIN, TIME_MAX, 951_782_400, 4_107_542_399] + \
        [rng.randrange(TIME_MIN, TIME_MAX + 1) for _ in range(20_000)]
    for seconds in stamps:
        text = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(seconds))
        parsed = datetime.strptime(text, "%Y-%m-%dT%H:%M:%SZ").timetuple()
        assert parse_time_utc(text, "t") == calendar.timegm(parsed) == seconds
        assert parse_time_utc(text.replace("Z", "+00:00"), "t") == seconds
        assert format_time_utc(seconds) == text


@pytest.mark.parametrize(("text", "reason"), [
    ("2024-02-30T00:00:00Z", "day is out of range for month"),
    ("2023-02-29T12:00:00Z", "day is out of range for month"),
    ("2025-03-04T24:00:00Z", "hour must be in 0..23"),
    ("2025-03-04T08:60:00Z", "minute must be in 0..59"),
    ("2025-03-04T08:15:60Z", "second must be in 0..59"),
    ("0000-01-01T00:00:00Z", "year 0 is out of range"),
])
def test_a_date_that_does_not_exist_is_refused_with_the_reason(text: str, reason: str) -> None:
    # 2024 is a leap year and 2023 is not (Gregorian rule, from memory)
    with pytest.raises(InputError, match=reason):
        parse_time_utc(text, "t")


def test_leap_day_and_century_rule() -> None:
    # Source: calendar.timegm; 2000 is a leap year, 2100 is not (Gregorian rule, from memory)
    assert parse_time_utc("2000-02-29T00:00:00Z", "t") == calendar.timegm(
        (2000, 2, 29, 0, 0, 0, 0, 0, 0))
    with pytest.raises(InputError, match="day is out of range"):
        parse_time_utc("2100-02-29T00:00:00Z", "t")


def test_a_column_of_times_gives_what_each_time_gives_alone() -> None:
    # parse_times_utc (readings columns, each date turned into days once) against
    # parse_time_utc one by one, on valid times and on every kind of refused one
    rng = random.Random(7)
    texts = [format_time_utc(rng.randrange(TIME_MIN, TIME_MAX + 1)) for _ in range(3000)]
    texts += ["2024-02-29T23:59:59Z", "2024-02-30T00:00:00Z", "2025-03-04T24:00:00Z",
              "2025-03-04T08:60:00+00:00", "2025-03-04T08:15:60Z", "1969-12-31T23:59:59Z",
              "0000-01-01T00:00:00Z", "9999-12-31T23:59:59Z", " 2025-03-04T08:15:00Z ",
              "2025-03-04 08:15:00Z", "2025-03-04T08:15:00.5Z", "", "2025-13-01T00:00:00Z"]
    rng.shuffle(texts)
    seconds, refused = parse_times_utc(texts)
    for i, text in enumerate(texts):
        try:
            assert seconds[i] == parse_time_utc(text, "") and i not in refused
        except InputError as exc:
            assert refused[i] == str(exc).removeprefix(": ") and seconds[i] == 0
    assert len(refused) == 10


def test_a_column_of_valid_z_times_is_read_at_once_with_the_same_seconds(
        monkeypatch: pytest.MonkeyPatch) -> None:
    # A column of valid "...Z" times from 1970 on is read as one array (days by the civil
    # calendar's closed form). Source: calendar.timegm of each, over the whole range, with
    # leap days, century years and the range's ends. The route time by time turns dates
    # into days with datetime.date, made to fail here: the test fails unless the whole
    # column took the array route.
    rng = random.Random(11)
    stamps = [TIME_MIN, TIME_MAX, 951_782_400, 4_107_542_399, 1_709_251_199] + \
        [rng.randrange(TIME_MIN, TIME_MAX + 1) for _ in range(20_000)]
    texts = [time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(s)) for s in stamps]
    expected = [calendar.timegm(datetime.strptime(t, "%Y-%m-%dT%H:%M:%SZ").timetuple())
                for t in texts]

    class NoDates:
        def __init__(self, *args: int) -> None:
            raise AssertionError("read time by time")

    monkeypatch.setattr("hosttool.util.utctime.date", NoDates)
    assert parse_times_utc(texts) == (expected, {})
    # a time that does not exist, another form, or one before 1970 sends the column time
    # by time
    for odd in ("2100-02-29T00:00:00Z", "2025-03-04T08:15:00+00:00", "1969-12-31T23:59:59Z"):
        with pytest.raises(AssertionError, match="time by time"):
            parse_times_utc(texts[:5] + [odd])
