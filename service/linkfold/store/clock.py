"""Times as the registry stores them: always UTC, with the zone said."""

from __future__ import annotations

from datetime import UTC, datetime


def utc(value: datetime | None) -> datetime | None:
    """SQLite hands times back without a zone; every time we store is UTC, so say so."""
    if value is None or value.tzinfo is not None:
        return value
    return value.replace(tzinfo=UTC)


def now() -> datetime:
    return datetime.now(UTC)


__all__ = ["now", "utc"]
