"""Dump readers: CSV, TSV, JSON lines and plain URL lists, each yielding one :class:`DumpRow` per row.

A reader never stops at a bad row: it yields the row with a whole-row reject (reason, detail, excerpt)
and goes on, in line order, so that "everything up to line N is stored" stays a true statement for the
loader's resume point. Only a problem with the file as a whole (no header, not JSON lines at all, a
named column that is not there) raises, and it does so before the first row is yielded.

The readers hand on only the values of the URL, key, time and unit columns; every other column is dropped
as soon as a row is parsed (data minimisation: a browsing-panel export is personal data, and the
registry needs nothing else from it). For the same reason a reject carries an excerpt of its line only
when the line could not be parsed at all (broken CSV quoting, text that is not JSON, bytes that are not
UTF-8, a line over the length limit): a record that was parsed is found again by its line number.
"""

from __future__ import annotations

import csv
import json
from collections import deque
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from operator import itemgetter
from typing import Any

from .._json import JSON_LIMITS, json_problem, past_a_limit
from ..errors import DumpFormatError, InputError, MissingColumnError
from .formats import DumpFormat, PhysicalLine, PhysicalLines
from .paths import JsonPath, parse_path, resolve

EXCERPT_CHARS = 200
JSONL_PEEK_LINES = 1000
JSONL_PEEK_BYTES = 8 << 20  # and at most this much of them: the peeked lines are held until replayed
RUN_MIN, RUN_MAX = 16, 8192  # lines a block lane reads at once


class _Missing:
    __slots__ = ()

    def __repr__(self) -> str:
        return "MISSING"


MISSING: Any = _Missing()  # a column or member that is absent, as opposed to present and empty


class Reason:
    """Stable reject reason codes (stored in ``rejects.reason``; documented in docs/ingest.md)."""

    MALFORMED_CSV = "malformed_csv"
    FIELD_COUNT = "field_count"
    MISSING_COLUMN = "missing_column"
    INVALID_UTF8 = "invalid_utf8"
    LINE_TOO_LONG = "line_too_long"
    BAD_JSON = "bad_json"
    NO_URL = "no_url"  # no longer written (a row without a URL is counted); older loads hold it
    NOT_TEXT = "not_text"
    CONTROL_CHARS = "control_chars"
    MISSING_KEY = "missing_key"
    BAD_KEY = "bad_key"
    MISSING_TIME = "missing_time"
    BAD_TIME = "bad_time"
    MISSING_UNIT = "missing_unit"
    BAD_UNIT = "bad_unit"


@dataclass(slots=True)
class RowReject:
    reason: str
    detail: str
    excerpt: str | None = None


@dataclass(slots=True)
class DumpRow:
    """One row of a dump, reduced to what the registry keeps."""

    line_no: int  # first physical line of the row, 1-based
    end_line: int  # last physical line (a quoted CSV field can span lines)
    urls: list[Any] = field(default_factory=list)  # values reached by the URL column(s), in order
    key: Any = MISSING
    time: Any = MISSING
    reject: RowReject | None = None  # set: the row as a whole could not be read
    unit: Any = MISSING  # the unit column's value, raw: the loader keeps only its pseudonym


@dataclass(slots=True)
class RowBlock:
    """Rows of consecutive single lines, one URL value each, as columns: line ``first + i`` has ``urls[i]``,
    ``keys[i]``, ``times[i]`` and ``units[i]`` (``None`` when the column is not read). The values are as they stand (CSV
    and TSV fields; for JSON lines whatever the paths reached, ``MISSING`` included), checked no further
    than a :class:`DumpRow`'s would be: the loader applies the same rules to both (``rows.Batch``). A block
    is how the fast lanes hand on a run of ordinary lines."""

    first: int
    urls: list[Any]
    keys: list[Any] | None
    times: list[Any] | None
    units: list[Any] | None = None

    def __len__(self) -> int:
        return len(self.urls)

    def rows(self) -> Iterator[DumpRow]:
        """The block as :class:`DumpRow` objects."""
        keys, times, units = self.keys, self.times, self.units
        for i, url in enumerate(self.urls):
            n = self.first + i
            yield DumpRow(n, n, [url], MISSING if keys is None else keys[i], MISSING if times is None else times[i],
                          unit=MISSING if units is None else units[i])


