"""From a dump row to what the registry stores: sightings (one per URL) and rejects, as staging entries.

The rules, in one place for every format:

* null and blank values are not URLs; a row with no URL at all is one ``no_url`` reject;
* each remaining value gets a position (0, 1, …) in row order; text is canonicalised, and a value the
  canonicaliser refuses is still stored as a raw URL (with the canonicaliser's reason) and sighted;
  a non-text value (a JSON number or object where a URL should be) is a ``not_text`` reject;
* the row key is the key column's value, else the line number; a missing or unusable key falls back to
  the line number and records ``missing_key`` / ``bad_key`` at position -1;
* a missing or unreadable time leaves the time empty and records ``missing_time`` / ``bad_time`` at
  position -2: the sightings are kept either way.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections import Counter
from collections.abc import Callable
from datetime import datetime
from typing import Any

from ..canon import Canonical
from ..errors import InvalidURL
from .readers import MISSING, DumpRow, Reason, excerpt
from .times import BadTime, parse_time

ROW_POSITION = -1  # the row itself: a row that could not be read, or a problem with its key
TIME_POSITION = -2  # the row's time

_UNSTORABLE = re.compile("[\x00\ud800-\udfff]")

# A staging row: one per sighting or reject.
RowEntry = tuple[Any, ...]
ROW_FIELDS = ("line_no", "position", "row_key", "seen_at", "raw_hash", "reason", "detail", "excerpt")
# A staging raw URL: one per distinct raw URL of a batch, with its canonical form if it has one.
RAW_FIELDS = ("raw_hash", "raw", "raw_error", "url_key", "url", "host", "domain", "outlet", "is_article")
_REASON = 5


def storable(text: str) -> str:
    """``text`` with what PostgreSQL text cannot hold (NUL, lone surrogates) replaced by U+FFFD."""
    return _UNSTORABLE.sub("\ufffd", text) if not text.isascii() or "\x00" in text else text


def raw_hash(text: str) -> str:
    """The raw URL's identity: SHA-256 (hex) of the stored text in UTF-8."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _reject(line_no: int, position: int, row_key: str | None, reason: str, detail: str | None,
            text: str | None = None) -> RowEntry:
    return (line_no, position, row_key, None, None, reason, detail, excerpt(text))


def _key(value: Any, line_no: int) -> tuple[str, tuple[str, str, str | None] | None]:
    fallback = str(line_no)
    if value is MISSING or value is None or (isinstance(value, str) and not value.strip()):
        return fallback, (Reason.MISSING_KEY, f"no key value; the line number {line_no} is the key", None)
    if isinstance(value, str):
        clean = storable(value)
        if clean != value:
            return fallback, (Reason.BAD_KEY, "the key holds NUL or broken Unicode; the line number "
                                              f"{line_no} is the key", clean)
        return value, None
    if isinstance(value, bool | int | float):
        return json.dumps(value), None
    return fallback, (Reason.BAD_KEY, f"the key is a JSON {type(value).__name__}, not a text or number; "
                                      f"the line number {line_no} is the key", json.dumps(value)[:400])


def _time(value: Any) -> tuple[datetime | None, tuple[str, str, str | None] | None]:
    if value is MISSING or value is None or (isinstance(value, str) and not value.strip()):
        return None, (Reason.MISSING_TIME, "no time value; the sightings have no time", None)
    try:
        return parse_time(value), None
    except BadTime as exc:
        shown = value if isinstance(value, str) else json.dumps(value)
        return None, (Reason.BAD_TIME, f"{exc}; the sightings have no time", storable(shown))


