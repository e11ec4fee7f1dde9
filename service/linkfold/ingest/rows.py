"""From a dump row to what the registry stores: sightings (one per URL) and rejects, as staging entries.

The rules, in one place for every format:

* null and blank values are not URLs; a row with no URL at all (a post without links, an empty URL
  field) is counted (``rows_without_url``), not rejected: it is not an error, and leaves nothing behind;
* each remaining value gets a position (0, 1, …) in row order; text is canonicalised, and a value the
  canonicaliser refuses is still stored as a raw URL (with the canonicaliser's reason) and sighted;
  a non-text value (a JSON number or object where a URL should be) is a ``not_text`` reject;
* the row key is the key column's value, else the line number; a missing or unusable key falls back to
  the line number and records ``missing_key`` / ``bad_key`` at position -1;
* a missing or unreadable time leaves the time empty and records ``missing_time`` / ``bad_time`` at
  position -2: the sightings are kept either way;
* with a unit column, the unit is stored only as its keyed pseudonym (``linkfold.pseudonyms``); a missing
  or blank unit leaves it empty (NULL) and records ``missing_unit`` at position -3, a JSON object or array
  ``bad_unit``.

A reject of a row that was parsed keeps its reason, line and position but never an excerpt: the other
fields of a parsed record (a bad time, a key that is an object, a JSON value where a URL should be) can
be personal data. Only a line that could not be parsed at all brings an excerpt (``linkfold.inputs``),
and not while a load reads units: a broken line's text holds the raw unit ID, which must never be stored.
"""

from __future__ import annotations

import json
from collections import Counter, deque
from collections.abc import Callable, Iterable, Mapping
from datetime import UTC, datetime
from typing import Any

from ..canon import Canonical
from ..errors import InvalidURL
from ..inputs import MISSING, BadTime, DumpRow, Reason, RowBlock, parse_time
from ..pseudonyms import Pseudonymiser, unit_text
from ..store.text import raw_hash, storable

ROW_POSITION = -1  # the row itself: a row that could not be read, or a problem with its key
TIME_POSITION = -2  # the row's time
UNIT_POSITION = -3  # the row's unit

_fromisoformat = datetime.fromisoformat

# What a batch hands the writer, in the column order of the tables it goes into (loads.SIGHTING_COLUMNS,
# loads.REJECT_COLUMNS). The raw URL (field 6) is its id when the load already knows it, else its raw
# hash (a str), which the writer swaps for the id once the batch's new raw URLs are stored.
SightingEntry = tuple[Any, ...]  # dataset_id, file_id, line_no, position, row_key, seen_at, raw URL, unit
RejectEntry = tuple[Any, ...]  # dataset_id, file_id, line_no, position, reason, detail, excerpt, raw URL
_REASON = 4
# A staging raw URL: one per distinct raw URL of a batch that the load has no id for, with its canonical
# form if it has one (loads.RAW_COLUMNS).
RAW_FIELDS = ("raw_hash", "raw", "raw_error", "url_key", "url", "host", "domain", "outlet", "is_article")


def _key(value: Any, line_no: int) -> tuple[str, tuple[str, str] | None]:
    fallback = str(line_no)
    if value is MISSING or value is None or (isinstance(value, str) and not value.strip()):
        return fallback, (Reason.MISSING_KEY, f"no key value; the line number {line_no} is the key")
    if isinstance(value, str):
        if storable(value) != value:
            return fallback, (Reason.BAD_KEY, "the key holds NUL or broken Unicode; the line number "
                                              f"{line_no} is the key")
        return value, None
    if isinstance(value, bool | int | float):
        return json.dumps(value), None
    return fallback, (Reason.BAD_KEY, f"the key is a JSON {type(value).__name__}, not a text or number; "
                                      f"the line number {line_no} is the key")


def _time(value: Any) -> tuple[datetime | None, tuple[str, str] | None]:
    if value is MISSING or value is None or (isinstance(value, str) and not value.strip()):
        return None, (Reason.MISSING_TIME, "no time value; the sightings have no time")
    try:
        return parse_time(value), None
    except BadTime as exc:
        return None, (Reason.BAD_TIME, f"{exc}; the sightings have no time")


