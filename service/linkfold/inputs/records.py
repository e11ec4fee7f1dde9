"""The shapes a reader hands on: a row reduced to what the caller keeps, or a block of them as columns.

:class:`DumpRow` is one row (or one record that could not be read, with its :class:`LineProblem`);
:class:`RowBlock` is a run of ordinary lines as columns, how the fast lanes of the CSV/TSV and
JSON-lines readers hand on most of a large file (a row object costs more than the reading of most rows).
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any, Protocol

from .lines import PhysicalLine
from .opening import DumpFormat
from .problems import LineProblem, Reason, excerpt, utf8_problem


class _Missing:
    __slots__ = ()

    def __repr__(self) -> str:
        return "MISSING"


MISSING: Any = _Missing()  # a column or member that is absent, as opposed to present and empty
@dataclass(slots=True)
class DumpRow:
    """One row of a dump, reduced to what the registry keeps."""

    line_no: int  # first physical line of the row, 1-based
    end_line: int  # last physical line (a quoted CSV field can span lines)
    urls: list[Any] = field(default_factory=list)  # values reached by the URL column(s), in order
    key: Any = MISSING
    time: Any = MISSING
    reject: LineProblem | None = None  # set: the row as a whole could not be read
    unit: Any = MISSING  # the unit column's value, raw: the loader keeps only its pseudonym
    record: Any = None  # whole-record reading (ReadOptions.whole_records): the fields or the object


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
    #: Read whole records (``DumpRow.record``: a CSV/TSV row as header -> field, a JSON-lines object)
    #: line by line, for readers that check every field themselves; ``url_columns`` and the other
    #: columns above do not apply then.
    whole_records: bool = False
    #: Columns (JSON-lines paths) a whole-record file must have, each with the option that names it:
    #: refused before the first row, as a missing URL column is.
    required: tuple[tuple[str, str], ...] = ()




class ReaderState(Protocol):
    """What a lane sees of the reader it works for (``reading.DumpReader``)."""

    options: ReadOptions
    name: str
    blank_lines: int
    columns: list[str]
    _lines: Iterator[PhysicalLine]


def too_long(opt: ReadOptions) -> str:
    return f"line is longer than the limit of {opt.max_line_bytes:,} bytes (setting max_line_bytes)"


def names_list(names: list[str], limit: int = 30) -> str:
    """Column or member names for a message, at most ``limit`` of them."""
    if not names:
        return "(none)"
    shown = ", ".join(repr(n) for n in names[:limit])
    return shown + (f" … ({len(names) - limit} more)" if len(names) > limit else "")


class Lane:
    """What a format's reader shares: the options, and the screening of lines that cannot be parsed."""

    def __init__(self, reader: ReaderState) -> None:
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
                yield line, self.reject(n, Reason.LINE_TOO_LONG, too_long(self.opt), line.data)
            elif not line.data.strip():
                self.r.blank_lines += 1
            else:
                problem = utf8_problem(line.data)
                yield line, (self.reject(n, Reason.INVALID_UTF8, problem, line.data) if problem else None)

    def reject(self, line_no: int, reason: str, message: str, unparsed: bytes | None = None,
               end_line: int | None = None) -> DumpRow:
        """A row that is a problem as a whole; ``unparsed`` is the line's text when it was never parsed
        (the excerpt's source; problems.UNPARSED)."""
        return DumpRow(line_no, end_line or line_no,
                       reject=LineProblem(self.r.name, line_no, reason, message,
                                          excerpt(unparsed) if unparsed is not None else None))


__all__ = ["MISSING", "DumpRow", "Lane", "ReadOptions", "ReaderState", "RowBlock", "names_list", "too_long"]