@dataclass(frozen=True)
class ReadOptions:
    fmt: DumpFormat
    url_columns: tuple[str, ...] = ()
    key_column: str | None = None
    time_column: str | None = None
    unit_column: str | None = None
    max_line_bytes: int = 1 << 20


def excerpt(text: str | bytes | None, limit: int = EXCERPT_CHARS) -> str | None:
    """A short, storable piece of the input: valid Unicode, no NUL, at most ``limit`` characters."""
    if text is None:
        return None
    if isinstance(text, bytes):
        text = text.decode("utf-8", "replace")
    else:
        text = text.encode("utf-8", "surrogateescape").decode("utf-8", "replace") if not text.isascii() \
            else text
    text = text.replace("\x00", "\ufffd")
    return text if len(text) <= limit else text[:limit - 1] + "…"


def _utf8_problem(data: bytes) -> str | None:
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        return f"byte 0x{data[exc.start]:02x} at column {exc.start + 1} is not valid UTF-8 ({exc.reason})"
    return None


class DumpReader:
    """Iterate the rows of one dump; :meth:`check` validates the columns before anything is written."""

    def __init__(self, lines: Iterator[PhysicalLine], options: ReadOptions, *, name: str) -> None:
        self.options = options
        self.name = name
        self.blank_lines = 0
        self.columns: list[str] = []  # the header (CSV/TSV) or the top-level members seen (JSON lines)
        self._lines = lines
        self._checked = False
        self._impl: _Format
        if options.fmt in (DumpFormat.CSV, DumpFormat.TSV):
            self._impl = _Delimited(self)
        elif options.fmt is DumpFormat.JSONL:
            self._impl = _JsonLines(self)
        else:
            self._impl = _PlainLines(self)

    def check(self) -> None:
        """Raise ``MissingColumnError`` / ``DumpFormatError`` now if the file cannot be read as asked."""
        if not self._checked:
            self._impl.check()
            self._checked = True

    def __iter__(self) -> Iterator[DumpRow]:
        for piece in self.pieces():
            if isinstance(piece, RowBlock):
                yield from piece.rows()
            else:
                yield piece

    def pieces(self) -> Iterator[DumpRow | RowBlock]:
        """The rows in line order, runs of ordinary CSV/TSV lines and JSON-lines records as :class:`RowBlock`
        columns (the loader's way in: a row object costs more than the reading of most rows), the rest as
        :class:`DumpRow`."""
        self.check()
        return self._impl.rows()


class _Format:
    def __init__(self, reader: DumpReader) -> None:
        self.r = reader
        self.opt = reader.options

    def check(self) -> None:  # pragma: no cover - overridden
        raise NotImplementedError

    def rows(self) -> Iterator[DumpRow | RowBlock]:  # pragma: no cover - overridden
        raise NotImplementedError

    def _screened(self, lines: Iterable[PhysicalLine]) -> Iterator[tuple[PhysicalLine, DumpRow | None]]:
        """Each non-blank line, with its reject when it is too long or not UTF-8; blank lines are counted."""
        for line in lines:
            n = line.number
            if line.too_long:
                yield line, DumpRow(n, n, reject=RowReject(Reason.LINE_TOO_LONG, _too_long(self.opt),
                                                           excerpt(line.data)))
            elif not line.data.strip():
                self.r.blank_lines += 1
            else:
                problem = _utf8_problem(line.data)
                yield line, (DumpRow(n, n, reject=RowReject(Reason.INVALID_UTF8, problem, excerpt(line.data)))
                             if problem else None)


# --- plain lists ------------------------------------------------------------------------------------------
class _PlainLines(_Format):
    """One URL a line; the line number is the row key. Blank lines are skipped (and counted)."""

    def check(self) -> None:
        given = [n for n, v in (("--url-column", self.opt.url_columns), ("--key-column", self.opt.key_column),
                                ("--time-column", self.opt.time_column),
                                ("--unit-column", self.opt.unit_column)) if v]
        if given:
            raise InputError(f"{self.r.name}: {', '.join(given)} do not apply to the lines format "
                             "(one URL a line, keyed by line number)")

    def rows(self) -> Iterator[DumpRow]:
        for line, reject in self._screened(self.r._lines):
            if reject is not None:
                yield reject
                continue
            yield DumpRow(line.number, line.number, urls=[line.data.decode("utf-8")])