def drop_older_half(cache: dict) -> None:
    """Empty half of a bounded cache, keeping the newer half (a dict's order is insertion order): cheaper
    per entry than keeping it in least-recently-used order, which was tried and gave no gain (docs/ingest.md)."""
    keep = list(cache.items())[len(cache) // 2:]
    cache.clear()
    cache.update(keep)


class RawIds:
    """Raw URL text -> ``raw_urls.id``, for raw URLs whose batch this load has committed; bounded, shared
    by the files of one load.

    Panels revisit the same pages, so most rows of a batch name a raw URL an earlier batch stored: with its
    id at hand the row is finished on the spot, with nothing to hash, canonicalise or send. Only raw URLs
    with a canonical form are kept (a refused one needs its reason on every row; the memo has it). An
    entry is a key string and an int, about 200 bytes.

    Two generations keep what a load keeps meeting: an id is looked up in ``young``, then in ``old`` (a
    hit there moves it to ``young``); when ``young`` holds ``bound`` entries it becomes ``old`` and the
    former ``old`` is dropped, with only the raw URLs not met for a whole generation. (Dropping the older
    half of one dict, as before, dropped a Zipf stream's popular pages, which come early, and they were
    staged again: 2M rows over 369k distinct URLs ran at 60k rows/s.) At most ``2 * bound`` entries.

    The writer thread learns ids, the reading thread uses them: :meth:`offer` (any thread) queues what a
    committed batch learned, :meth:`absorb` (the reading thread, between batches) takes it in, so the
    dicts are only ever changed by the thread that reads them.
    """

    def __init__(self, bound: int) -> None:
        self.bound = max(bound, 16)
        self.young: dict[str, int] = {}
        self.old: dict[str, int] = {}
        self._inbox: deque[tuple[Iterable[tuple[Any, ...]], Mapping[str, int]]] = deque()

    def get(self, text: str) -> int | None:
        rid = self.young.get(text)
        if rid is None:
            rid = self.old.get(text)
            if rid is not None:
                self.young[text] = rid
        return rid

    def __contains__(self, text: object) -> bool:
        return text in self.young or text in self.old

    def __getitem__(self, text: str) -> int:
        rid = self.get(text)
        if rid is None:
            raise KeyError(text)
        return rid

    def __setitem__(self, text: str, rid: int) -> None:
        self.young[text] = rid

    def __len__(self) -> int:
        return len(self.young) + len(self.old)  # an entry met in both generations counts twice

    def offer(self, raws: Iterable[tuple[Any, ...]], ids: Mapping[str, int]) -> None:
        """Queue the ids of a committed batch's staged raw URLs (``RAW_FIELDS`` tuples; raw hash -> id)."""
        self._inbox.append((raws, ids))

    def absorb(self) -> list[str]:
        """Take in what committed batches learned; return the raw texts now known."""
        learned: list[str] = []
        young = self.young
        while self._inbox:
            raws, ids = self._inbox.popleft()
            for w in raws:
                if w[2] is None and w[0] in ids:
                    young[w[1]] = ids[w[0]]
                    learned.append(w[1])
        if len(young) >= self.bound:
            self.old, self.young = young, {}
        return learned


class Batch:
    """The sightings and rejects of one batch, and each raw URL in it that the load has no id for yet.

    A row whose raw URL has a known id (``ids``) is finished here. Any other raw URL is hashed and
    canonicalised once per load, not once per row: a bounded memo (``memo_size`` entries, the older half
    dropped when full) keeps the answer until the URL's id is known. Its rows carry the raw hash
    (``pending`` says which sightings do); the batch that first met it stages it in ``raws``, and a later
    batch relies on that one being stored first.
    """

    def __init__(self, canon: Callable[[str], Canonical], *, dataset_id: int, file_id: int, keyed: bool,
                 timed: bool, memo_size: int = 65536, ids: RawIds | None = None,
                 units: Pseudonymiser | None = None) -> None:
        self.canon = canon
        #: Pseudonymises the unit column, when the load reads one; raw field text -> pseudonym in
        #: ``_unit_cache`` (bounded; panels repeat their units on row after row).
        self.units = units
        self._unit_cache: dict[str, str] = {}
        self.dataset_id = dataset_id
        self.file_id = file_id
        self.keyed = keyed
        self.timed = timed
        self.memo_size = max(memo_size, 1)
        self.ids = ids if ids is not None else RawIds(4 * self.memo_size)
        self.sightings: list[SightingEntry] = []
        self.rejects: list[RejectEntry] = []
        self.pending: list[int] = []  # indexes of the sightings that carry a raw hash, not an id
        self.raws: dict[str, tuple[Any, ...]] = {}  # raw hash -> RAW_FIELDS tuple
        # text -> ((hash, reason, detail), RAW_FIELDS tuple)
        self._memo: dict[str, tuple[tuple[str, str | None, str | None], tuple[Any, ...]]] = {}
        self.count = 0  # dump rows added
        self.no_url = 0  # rows without any URL: counted, not rejected

    def clear(self) -> None:
        """Start the next batch (the memo and the ids stay); take in the ids committed meanwhile."""
        self.sightings = []
        self.rejects = []
        self.pending = []
        self.raws = {}
        self.count = 0
        self.no_url = 0
        self.learn()

    def learn(self) -> None:
        memo = self._memo
        for text in self.ids.absorb():
            memo.pop(text, None)  # its id replaces it

    def known(self) -> dict[str, int]:
        """Raw hash -> id for this batch's staged raw URLs whose id became known after their rows were
        staged (an earlier batch committed them meanwhile): the writer need not send those."""
        self.learn()
        ids = self.ids
        return {h: ids[w[1]] for h, w in self.raws.items() if w[2] is None and w[1] in ids}

    def reasons(self) -> Counter[str]:
        return Counter(r[_REASON] for r in self.rejects)

    def _reject(self, line_no: int, position: int, reason: str, detail: str | None) -> None:
        # No excerpt: the row was parsed, and its fields are not ours to keep (module doc).
        self.rejects.append((self.dataset_id, self.file_id, line_no, position, reason, detail, None, None))

    def _unit(self, line_no: int, value: Any) -> str | None:
        """The pseudonym of a row's unit value, or None (with a reject) when it holds none."""
        cache = self._unit_cache
        if type(value) is str:
            got = cache.get(value)
            if got is not None:
                return got
        try:
            text = None if value is MISSING else unit_text(value)
        except ValueError as exc:
            self._reject(line_no, UNIT_POSITION, Reason.BAD_UNIT, f"the unit is {exc}; the sightings have no unit")
            return None
        if text is None:
            self._reject(line_no, UNIT_POSITION, Reason.MISSING_UNIT, "no unit value; the sightings have no unit")
            return None
        assert self.units is not None
        got = self.units(text)
        if type(value) is str:
            if len(cache) >= self.memo_size:
                drop_older_half(cache)
            cache[value] = got
        return got

    def _url(self, value: str) -> tuple[str, str | None, str | None]:
        known = self._memo.get(value)
        if known is not None:
            # Staged by this batch or an earlier one of this file, which the writer stores first (batches
            # are written in order): either way the writer can give its id.
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

    def add_block(self, block: RowBlock, start: int = 0, stop: int | None = None) -> None:
        """Stage the block's rows ``start:stop``, as :meth:`add` would stage each of them (a row that is not
        the usual one goes through :meth:`add`)."""
        stop = len(block) if stop is None else stop
        ds, fid = self.dataset_id, self.file_id
        first = block.first
        urls = block.urls
        keys = block.keys if self.keyed else None
        times = block.times if self.timed else None
        units = block.units if self.units is not None else None
        unit_cache = self._unit_cache
        unit = None
        out, pending, rejects = self.sightings, self.pending, self.rejects
        young, old = self.ids.young, self.ids.old  # RawIds.get, inline
        usual = 0
        for i in range(start, stop):
            n = first + i
            value = urls[i]
            key = keys[i] if keys is not None else MISSING
            t = times[i] if times is not None else MISSING
            # The usual row, as in add(): a URL that is not blank, a plain ASCII key, an RFC 3339 time in UTC
            # (JSON lines can give other types: those rows go through add()).
            if type(value) is not str or not value or value.isspace() or (keys is not None and not (
                    type(key) is str and key.isascii() and key and not key.isspace() and "\x00" not in key)):
                self.add(DumpRow(n, n, [value], key, t, unit=units[i] if units is not None else MISSING))
                continue
            seen_at = None
            if times is not None:
                if type(t) is str and len(t) > 10 and t[-1] == "Z" and t[4] == "-" and t[10] in "Tt ":
                    try:
                        seen_at = _fromisoformat(t)
                    except ValueError:
                        seen_at = None
                if seen_at is None or seen_at.tzinfo is not UTC:
                    self.add(DumpRow(n, n, [value], key, t, unit=units[i] if units is not None else MISSING))
                    continue
            usual += 1
            row_key = key if keys is not None else str(n)
            if units is not None:
                u = units[i]
                unit = unit_cache.get(u) if type(u) is str else None
                if unit is None:
                    unit = self._unit(n, u)
            rid = young.get(value)
            if rid is None:
                rid = old.get(value)
                if rid is not None:
                    young[value] = rid
            if rid is not None:
                out.append((ds, fid, n, 0, row_key, seen_at, rid, unit))
                continue
            h, url_reason, url_detail = self._url(value)
            pending.append(len(out))
            out.append((ds, fid, n, 0, row_key, seen_at, h, unit))
            if url_reason is not None:
                rejects.append((ds, fid, n, 0, url_reason, url_detail, None, h))
        self.count += usual

    def add(self, row: DumpRow) -> None:
        """Stage one dump row (it always leaves at least one sighting or reject: every row leaves a trace)."""
        self.count += 1
        ds, fid = self.dataset_id, self.file_id
        n = row.line_no
        if row.reject is not None:
            rej = row.reject
            # A broken row's text holds its raw unit ID when the load reads units: no excerpt then.
            self.rejects.append((ds, fid, n, ROW_POSITION, rej.reason, rej.message,
                                 rej.excerpt if self.units is None else None, None))
            return
        urls = row.urls
        # (x and not x.isspace()) is "not blank", as x.strip() would say, without a copy of x.
        if len(urls) == 1 and type(urls[0]) is str and urls[0] and not urls[0].isspace():
            values = urls  # the usual row: one URL
        else:
            values = [v for v in urls if v is not None and not (isinstance(v, str) and not v.strip())]
        if not values:
            self.no_url += 1
            return
        if self.keyed:
            key = row.key
            # The usual key (plain ASCII text) is taken as it is; _key has every other case.
            if type(key) is str and key.isascii() and key and not key.isspace() and "\x00" not in key:
                row_key = key
            else:
                row_key, key_problem = _key(key, n)
                if key_problem:
                    self._reject(n, ROW_POSITION, *key_problem)
        else:
            row_key = str(n)
        seen_at = None
        if self.timed:
            t = row.time
            # parse_time's own first case (RFC 3339 in UTC, "…Z"), inline: it is met on nearly every row.
            if type(t) is str and len(t) > 10 and t[-1] == "Z" and t[4] == "-" and t[10] in "Tt ":
                try:
                    seen_at = _fromisoformat(t)
                except ValueError:
                    seen_at = None
                if seen_at is not None and seen_at.tzinfo is not UTC:
                    seen_at = None
            if seen_at is None:
                seen_at, time_problem = _time(t)
                if time_problem:
                    self._reject(n, TIME_POSITION, *time_problem)
        unit = self._unit(n, row.unit) if self.units is not None else None
        out = self.sightings
        ids = self.ids
        for pos, value in enumerate(values):
            if not isinstance(value, str):
                self._reject(n, pos, Reason.NOT_TEXT, f"a JSON {type(value).__name__} where a URL was expected")
                continue
            rid = ids.get(value)
            if rid is not None:
                out.append((ds, fid, n, pos, row_key, seen_at, rid, unit))
                continue
            h, url_reason, url_detail = self._url(value)
            self.pending.append(len(out))
            out.append((ds, fid, n, pos, row_key, seen_at, h, unit))
            if url_reason is not None:
                self.rejects.append((ds, fid, n, pos, url_reason, url_detail, None, h))


__all__ = ["RAW_FIELDS", "ROW_POSITION", "TIME_POSITION", "UNIT_POSITION", "Batch", "RawIds", "RejectEntry", "SightingEntry",
           "drop_older_half", "raw_hash", "storable"]
