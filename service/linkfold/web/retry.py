"""When to ask again: within a run (Retry-After, jittered backoff) and across runs (:func:`next_attempt`).

Within a run the client retries 429 and 503 answers, waiting what ``Retry-After`` asks (RFC 9110
§10.2.3), and connection failures and timeouts with jittered exponential backoff. Across runs a failed
URL gets a time when ``--retry-failed`` may ask it again: the schedule below, shared by following and
fetching.
"""

from __future__ import annotations

import email.utils
import random
from collections.abc import Callable
from datetime import UTC, datetime, timedelta

from .failures import Failure

#: First retry delay of the jittered exponential backoff, seconds (common practice, no source).
BACKOFF_BASE = 1.0

#: Failure classes that usually pass by themselves; retried sooner (see :func:`next_attempt`).
PASSING = frozenset({Failure.DNS, Failure.CONNECT, Failure.TIMEOUT, Failure.TLS, Failure.PROTOCOL,
                     Failure.HTTP_5XX})  # tls_certificate is not: a certificate is fixed by a person
RETRY_FIRST_PASSING = timedelta(hours=1)
RETRY_FIRST_LASTING = timedelta(days=1)
RETRY_CAP_PASSING = timedelta(days=30)
RETRY_CAP_LASTING = timedelta(days=90)


def parse_retry_after(value: str | None, now: datetime | None = None) -> float | None:
    """Seconds to wait from a ``Retry-After`` value: delay-seconds or an HTTP-date (RFC 9110 §10.2.3).

    ``None`` when absent or unreadable; a date in the past gives 0.
    """
    if value is None:
        return None
    text = value.strip()
    if text.isdigit():
        return float(int(text))
    try:
        when = email.utils.parsedate_to_datetime(text)  # IMF-fixdate and the two obsolete forms
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=UTC)  # RFC 9110 §5.6.7: HTTP-dates are in GMT
    now = now or datetime.now(UTC)
    return max(0.0, (when - now).total_seconds())


def backoff_delay(attempt: int, *, base: float = BACKOFF_BASE, cap: float = 60.0,
                  rand: Callable[[], float] = random.random) -> float:
    """Delay before retry number ``attempt`` (0-based): exponential, capped, with "equal jitter".

    Half the exponential step is fixed and half is random, so clients that failed together do not
    retry together (common practice, no source).
    """
    step = min(cap, base * (2 ** attempt))
    return step / 2 + rand() * step / 2


def next_attempt(failure: Failure | str, attempts: int, at: datetime,
                 retry_after: float | None = None) -> datetime:
    """When a failed URL is due again: doubling per attempt from one hour (failures that tend to pass:
    DNS, connection, timeout, TLS, protocol, 5xx) or one day (the rest: 4xx, loops …), capped at 30 and
    90 days, and never before what the server asked for in ``Retry-After``. The schedule is common
    practice, no source; it is deterministic so a lab can say when a link will be tried next.
    """
    passing = Failure(failure) in PASSING or (retry_after is not None)
    first, cap = (RETRY_FIRST_PASSING, RETRY_CAP_PASSING) if passing else (RETRY_FIRST_LASTING, RETRY_CAP_LASTING)
    delay = min(cap, first * (2 ** max(0, attempts - 1)))
    if retry_after is not None:
        delay = max(delay, timedelta(seconds=retry_after))
    return at + delay


__all__ = ["BACKOFF_BASE", "PASSING", "backoff_delay", "next_attempt", "parse_retry_after"]