def _too_long(opt: ReadOptions) -> str:
    return f"line is longer than the limit of {opt.max_line_bytes:,} bytes (setting max_line_bytes)"


# --- CSV and TSV ------------------------------------------------------------------------------------------
class _TooLongLine(Exception):
    pass


class _RecordTooLong(Exception):
    pass


class _Feed:
    """The text lines handed to :mod:`csv`, with the physical lines of the record being parsed.

    Keeping the record's lines lets a broken record cost only its first line: the lines after it are
    pushed back and parsed again, so one stray quote cannot swallow the rows that follow it.
    """

    def __init__(self, lines: Iterator[PhysicalLine], max_bytes: int) -> None:
        self.lines = lines
        self.max_bytes = max_bytes
        self.pending: deque[PhysicalLine] = deque()
        self.record: list[PhysicalLine] = []
        self.record_bytes = 0
        self.bad_utf8: str | None = None

    def __iter__(self) -> _Feed:
        return self

    def start_record(self) -> None:
        self.record = []
        self.record_bytes = 0
        self.bad_utf8 = None

    def push_back(self, lines: list[PhysicalLine]) -> None:
        self.pending.extendleft(reversed(lines))

    def __next__(self) -> str:
        line = self.pending.popleft() if self.pending else next(self.lines)
        self.record.append(line)
        if line.too_long:
            raise _TooLongLine()
        self.record_bytes += len(line.data) + len(line.terminator)
        if len(self.record) > 1 and self.record_bytes > self.max_bytes:
            raise _RecordTooLong()
        try:
            text = line.data.decode("utf-8")
        except UnicodeDecodeError:
            if self.bad_utf8 is None:
                problem = _utf8_problem(line.data)
                self.bad_utf8 = f"line {line.number}: {problem}"
            # surrogateescape keeps the record's shape intact for csv; the record is rejected anyway.
            text = line.data.decode("utf-8", "surrogateescape")
        return text + line.terminator.decode("ascii")


def _record_excerpt(lines: list[PhysicalLine]) -> str | None:
    return excerpt(b"\n".join(pl.data for pl in lines[:3])[:EXCERPT_CHARS * 4])


