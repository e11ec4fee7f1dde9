"""The one time rule of every input: a sighting's time, a page's fetch time, a document's publication date.

Every value is returned as an aware UTC ``datetime``; anything else raises :class:`BadTime` with the
reason. The rule, in order (docs/ingest.md, "Times", says the same; tests/cases/times.tsv checks it):

1. **Epoch numbers** (common practice, no published standard): a JSON number, or text that is a number
   (an optional sign, digits, an optional ``.`` fraction), is POSIX seconds since 1970-01-01T00:00:00Z
   (POSIX.1 "Seconds Since the Epoch"); a value of 1e11 or more in size is milliseconds (1e11 seconds is
   the year 5138, 1e11 ms is 1973: a rule of thumb that misreads only seconds after the year 5000 or
   milliseconds before March 1973). Exactly eight digits are not a number but an ISO 8601 basic date
   (``20310504``). Booleans, NaN and infinities are refused.
2. **RFC 3339 §5.6** date-times, and the **ISO 8601** forms around them that Python's
   ``datetime.fromisoformat`` reads: calendar dates extended or basic (``2031-05-04``, ``20310504``) and
   week dates (``2031-W18-1``, ``2031W181``); the time after ``T``, ``t`` or a space (RFC 3339 §5.6 NOTE),
   as hours, hours and minutes, or hours, minutes and seconds, extended or basic, with a fraction after
   ``.`` or ``,`` (digits past the microsecond are cut); an offset ``Z`` or ``z`` (RFC 3339 §5.6 NOTE:
   either case), ``±hh``, ``±hhmm`` or ``±hh:mm`` (``-00:00`` is UTC, RFC 3339 §4.3). Refused: ordinal
   dates (``2031-124``), reduced dates (``2031-05``), hour 24, any other separator.
3. **No offset means UTC**, and a bare date is midnight UTC: the files we read carry no zone of their
   own, and guessing the machine's would make the stored value depend on who loaded it.
4. **Leap seconds** (RFC 3339 §5.7): second 60 is accepted where a leap second can stand, at 23:59:60
   UTC on the last day of a month (``1990-12-31T23:59:60Z``, ``1990-12-31T15:59:60-08:00``), and read as
   the next instant, 00:00:00 of the next day: POSIX time, which the database stores, has no leap seconds.
   Second 60 at any other time is refused.
5. The result must be a representable ``datetime`` once moved to UTC (years 1 to 9999).

A :class:`BadTime` message never repeats the value: it is stored in a reject, and a value that is not a
time can be any other text of the row (docs/ingest.md, "What is stored").
"""

from __future__ import annotations

import math
import re
from datetime import UTC, datetime, timedelta
from typing import Any

# Epoch values at or above 1e11 are read as milliseconds (rule 1).
_MS_THRESHOLD = 1e11
_EPOCH_RE = re.compile(r"[+-]?\d+(?:\.\d+)?")
_LEAP_RE = re.compile(r"(T|t|\s|^)(\d{2}):?(\d{2}):?60(?=[.,]|Z|z|[+-]|$)")
# The date part of the ISO 8601 forms of rule 2: calendar (extended, basic) and week dates.
_DATE_RE = re.compile(r"\d{4}(?:-\d{2}-\d{2}|\d{4}|-?W\d{2}(?:-?\d)?)")
_SEPARATORS = "Tt "
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_ZERO = timedelta(0)
_SECOND = timedelta(seconds=1)


class BadTime(ValueError):
    """The value is not a time by the rule of this module; the message says why, never what it was."""


def _from_epoch(number: float) -> datetime:
    if not math.isfinite(number):
        raise BadTime("a number that is not finite")
    seconds = number / 1000.0 if abs(number) >= _MS_THRESHOLD else number
    try:
        return _EPOCH + timedelta(seconds=seconds)
    except OverflowError:
        raise BadTime("an epoch number out of range") from None


def _not_iso(text: str) -> str:
    return f"a text of {len(text)} characters that is not an RFC 3339 / ISO 8601 time"


def _iso(text: str) -> datetime:
    """``datetime.fromisoformat`` within rule 2: the separator checked, a lower-case ``z`` allowed."""
    date = _DATE_RE.match(text)
    if date is None:
        raise BadTime(_not_iso(text))
    end = date.end()
    if end < len(text) and text[end] not in _SEPARATORS:
        raise BadTime(_not_iso(text) + " (the date and the time are separated by T or a space)")
    if text[-1] == "z":
        text = text[:-1] + "Z"  # RFC 3339 §5.6 NOTE; fromisoformat reads only the upper case
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        return _leap_second(text)


def _leap_second(text: str) -> datetime:
    leap = _LEAP_RE.search(text)
    if not leap:
        raise BadTime(_not_iso(text))
    fixed = text[:leap.start()] + leap.group(0)[:-2] + "59" + text[leap.end():]
    try:
        before = datetime.fromisoformat(fixed)
    except ValueError:
        raise BadTime(_not_iso(text)) from None
    if before.tzinfo is None:
        before = before.replace(tzinfo=UTC)
    try:
        after = before.astimezone(UTC) + _SECOND
    except OverflowError:
        raise BadTime("a time out of range once moved to UTC") from None
    if (after.hour, after.minute, after.second, after.day) != (0, 0, 0, 1):
        raise BadTime("second 60 is a leap second, which stands only at 23:59:60 UTC on the last day of a "
                      "month (RFC 3339 §5.7)")
    return after


def parse_time(value: Any) -> datetime:
    """An aware UTC datetime from ``value`` by the rule of the module doc; :class:`BadTime` otherwise."""
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
    if len(value) > 10 and value[4] == "-" and value[-1] == "Z" and value[10] in _SEPARATORS:
        # The usual case, an RFC 3339 UTC time ("2031-05-04T08:00:00Z"): no epoch test, no zone shift.
        # ingest.rows.Batch takes the same shortcut inline, with the same test.
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
    if _EPOCH_RE.fullmatch(text) and not (len(text) == 8 and text.isdigit()):
        return _from_epoch(float(text))
    parsed = _iso(text)
    if parsed.tzinfo is None:
        parsed = parsed.replace(tzinfo=UTC)  # rule 3
    try:
        return parsed.astimezone(UTC)
    except OverflowError:
        raise BadTime("a time out of range once moved to UTC") from None


def is_bare_date(value: Any) -> bool:
    """Whether ``value`` is a date without a time of day (``2031-05-04``, ``20310504``, ``2031-W18-1``):
    a page's declared date of that precision says the day, not midnight."""
    return isinstance(value, str) and _DATE_RE.fullmatch(value.strip()) is not None


__all__ = ["BadTime", "is_bare_date", "parse_time"]
