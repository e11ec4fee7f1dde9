"""Times of sightings: ISO 8601 / RFC 3339 text or Unix epoch numbers, always stored as UTC."""

from __future__ import annotations

import math
import re
from datetime import UTC, datetime, timedelta
from typing import Any

# Epoch values at or above 1e11 are read as milliseconds: 1e11 seconds is the year 5138, 1e11 ms is
# 1973. A rule of thumb (common practice, no published source); it misreads only second counts beyond
# the year 5000 or millisecond counts before March 1973, neither of which a link dump holds.
_MS_THRESHOLD = 1e11
_EPOCH_RE = re.compile(r"[+-]?\d+(?:\.\d+)?")
_LEAP_RE = re.compile(r"(T|\s|^)(\d{2}):?(\d{2}):?60(?=[.,]|Z|z|[+-]|$)")
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_ZERO = timedelta(0)


class BadTime(ValueError):
    """The value is not a time we can read; the message says why, for the reject's detail.

    The message never repeats the value: it is stored in a reject, and a value that is not a time can be
    any other text of the row (docs/ingest.md, "What is stored").
    """


def _from_epoch(number: float) -> datetime:
    if not math.isfinite(number):
        raise BadTime("a number that is not finite")
    seconds = number / 1000.0 if abs(number) >= _MS_THRESHOLD else number
    try:
        return _EPOCH + timedelta(seconds=seconds)
    except OverflowError:
        raise BadTime("an epoch number out of range") from None


def _not_iso(text: str) -> str:
    return f"a text of {len(text)} characters that is not an ISO 8601 time"


def _from_text(text: str) -> datetime:
    try:
        parsed = datetime.fromisoformat(text)
    except ValueError:
        # RFC 3339 §5.7 allows second 60 for a leap second; datetime does not. POSIX time has no leap
        # seconds either, so 23:59:60 is read as the instant after 23:59:59, the next 00:00:00.
        leap = _LEAP_RE.search(text)
        if not leap:
            raise BadTime(_not_iso(text)) from None
        fixed = text[:leap.start()] + leap.group(0)[:-2] + "59" + text[leap.end():]
        try:
            parsed = datetime.fromisoformat(fixed) + timedelta(seconds=1)
        except (ValueError, OverflowError):
            raise BadTime(_not_iso(text)) from None
    if parsed.tzinfo is None:
        # A time without a zone is taken as UTC (documented): guessing a local zone would make the
        # stored value depend on the machine that loaded it.
        parsed = parsed.replace(tzinfo=UTC)
    try:
        return parsed.astimezone(UTC)
    except OverflowError:
        raise BadTime("a time out of range once moved to UTC") from None


def parse_time(value: Any) -> datetime:
    """A timezone-aware UTC datetime from ISO 8601 text, or epoch seconds / milliseconds.

    Raises :class:`BadTime` with a reason when the value is none of those.
    """
    if isinstance(value, bool):
        raise BadTime("a boolean, not a time")
    if isinstance(value, int | float):
        try:
            number = float(value)
        except OverflowError:  # a JSON integer past the float range (json reads up to 4,300 digits)
            raise BadTime(f"epoch value with {len(str(abs(value)))} digits is out of range") from None
        return _from_epoch(number)
    if not isinstance(value, str):
        raise BadTime(f"a JSON {type(value).__name__} is not a time")
    if len(value) > 10 and value[4] == "-" and value[-1] == "Z":
        # The usual case, an RFC 3339 UTC time ("2031-05-04T08:00:00Z"): no epoch test, no zone shift.
        try:
            parsed = datetime.fromisoformat(value)
        except ValueError:
            pass  # leap seconds and the like: the general path below says what is wrong
        else:
            if parsed.utcoffset() == _ZERO:
                return parsed if parsed.tzinfo is UTC else parsed.replace(tzinfo=UTC)
    text = value.strip()
    if not text:
        raise BadTime("empty")
    # Eight bare digits in text are an ISO 8601 basic date (20240301), not epoch seconds: as seconds they
    # would fall in 1970-1973, which no link dump holds; a JSON number is always an epoch value.
    if _EPOCH_RE.fullmatch(text) and not (len(text) == 8 and text.isdigit()):
        return _from_epoch(float(text))
    return _from_text(text)


__all__ = ["BadTime", "parse_time"]
