"""Times in UTC: ISO 8601 text to whole seconds since 1970 and back.

Exactly two forms are accepted, both ISO 8601 extended format in UTC with whole seconds:

    2025-03-04T08:15:00Z
    2025-03-04T08:15:00+00:00

Anything else is refused in one line: a space or lower-case ``t`` instead of ``T``, the
basic format (``20250304T081500Z``), fractions of a second, another offset, no offset, a
leap second (``:60``), a date that does not exist. Times lie from 1970-01-01T00:00:00Z
(``TIME_MIN``) to 9999-12-31T23:59:59Z (``TIME_MAX``): a calibration before 1970 is a typo,
and every time in range can be written back in the same form.
"""

from __future__ import annotations

import re
import time
from collections.abc import Sequence
from datetime import UTC, date, datetime
from typing import Any

from hosttool.errors import InputError
from hosttool.util.text import shown

#: Seconds since 1970 UTC of the first and the last time accepted.
TIME_MIN = 0
TIME_MAX = 253_402_300_799          # 9999-12-31T23:59:59Z

#: The accepted forms (ASCII digits only).
TIME_RE = re.compile(r"([0-9]{4})-([0-9]{2})-([0-9]{2})T([0-9]{2}):([0-9]{2}):([0-9]{2})"
                     r"(?:Z|\+00:00)")
#: A column of times all written ``YYYY-MM-DDThh:mm:ssZ``, one per line.
_Z_COLUMN_RE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}Z"
                          r"(?:\n[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}Z)*")
EXAMPLE = "2025-03-04T08:15:00Z"
#: The proleptic Gregorian ordinal of 1970-01-01 (day 1 is 0001-01-01).
_EPOCH_DAY = 719_163
FORMS = "YYYY-MM-DDThh:mm:ssZ or YYYY-MM-DDThh:mm:ss+00:00"


def _seconds(day: int, hour: int, minute: int, second: int) -> int:
    """Seconds since 1970 of a time of day on day ``day`` (0: 1970-01-01)."""
    return day * 86_400 + hour * 3_600 + minute * 60 + second


def parse_time_utc(text: str, where: str) -> int:
    """ISO 8601 UTC text (one of the two forms above) to whole seconds since 1970."""
    match = TIME_RE.fullmatch(text.strip())
    if match is None:
        raise InputError(f"{where}: {shown(text)} is not a UTC time of the form {FORMS} "
                         f"(e.g. {EXAMPLE})")
    year, month, day, hour, minute, second = map(int, match.groups())
    try:
        stamp = datetime(year, month, day, hour, minute, second, tzinfo=UTC)
    except ValueError as exc:
        raise InputError(f"{where}: {shown(text)} is not a valid time: {exc}") from None
    seconds = _seconds(stamp.toordinal() - _EPOCH_DAY, hour, minute, second)
    check_time_range(seconds, where)
    return seconds


def parse_times_utc(texts: Sequence[str]) -> tuple[list[int], dict[int, str]]:
    """``parse_time_utc`` of each text (a readings column): the seconds (0 where refused)
    and, by index, why each refused text is refused (``parse_time_utc``'s message after
    ``where: ``). A column of valid times all ending in Z is read as one array
    (``_z_column``); otherwise each distinct date is turned into days once."""
    fast = _z_column(texts)
    if fast is not None:
        return fast, {}
    days: dict[str, int] = {}
    seconds: list[int] = []
    refused: dict[int, str] = {}
    for i, text in enumerate(texts):
        match = TIME_RE.fullmatch(text.strip())
        if match is not None:
            day_text = text.strip()[:10]
            hour, minute, second = int(match[4]), int(match[5]), int(match[6])
            if day_text not in days:
                try:
                    days[day_text] = date(int(match[1]), int(match[2]),
                                             int(match[3])).toordinal() - _EPOCH_DAY
                except ValueError:
                    days[day_text] = -1          # refused below, with the reason
            day = days[day_text]
            if day >= 0 and hour < 24 and minute < 60 and second < 60:
                value = _seconds(day, hour, minute, second)
                if value <= TIME_MAX:
                    seconds.append(value)
                    continue
        try:
            seconds.append(parse_time_utc(text, ""))
        except InputError as exc:
            seconds.append(0)
            refused[i] = str(exc).removeprefix(": ")
    return seconds, refused


def _z_column(texts: Sequence[str]) -> list[int] | None:
    """The seconds of a column whose times are all ``YYYY-MM-DDThh:mm:ssZ``, valid and from
    1970 on, computed for the whole column at once; None for any other column (read time
    by time). Days since 1970 by the civil calendar's closed form (H. Hinnant,
    "chrono-Compatible Low-Level Date Algorithms", days_from_civil), for the proleptic
    Gregorian calendar as ``datetime.date.toordinal``."""
    column = "\n".join(texts)
    if not texts or _Z_COLUMN_RE.fullmatch(column) is None:
        return None
    import numpy as np  # deferred on purpose: `check` reads no times and imports no numpy

    digits = (np.frombuffer((column + "\n").encode("ascii"), dtype=np.uint8)
              .reshape(len(texts), 21).astype(np.int64) - 48)

    def number(first: int, count: int) -> Any:
        value = digits[:, first]
        for k in range(first + 1, first + count):
            value = value * 10 + digits[:, k]
        return value

    year, month, day = number(0, 4), number(5, 2), number(8, 2)
    hour, minute, second = number(11, 2), number(14, 2), number(17, 2)
    leap = ((year % 4 == 0) & (year % 100 != 0)) | (year % 400 == 0)
    month_days = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])[
        np.clip(month - 1, 0, 11)] + (leap & (month == 2))
    valid = ((year >= 1970) & (month >= 1) & (month <= 12) & (day >= 1) & (day <= month_days)
             & (hour < 24) & (minute < 60) & (second < 60))
    if not valid.all():
        return None
    y = year - (month <= 2)
    era = y // 400
    yoe = y - era * 400
    doy = (153 * np.where(month > 2, month - 3, month + 9) + 2) // 5 + day - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    days = era * 146_097 + doe - 719_468
    seconds: list[int] = (days * 86_400 + hour * 3_600 + minute * 60 + second).tolist()
    return seconds


def check_time_range(seconds: int, where: str) -> None:
    """Refuse a time outside 1970-01-01T00:00:00Z .. 9999-12-31T23:59:59Z."""
    if not TIME_MIN <= seconds <= TIME_MAX:
        raise InputError(f"{where}: {seconds} s since 1970 lies outside the times this tool "
                         "accepts (1970-01-01T00:00:00Z .. 9999-12-31T23:59:59Z)")


def format_time_utc(seconds: int) -> str:
    """Seconds since 1970 UTC (``TIME_MIN`` .. ``TIME_MAX``) as ISO 8601 ending in Z."""
    check_time_range(seconds, "time")
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(seconds))   # years 1970 .. 9999