def drop_older_half(cache: dict) -> None:
    """Empty half of a bounded cache, keeping the newer half (a dict's order is insertion order): cheaper
    per entry than keeping it in least-recently-used order, which was tried and gave no gain (docs/ingest.md)."""
    keep = list(cache.items())[len(cache) // 2:]
    cache.clear()
    cache.update(keep)


class Batch:
    """The staging rows of one batch, and each distinct raw URL in it once.

    A raw URL is hashed and canonicalised once per load, not once per row: a bounded memo (``memo_size``
    entries, the older half dropped when full) keeps the answer across batches, as panels revisit the
    same pages all the time. Each batch still lists every distinct raw URL it uses in ``raws``.
    """

    def __init__(self, canon: Callable[[str], Canonical], *, keyed: bool, timed: bool,
                 memo_size: int = 65536) -> None:
        self.canon = canon
        self.keyed = keyed
        self.timed = timed
        self.memo_size = max(memo_size, 1)
        self.rows: list[RowEntry] = []
        self.raws: dict[str, tuple[Any, ...]] = {}  # raw hash -> RAW_FIELDS tuple
        # text -> ((hash, reason, detail), RAW_FIELDS tuple)
        self._memo: dict[str, tuple[tuple[str, str | None, str | None], tuple[Any, ...]]] = {}
        self.count = 0  # dump rows added

    def clear(self) -> None:
        """Start the next batch (the memo stays)."""
        self.rows = []
        self.raws = {}
        self.count = 0

    def reasons(self) -> Counter[str]:
        return Counter(r[_REASON] for r in self.rows if r[_REASON] is not None)

    def _url(self, value: str) -> tuple[str, str | None, str | None]:
        known = self._memo.get(value)
        if known is not None:
            self.raws[known[0][0]] = known[1]
            return known[0]
        raw = storable(value)
        h = raw_hash(raw)
        answer: tuple[str, str | None, str | None]
        entry: tuple[Any, ...]
        try:
            c = self.canon(value)
        except InvalidURL as exc:
            answer = (h, exc.reason, exc.detail)
            entry = (h, raw, exc.reason, None, None, None, None, None, None)
        else:
            if raw != value:
                # Never store a canonical form for text we could not store verbatim; the canonicaliser
                # refuses such text itself, this only keeps that promise if it ever changes.
                answer = (h, Reason.CONTROL_CHARS, "NUL or broken Unicode in the URL")
                entry = (h, raw, Reason.CONTROL_CHARS, None, None, None, None, None, None)
            else:
                answer = (h, None, None)
                entry = (h, raw, None, c.url_key, c.url, c.host, c.domain, c.outlet, c.is_article)
        self.raws[h] = entry
        memo = self._memo
        if len(memo) >= self.memo_size:
            drop_older_half(memo)
        memo[value] = (answer, entry)
        return answer

    def add(self, row: DumpRow) -> None:
        """Stage one dump row (it always leaves at least one staging row: every row leaves a trace)."""
        self.count += 1
        out = self.rows
        n = row.line_no
        if row.reject is not None:
            rej = row.reject
            out.append((n, ROW_POSITION, None, None, None, rej.reason, rej.detail, rej.excerpt))
            return
        urls = row.urls
        if len(urls) == 1 and type(urls[0]) is str and urls[0].strip():
            values = urls  # the usual row: one URL
        else:
            values = [v for v in urls if v is not None and not (isinstance(v, str) and not v.strip())]
        if not values:
            detail = "the URL column is empty" if urls else "the URL path reaches no value"
            out.append(_reject(n, ROW_POSITION, None, Reason.NO_URL, detail))
            return
        if self.keyed:
            row_key, key_problem = _key(row.key, n)
            if key_problem:
                out.append(_reject(n, ROW_POSITION, row_key, *key_problem))
        else:
            row_key = str(n)
        seen_at = None
        if self.timed:
            seen_at, time_problem = _time(row.time)
            if time_problem:
                out.append(_reject(n, TIME_POSITION, row_key, *time_problem))
        for pos, value in enumerate(values):
            if not isinstance(value, str):
                out.append(_reject(n, pos, row_key, Reason.NOT_TEXT,
                                   f"a JSON {type(value).__name__} where a URL was expected",
                                   json.dumps(value)[:400]))
                continue
            h, url_reason, url_detail = self._url(value)
            out.append((n, pos, row_key, seen_at, h, url_reason, url_detail, None))


__all__ = ["RAW_FIELDS", "ROW_FIELDS", "ROW_POSITION", "TIME_POSITION", "Batch", "RowEntry", "drop_older_half",
           "raw_hash", "storable"]
