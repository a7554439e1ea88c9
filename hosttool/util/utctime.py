"""Times in UTC: ISO 8601 text to whole seconds since 1970 and back."""

from __future__ import annotations

from datetime import UTC, datetime

from hosttool.errors import InputError


def parse_time_utc(text: str, where: str) -> int:
    """ISO 8601 with an explicit UTC offset (Z or +00:00) to whole seconds since 1970."""
    try:
        stamp = datetime.fromisoformat(text.strip())
    except ValueError:
        raise InputError(f"{where}: {text!r} is not an ISO 8601 time such as "
                         "2025-03-04T08:15:00Z") from None
    if stamp.tzinfo is None or stamp.utcoffset() != UTC.utcoffset(None):
        raise InputError(f"{where}: {text!r} must be in UTC (end it with Z)")
    if stamp.microsecond:
        raise InputError(f"{where}: {text!r}: give whole seconds")
    return int(stamp.timestamp())


def format_time_utc(seconds: int) -> str:
    """Seconds since 1970 UTC as ISO 8601 ending in Z."""
    return datetime.fromtimestamp(seconds, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
