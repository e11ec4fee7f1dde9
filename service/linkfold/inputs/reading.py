"""Reading an input table: :class:`DumpReader` over a file's lines, and :func:`read_records` for a whole file.

Every reader of input files in linkfold goes through here (ingest, redirect-pair import, the page
manifest and page JSON lines, documents load), so that a file is opened, decoded, split into lines and
reported on in one way:

* a reader never stops at a bad row: it yields the row with its :class:`~.problems.LineProblem` and goes
  on, in line order, so that "everything up to line N is stored" stays a true statement for a loader's
  resume point. Only a problem with the file as a whole (not UTF-8, no header, not JSON lines at all, a
  named column that is not there) raises, and it does so before the first row is yielded;
* ingest's readers hand on only the values of the URL, key, time and unit columns; every other column is
  dropped as soon as a row is parsed (data minimisation: a browsing-panel export is personal data, and the
  registry needs nothing else from it). Readers that check every field of a record themselves (documents,
  pages, redirect pairs) read whole records (``ReadOptions.whole_records``) and keep none of them;
* an excerpt of a line is kept only when it could not be parsed at all (``problems.UNPARSED``).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import InputError
from .delimited import Delimited
from .jsonlines import JsonLines
from .lines import PhysicalLine, PhysicalLines, physical_lines
from .opening import DEFAULT_MAX_LINE_BYTES, TABLE_FORMATS, DumpFormat, open_input, truncated
from .problems import LineProblem
from .records import DumpRow, Lane, ReadOptions, RowBlock


class DumpReader:
    """Iterate the rows of one dump; :meth:`check` validates the columns before anything is written."""

    def __init__(self, lines: Iterator[PhysicalLine], options: ReadOptions, *, name: str) -> None:
        self.options = options
        self.name = name
        self.blank_lines = 0
        self.columns: list[str] = []  # the header (CSV/TSV) or the top-level members seen (JSON lines)
        self._lines = lines
        self._checked = False
        self._impl: Lane
        if options.fmt in (DumpFormat.CSV, DumpFormat.TSV):
            self._impl = Delimited(self)
        elif options.fmt is DumpFormat.JSONL:
            self._impl = JsonLines(self)
        else:
            self._impl = PlainLines(self)

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


class PlainLines(Lane):
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


@dataclass(frozen=True, slots=True)
class Record:
    """One record of a whole-record reading: its first and last physical line, and its fields (CSV/TSV:
    header -> field text) or object (JSON lines)."""

    line: int
    end_line: int
    values: dict[str, Any]


def _without_comments(lines: Iterator[PhysicalLine]) -> Iterator[PhysicalLine]:
    for line in lines:
        if not line.too_long and line.data.lstrip().startswith(b"#"):
            continue
        yield line


class RecordReader:
    """The records of one input table (CSV, TSV or JSON lines; gzip'd or not), opened lazily.

    Iterating yields :class:`Record` and :class:`LineProblem` values in line order; :meth:`check` (called
    by the first iteration) raises ``InputError`` for a file that cannot be read as asked, before
    anything is yielded. ``columns`` is the header (CSV/TSV) or the members seen (JSON lines) once checked;
    ``last_line`` the number of the last line read.
    """

    def __init__(self, path: Path, fmt: DumpFormat, *, name: str | None = None,
                 required: Sequence[tuple[str, str]] = (), max_line_bytes: int = DEFAULT_MAX_LINE_BYTES,
                 comments: bool = False) -> None:
        if fmt not in TABLE_FORMATS:
            raise InputError(f"{path}: {fmt.value} is not a table of records")
        self.path = path
        self.name = name if name is not None else str(path)
        self.options = ReadOptions(fmt=fmt, max_line_bytes=max_line_bytes, whole_records=True,
                                   required=tuple(required))
        self.comments = comments
        self._stream: Any = None
        self._reader: DumpReader | None = None
        self._physical: PhysicalLines | None = None
        self.last_line = 0

    @property
    def columns(self) -> list[str]:
        return self._reader.columns if self._reader is not None else []

    @property
    def lines_read(self) -> int:
        """Physical lines read so far (blank and comment lines included)."""
        return self._physical.number if self._physical is not None else 0

    @property
    def blank_lines(self) -> int:
        return self._reader.blank_lines if self._reader is not None else 0

    def check(self) -> None:
        if self._reader is None:
            self._stream = open_input(self.path)
            self._physical = physical_lines(self._stream, self.options.max_line_bytes)
            lines: Iterator[PhysicalLine] = self._physical
            if self.comments:
                lines = _without_comments(lines)
            self._reader = DumpReader(lines, self.options, name=self.name)
            try:
                self._reader.check()
            except InputError as exc:
                # A gzip cut before its first whole line reads as empty: say what is really wrong.
                cut = truncated(self._stream)
                self.close()
                if cut:
                    raise InputError(f"{self.name}: the gzip stream is truncated before its first whole line; "
                                     "nothing was read from it") from exc
                raise
            except BaseException:
                self.close()
                raise

    def __iter__(self) -> Iterator[Record | LineProblem]:
        self.check()
        assert self._reader is not None
        with closing(self):
            try:
                for row in self._reader:
                    self.last_line = row.end_line
                    if row.reject is not None:
                        yield row.reject
                    else:
                        yield Record(row.line_no, row.end_line, row.record)
                if truncated(self._stream):
                    raise InputError(f"{self.name}: the gzip stream is truncated: compressed data ends or "
                                     f"breaks after line {self.lines_read}; the lines before it were read")
            except InputError as exc:
                if str(exc).startswith(f"{self.name}: "):
                    raise
                # The stream broke after it was checked (a truncated gzip): say which file.
                raise InputError(f"{self.name}: {exc}") from exc

    def close(self) -> None:
        if self._stream is not None:
            self._stream.close()
            self._stream = None


def read_records(path: str | Path, fmt: DumpFormat, *, name: str | None = None,
                 required: Sequence[tuple[str, str]] = (), max_line_bytes: int = DEFAULT_MAX_LINE_BYTES,
                 comments: bool = False) -> RecordReader:
    """The records of ``path`` read as ``fmt`` (see :class:`RecordReader`).

    ``required`` lists (column or JSON path, the option that names it) pairs the file must have;
    ``comments`` skips lines starting with ``#`` (a manifest's notes); ``name`` is the file as problems
    name it (default: the path as given).
    """
    return RecordReader(Path(path), fmt, name=name, required=required, max_line_bytes=max_line_bytes,
                        comments=comments)


__all__ = ["DumpReader", "PlainLines", "Record", "RecordReader", "read_records"]
