"""CSV and TSV: a header naming the columns, then one record a row, read in line order.

CSV as in RFC 4180 (quoted fields may hold commas, quotes and newlines); TSV as in the IANA
text/tab-separated-values registration (no quoting at all: a field cannot hold a tab or newline). A
broken record costs only its first line: the lines it swallowed are read again on their own.
"""

from __future__ import annotations

import csv
from collections import deque
from collections.abc import Iterator
from operator import itemgetter

from ..errors import DumpFormatError, MissingColumnError
from .lines import PhysicalLine, PhysicalLines
from .opening import DumpFormat
from .problems import EXCERPT_CHARS, Reason, utf8_problem
from .records import MISSING, DumpRow, Lane, ReaderState, RowBlock, names_list, too_long

RUN_MIN, RUN_MAX = 16, 8192  # lines a block lane reads at once


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
                problem = utf8_problem(line.data)
                self.bad_utf8 = f"line {line.number}: {problem}"
            # surrogateescape keeps the record's shape intact for csv; the record is rejected anyway.
            text = line.data.decode("utf-8", "surrogateescape")
        return text + line.terminator.decode("ascii")


def _record_text(lines: list[PhysicalLine]) -> bytes:
    """The start of a record's lines, for its excerpt."""
    return b"\n".join(pl.data for pl in lines[:3])[:EXCERPT_CHARS * 4]


class Delimited(Lane):
    """CSV as in RFC 4180 (quoted fields may hold commas, quotes and newlines); TSV as in the IANA
    text/tab-separated-values registration (no quoting at all: a field cannot hold a tab or newline).
    Both need a header line naming the columns."""

    fast_lane = True  # off only in tests, which compare the two lanes

    def __init__(self, reader: ReaderState) -> None:
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
        header: list[str] = []  # the loop below ends only with the first non-blank header line in it
        while True:
            self.feed.start_record()
            try:
                header = next(self.csv)
            except StopIteration:
                raise DumpFormatError(f"{name}: the file is empty; a {self.opt.fmt.value.upper()} file "
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
        if self.opt.whole_records:
            # Whole records are read by name: a header cell's surrounding spaces ("short, expanded" from
            # a spreadsheet) are not part of the name. Ingest's projected reading keeps names exact.
            header = self.r.columns = [h.strip() for h in header]
            for column, option in self.opt.required:
                self._index(header, column, option)
            return
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
                                 f"{names_list(header)}", hint="pass --url-column NAME")

    def _index(self, header: list[str], column: str, option: str) -> int:
        hits = [i for i, h in enumerate(header) if h == column]
        if len(hits) > 1:
            raise DumpFormatError(f"{self.r.name}: the header names column {column!r} {len(hits)} times "
                                  f"(columns {', '.join(str(i + 1) for i in hits)}); {option} is ambiguous")
        if not hits:
            near = [h for h in header if h.strip().lower() == column.strip().lower()]
            hint = f"did you mean {near[0]!r}?" if near else None
            raise MissingColumnError(f"{self.r.name}: no column {column!r} for {option}; columns found: "
                                     f"{names_list(header)}", hint=hint)
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
        whole = self.opt.whole_records
        fast = self.fast_lane and not whole
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
                yield self.reject(record[0].number, Reason.LINE_TOO_LONG, too_long(self.opt), record[0].data)
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
                yield self.reject(first, Reason.INVALID_UTF8, feed.bad_utf8, _record_text(record), last)
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
                        f"{len(fields)} fields where the header has {width}; missing: {names_list(lost)}")
                else:
                    reason, detail = Reason.FIELD_COUNT, (
                        f"{len(fields)} fields where the header has {width}")
                # Valid CSV of the wrong width: its fields were read, so no excerpt (module doc).
                yield self.reject(first, reason, detail, end_line=last)
                continue
            if whole:
                yield DumpRow(first, last, record=dict(zip(self.r.columns, fields, strict=True)))
                continue
            yield DumpRow(
                first, last,
                urls=[fields[i] for i in self.url_idx],
                key=fields[self.key_idx] if self.key_idx is not None else MISSING,
                time=fields[self.time_idx] if self.time_idx is not None else MISSING,
                unit=fields[self.unit_idx] if self.unit_idx is not None else MISSING,
            )

    def _reject_first(self, record: list[PhysicalLine], detail: str) -> DumpRow:
        return self.reject(record[0].number, Reason.MALFORMED_CSV, detail, record[0].data)

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


__all__ = ["Delimited"]