class _Delimited(_Format):
    """CSV as in RFC 4180 (quoted fields may hold commas, quotes and newlines); TSV as in the IANA
    text/tab-separated-values registration (no quoting at all: a field cannot hold a tab or newline).
    Both need a header line naming the columns."""

    fast_lane = True  # off only in tests, which compare the two lanes

    def __init__(self, reader: DumpReader) -> None:
        super().__init__(reader)
        # csv's field size cap (128 KiB by default) is process-wide state; raise it, never lower it, so
        # a field is limited by our documented line limit and not by a hidden smaller one.
        if csv.field_size_limit() < self.opt.max_line_bytes:
            csv.field_size_limit(self.opt.max_line_bytes)
        self.feed = _Feed(reader._lines, self.opt.max_line_bytes)
        if self.opt.fmt is DumpFormat.TSV:
            self.csv = csv.reader(self.feed, delimiter="\t", quoting=csv.QUOTE_NONE, strict=True)
        else:
            self.csv = csv.reader(self.feed, delimiter=",", quotechar='"', doublequote=True, strict=True)
        self.url_idx: list[int] = []
        self._run_size = RUN_MIN
        self.key_idx: int | None = None
        self.time_idx: int | None = None
        self.unit_idx: int | None = None

    def check(self) -> None:
        name = self.r.name
        while True:
            self.feed.start_record()
            try:
                header = next(self.csv)
            except StopIteration:
                raise DumpFormatError(f"{name}: the file is empty; a {self.opt.fmt.value.upper()} dump "
                                      "needs a header line naming its columns") from None
            except (csv.Error, _TooLongLine, _RecordTooLong) as exc:
                line = self.feed.record[0].number if self.feed.record else 1
                why = str(exc) if isinstance(exc, csv.Error) else "it is too long"
                raise DumpFormatError(f"{name}:{line}: the header line cannot be read ({why})") from None
            if self.feed.bad_utf8:
                raise DumpFormatError(f"{name}: the header is not UTF-8 ({self.feed.bad_utf8})")
            if _is_blank(header):
                self.r.blank_lines += 1
                continue
            break
        self.r.columns = header
        urls = self.opt.url_columns or self._default_url_column(header)
        self.url_idx = [self._index(header, col, "--url-column") for col in urls]
        if self.opt.key_column:
            self.key_idx = self._index(header, self.opt.key_column, "--key-column")
        if self.opt.time_column:
            self.time_idx = self._index(header, self.opt.time_column, "--time-column")
        if self.opt.unit_column:
            self.unit_idx = self._index(header, self.opt.unit_column, "--unit-column")

    def _default_url_column(self, header: list[str]) -> tuple[str, ...]:
        if "url" in header:
            return ("url",)  # a duplicated "url" column is refused by _index as ambiguous
        raise MissingColumnError(f"{self.r.name}: which column holds the URLs? columns found: "
                                 f"{_list(header)}", hint="pass --url-column NAME")

    def _index(self, header: list[str], column: str, option: str) -> int:
        hits = [i for i, h in enumerate(header) if h == column]
        if len(hits) > 1:
            raise DumpFormatError(f"{self.r.name}: the header names column {column!r} {len(hits)} times "
                                  f"(columns {', '.join(str(i + 1) for i in hits)}); {option} is ambiguous")
        if not hits:
            near = [h for h in header if h.strip().lower() == column.strip().lower()]
            hint = f"did you mean {near[0]!r}?" if near else None
            raise MissingColumnError(f"{self.r.name}: no column {column!r} for {option}; columns found: "
                                     f"{_list(header)}", hint=hint)
        return hits[0]

    def _blocks(self, texts: list[str], start: int, first: int, width: int) -> tuple[RowBlock | None, int]:
        """The longest run of ``texts[start:]`` whose lines read as single records of the header's width, as a
        block, and its length. ``texts`` are plain (PhysicalLines.plain_run): no CR, NUL or bad UTF-8.

        A CSV line with quotes is taken when every quote stands at the two ends of a field and nowhere else
        (``"a","b",c``): those fields lose their quotes, as RFC 4180 reads them. A field that holds a
        delimiter, an escaped quote or a line end breaks that pattern, and the line goes to ``csv``."""
        tsv = self.opt.fmt is DumpFormat.TSV
        delimiter = "\t" if tsv else ","
        # Runs grow while every line passes and start small again after one that does not, so that a file
        # with many unusual lines does not split the same lines over and over.
        run = texts[start:start + self._run_size]
        split = [t.split(delimiter) for t in run]
        good = len(split)
        if not tsv and any('"' in t for t in run):
            for k, fields in enumerate(split):
                if len(fields) != width:
                    good = k
                    break
                if '"' in run[k]:
                    unquoted = [_unquoted(f) for f in fields]
                    if None in unquoted:
                        good = k
                        break
                    split[k] = unquoted  # type: ignore[assignment]
        elif not all(len(f) == width for f in split):
            good = next(k for k, f in enumerate(split) if len(f) != width)
        if width == 1:
            # A blank record is no row (the csv lane counts it); a blank line is one, and so is "".
            good = next((k for k, f in enumerate(split[:good]) if not f[0].strip()), good)
        if good < len(split):
            self._run_size = RUN_MIN
            if good == 0:
                return None, 0
            split = split[:good]
        else:
            self._run_size = min(2 * self._run_size, RUN_MAX)
        (url,) = self.url_idx
        key_idx, time_idx, unit_idx = self.key_idx, self.time_idx, self.unit_idx
        return RowBlock(first, list(map(itemgetter(url), split)),
                        None if key_idx is None else list(map(itemgetter(key_idx), split)),
                        None if time_idx is None else list(map(itemgetter(time_idx), split)),
                        None if unit_idx is None else list(map(itemgetter(unit_idx), split))), good

    def rows(self) -> Iterator[DumpRow | RowBlock]:
        feed = self.feed
        width = len(self.r.columns)
        lines, pending = feed.lines, feed.pending
        url_idx, key_idx, time_idx, unit_idx = self.url_idx, self.key_idx, self.time_idx, self.unit_idx
        tsv = self.opt.fmt is DumpFormat.TSV
        delimiter = "\t" if tsv else ","
        fast = self.fast_lane
        # Whole runs of ordinary lines at once, where the line source can give them (one URL column).
        source = lines if fast and len(url_idx) == 1 and isinstance(lines, PhysicalLines) else None
        while True:
            if source is not None and not pending:
                got = source.plain_run(None)
                if got is not None:
                    texts, start = got
                    block, used = self._blocks(texts, start, source.number + 1, width)
                    if block is not None:
                        source.skip(used)
                        yield block
                        continue
            if fast and not pending:
                # The fast lane: a line that csv would split exactly as str.split does (no quote, no CR,
                # no NUL; TSV has no quoting at all), is UTF-8, is not blank and has the header's width.
                # Anything else goes down the lane below, with csv and every check (the lanes are compared
                # in tests/test_ingest_readers.py).
                try:
                    line = next(lines)
                except StopIteration:
                    return
                data = line.data
                if (data and not line.too_long and b"\r" not in data and b"\x00" not in data
                        and (tsv or b'"' not in data)):
                    try:
                        text = data.decode("utf-8")
                    except UnicodeDecodeError:
                        text = ""
                    fields = text.split(delimiter)
                    if len(fields) == width and text and (width > 1 or not text.isspace()):
                        n = line.number
                        yield DumpRow(n, n, [fields[i] for i in url_idx],
                                      fields[key_idx] if key_idx is not None else MISSING,
                                      fields[time_idx] if time_idx is not None else MISSING,
                                      unit=fields[unit_idx] if unit_idx is not None else MISSING)
                        continue
                pending.append(line)
            feed.start_record()
            try:
                fields = next(self.csv)
            except StopIteration:
                return
            except csv.Error as exc:
                yield from self._broken(f"not valid CSV: {exc}")
                continue
            except _TooLongLine:
                record = feed.record
                if len(record) > 1:
                    # The long line ended a record that began earlier: reject that record's first line,
                    # then read the lines between again, then the long line on its own (in line order).
                    yield self._reject_first(record, f"record interrupted by the over-long line "
                                                     f"{record[-1].number}")
                    feed.push_back(record[1:])
                    continue
                n = record[0].number
                yield DumpRow(n, n, reject=RowReject(Reason.LINE_TOO_LONG, _too_long(self.opt),
                                                     excerpt(record[0].data)))
                continue
            except _RecordTooLong:
                yield from self._broken(f"a quoted field runs past {self.opt.max_line_bytes:,} bytes "
                                        "without its closing quote")
                continue
            record = feed.record
            first, last = record[0].number, record[-1].number
            if _is_blank(fields) and len(record) == 1:
                self.r.blank_lines += 1
                continue
            if feed.bad_utf8:
                yield DumpRow(first, last, reject=RowReject(Reason.INVALID_UTF8, feed.bad_utf8,
                                                            _record_excerpt(record)))
                continue
            if len(fields) != width:
                if len(record) > 1:
                    # A multi-line record of the wrong width is a stray quote far more often than a
                    # genuine row: give back the lines it swallowed.
                    yield from self._broken(f"a quoted field opened on line {first} spans lines "
                                            f"{first}-{last} and leaves {len(fields)} fields where the "
                                            f"header has {width}")
                    continue
                if len(fields) < width:
                    lost = self.r.columns[len(fields):]
                    reason, detail = Reason.MISSING_COLUMN, (
                        f"{len(fields)} fields where the header has {width}; missing: {_list(lost)}")
                else:
                    reason, detail = Reason.FIELD_COUNT, (
                        f"{len(fields)} fields where the header has {width}")
                # Valid CSV of the wrong width: its fields were read, so no excerpt (module doc).
                yield DumpRow(first, last, reject=RowReject(reason, detail))
                continue
            yield DumpRow(
                first, last,
                urls=[fields[i] for i in self.url_idx],
                key=fields[self.key_idx] if self.key_idx is not None else MISSING,
                time=fields[self.time_idx] if self.time_idx is not None else MISSING,
                unit=fields[self.unit_idx] if self.unit_idx is not None else MISSING,
            )

    def _reject_first(self, record: list[PhysicalLine], detail: str) -> DumpRow:
        n = record[0].number
        return DumpRow(n, n, reject=RowReject(Reason.MALFORMED_CSV, detail, excerpt(record[0].data)))

    def _broken(self, detail: str) -> Iterator[DumpRow]:
        record = self.feed.record
        if not record:
            return
        if len(record) > 1:
            detail = f"{detail} (record from line {record[0].number} to {record[-1].number}; " \
                     f"the lines after {record[0].number} are read again on their own)"
        yield self._reject_first(record, detail)
        self.feed.push_back(record[1:])


