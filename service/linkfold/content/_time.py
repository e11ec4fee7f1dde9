"""Timestamps from input files and pages, always returned as aware UTC datetimes."""

from __future__ import annotations

import re
from datetime import UTC, date, datetime, time

_DATE_ONLY = re.compile(r"\d{4}-\d{2}-\d{2}")


def parse_utc(text: str) -> datetime:
    """Parse an ISO 8601 / RFC 3339 timestamp to UTC.

    Rules (ours, documented in docs/content.md): an offset or ``Z`` is honoured; a timestamp without an
    offset is taken as UTC, since the files we read carry no time zone of their own to fall back on; a
    bare date (``2024-05-03``) is midnight UTC of that day. Raises ``ValueError`` with a readable reason.
    """
    value = text.strip()
    if not value:
        raise ValueError("empty timestamp")
    if _DATE_ONLY.fullmatch(value):
        return datetime.combine(date.fromisoformat(value), time(0, 0), tzinfo=UTC)
    try:
        # Python 3.11's fromisoformat reads the ISO 8601 forms RFC 3339 allows, "Z" included.
        parsed = datetime.fromisoformat(value)
    except ValueError:
        raise ValueError(f"not an ISO 8601 timestamp: {value!r}") from None
    if parsed.tzinfo is None:
        return parsed.replace(tzinfo=UTC)
    return parsed.astimezone(UTC)


def parse_declared(text: str) -> tuple[datetime, bool]:
    """Like :func:`parse_utc`, also telling whether the value was a bare date (no time of day)."""
    value = text.strip()
    return parse_utc(value), bool(_DATE_ONLY.fullmatch(value))