def _unquoted(field: str) -> str | None:
    """``field`` as RFC 4180 reads it when it has no quote or is quoted at its two ends only; else None."""
    if '"' not in field:
        return field
    if len(field) >= 2 and field[0] == '"' and field[-1] == '"' and field.count('"') == 2:
        return field[1:-1]
    return None


def _is_blank(fields: list[str]) -> bool:
    return not fields or (len(fields) == 1 and not fields[0].strip())


def _list(names: list[str], limit: int = 30) -> str:
    if not names:
        return "(none)"
    shown = ", ".join(repr(n) for n in names[:limit])
    return shown + (f" … ({len(names) - limit} more)" if len(names) > limit else "")


# --- JSON lines -------------------------------------------------------------------------------------------
class _JsonLines(_Format):
    """One JSON object a line (RFC 8259 text per line, as JSON Lines / NDJSON practise it)."""

    fast_lane = True  # off only in tests, which compare the block lane with the line-by-line one

    def __init__(self, reader: DumpReader) -> None:
        super().__init__(reader)
        self.url_paths = [parse_path(p) for p in (self.opt.url_columns or ("url",))]
        self.key_path = self._scalar_path(self.opt.key_column, "--key-column")
        self.time_path = self._scalar_path(self.opt.time_column, "--time-column")
        self.unit_path = self._scalar_path(self.opt.unit_column, "--unit-column")
        self.peeked: list[PhysicalLine] = []
        self._run_size = RUN_MIN

    def _scalar_path(self, text: str | None, option: str) -> JsonPath | None:
        if text is None:
            return None
        path = parse_path(text)
        if any(not isinstance(seg, str) for seg in path.segments):
            raise InputError(f"{option} {text!r}: a key, time or unit path must reach one value; '*' is for "
                             "--url-column only")
        return path

    def check(self) -> None:
        """Look at the first records: fail now if none has the URL path, naming the members found."""
        members: dict[str, None] = {}
        objects = reached = units = 0
        first_miss: str | None = None
        nonblank = 0
        unholdable = 0
        held = 0
        for line in self.r._lines:
            self.peeked.append(line)
            held += len(line.data)
            if line.too_long or not line.data.strip():
                continue
            nonblank += 1
            try:
                record = json.loads(line.data)
            except JSON_LIMITS as exc:
                record = None
                if past_a_limit(exc):
                    unholdable += 1  # JSON, most likely, but past a limit: the line's reject, not the file's
            if isinstance(record, dict):
                objects += 1
                members.update(dict.fromkeys(record))
                for path in self.url_paths:
                    got = resolve(path, record)
                    if got.values or (not got.missing and not got.dropped):
                        reached += 1
                    elif first_miss is None:
                        first_miss = got.missing or f"no element has the member at {path.text!r}"
                if self.unit_path is not None and resolve(self.unit_path, record).values:
                    units += 1
            if len(self.peeked) >= JSONL_PEEK_LINES or held >= JSONL_PEEK_BYTES:
                break
        self.r.columns = list(members)
        if nonblank and not objects and not unholdable:
            raise DumpFormatError(f"{self.r.name}: none of the first {nonblank} non-blank lines is a JSON "
                                  "object; is this JSON lines?", hint="pass --format to say what it is")
        if objects and not reached:
            paths = ", ".join(repr(p.text) for p in self.url_paths)
            raise MissingColumnError(f"{self.r.name}: no record among the first {objects} has {paths} "
                                     f"({first_miss}); top-level members found: {_list(self.r.columns)}",
                                     hint="pass --url-column PATH, e.g. links.*.url")
        if objects and self.unit_path is not None and not units:
            # A mistyped unit path would load every row without its unit: refuse it, as a missing column.
            raise MissingColumnError(f"{self.r.name}: no record among the first {objects} has "
                                     f"{self.unit_path.text!r} for --unit-column; top-level members found: "
                                     f"{_list(self.r.columns)}")

    def _all_lines(self) -> Iterator[PhysicalLine]:
        yield from self.peeked
        self.peeked = []
        yield from self.r._lines

    def _block(self, texts: list[str], start: int, first: int) -> tuple[RowBlock | None, int]:
        """The longest run of ``texts[start:]`` (plain: PhysicalLines.plain_run) whose lines are JSON objects
        that the URL path takes to exactly one value, as a block, and its length. The first line that is
        anything else (blank, not JSON, not an object, no URL or several) ends it and is read on its own."""
        (url_path,) = self.url_paths
        key_path, time_path, unit_path, one = self.key_path, self.time_path, self.unit_path, self._one
        urls: list[Any] = []
        keys: list[Any] | None = [] if key_path is not None else None
        times: list[Any] | None = [] if time_path is not None else None
        units: list[Any] | None = [] if unit_path is not None else None
        loads = json.loads
        for text in texts[start:start + self._run_size]:
            if not text or text.isspace():
                break
            try:
                record = loads(text)
            except JSON_LIMITS:
                break  # read again on its own, which rejects it with the reason
            if type(record) is not dict:
                break
            got = resolve(url_path, record)
            if got.missing or len(got.values) != 1:
                break
            urls.append(got.values[0])
            if keys is not None:
                keys.append(one(key_path, record))
            if times is not None:
                times.append(one(time_path, record))
            if units is not None:
                units.append(one(unit_path, record))
        used = len(urls)
        if used < len(texts) - start and used < self._run_size:
            self._run_size = RUN_MIN
        else:
            self._run_size = min(2 * self._run_size, RUN_MAX)
        return (RowBlock(first, urls, keys, times, units) if used else None), used

    def rows(self) -> Iterator[DumpRow | RowBlock]:
        lines = self.r._lines
        # Runs of ordinary lines as blocks, where the line source can give them (one URL path).
        source = lines if self.fast_lane and len(self.url_paths) == 1 and isinstance(lines, PhysicalLines) else None
        if source is None or self.peeked:
            yield from self._line_by_line(self._all_lines() if source is None else self._peeked_lines())
        if source is None:
            return
        while True:
            got = source.plain_run(None)
            if got is not None:
                texts, start = got
                block, used = self._block(texts, start, source.number + 1)
                if block is not None:
                    source.skip(used)
                    yield block
                    continue
            line = next(source, None)
            if line is None:
                return
            yield from self._line_by_line((line,))

    def _peeked_lines(self) -> Iterator[PhysicalLine]:
        yield from self.peeked
        self.peeked = []

    def _line_by_line(self, lines: Iterable[PhysicalLine]) -> Iterator[DumpRow]:
        for line, reject in self._screened(lines):
            if reject is not None:
                yield reject
                continue
            n = line.number
            try:
                record = json.loads(line.data.decode("utf-8"))
            except JSON_LIMITS as exc:
                yield DumpRow(n, n, reject=RowReject(Reason.BAD_JSON, json_problem(exc), excerpt(line.data)))
                continue
            if not isinstance(record, dict):
                # Parsed, so no excerpt (module doc): its type is all the lab needs to find it.
                yield DumpRow(n, n, reject=RowReject(
                    Reason.BAD_JSON, f"the line is a JSON {type(record).__name__}, not an object"))
                continue
            urls: list[Any] = []
            for path in self.url_paths:
                # A record without the URL path is a post without links, not a defect: members are
                # optional in JSON (a path no record has is refused before loading, see check()).
                urls.extend(resolve(path, record).values)
            yield DumpRow(n, n, urls=urls, key=self._one(self.key_path, record),
                          time=self._one(self.time_path, record), unit=self._one(self.unit_path, record))

    @staticmethod
    def _one(path: JsonPath | None, record: dict) -> Any:
        if path is None:
            return MISSING
        got = resolve(path, record)
        return got.values[0] if got.values else MISSING


__all__ = ["MISSING", "DumpReader", "DumpRow", "ReadOptions", "Reason", "RowBlock", "RowReject", "excerpt"]
