"""JSON lines: one JSON object a line (RFC 8259 text per line, as JSON Lines / NDJSON practise it).

Values are reached by dotted paths (:mod:`.paths`); a line that is not JSON, or JSON past the parser's
limits (``linkfold._json``), is a ``bad_json`` problem of its line, never the end of the file.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator
from typing import Any

from .._json import JSON_LIMITS, json_problem, past_a_limit
from ..errors import DumpFormatError, InputError, MissingColumnError
from .lines import PhysicalLine, PhysicalLines
from .paths import JsonPath, parse_path, resolve
from .problems import Reason
from .records import MISSING, DumpRow, Lane, ReaderState, RowBlock, names_list

JSONL_PEEK_LINES = 1000
JSONL_PEEK_BYTES = 8 << 20  # and at most this much of them: the peeked lines are held until replayed
RUN_MIN, RUN_MAX = 16, 8192  # lines a block lane reads at once


class JsonLines(Lane):
    """One JSON object a line (RFC 8259 text per line, as JSON Lines / NDJSON practise it)."""

    fast_lane = True  # off only in tests, which compare the block lane with the line-by-line one

    def __init__(self, reader: ReaderState) -> None:
        super().__init__(reader)
        if self.opt.whole_records:
            self.url_paths = [parse_path(p) for p, _option in self.opt.required]
        else:
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
        reached_each = [0] * len(self.url_paths)
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
                for k, path in enumerate(self.url_paths):
                    got = resolve(path, record)
                    if got.values or (not got.missing and not got.dropped):
                        reached += 1
                        reached_each[k] += 1
                    elif first_miss is None:
                        first_miss = got.missing or f"no element has the member at {path.text!r}"
                if self.unit_path is not None and resolve(self.unit_path, record).values:
                    units += 1
            if len(self.peeked) >= JSONL_PEEK_LINES or held >= JSONL_PEEK_BYTES:
                break
        self.r.columns = list(members)
        if nonblank and not objects and not unholdable:
            raise DumpFormatError(f"{self.r.name}: none of the first {nonblank} non-blank lines is a JSON "
                                  "object; is this JSON lines?",
                                  hint=None if self.opt.whole_records else "pass --format to say what it is")
        if self.opt.whole_records:
            for (column, option), count in zip(self.opt.required, reached_each, strict=True):
                if objects and not count:
                    raise MissingColumnError(f"{self.r.name}: no record among the first {objects} has "
                                             f"{column!r} for {option}; top-level members found: "
                                             f"{names_list(self.r.columns)}", hint=f"pass {option} PATH")
            return
        if objects and not reached:
            paths = ", ".join(repr(p.text) for p in self.url_paths)
            raise MissingColumnError(f"{self.r.name}: no record among the first {objects} has {paths} "
                                     f"({first_miss}); top-level members found: {names_list(self.r.columns)}",
                                     hint="pass --url-column PATH, e.g. links.*.url")
        if objects and self.unit_path is not None and not units:
            # A mistyped unit path would load every row without its unit: refuse it, as a missing column.
            raise MissingColumnError(f"{self.r.name}: no record among the first {objects} has "
                                     f"{self.unit_path.text!r} for --unit-column; top-level members found: "
                                     f"{names_list(self.r.columns)}")

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
        fast = self.fast_lane and not self.opt.whole_records
        source = lines if fast and len(self.url_paths) == 1 and isinstance(lines, PhysicalLines) else None
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
        whole = self.opt.whole_records
        for line, reject in self._screened(lines):
            if reject is not None:
                yield reject
                continue
            n = line.number
            try:
                record = json.loads(line.data.decode("utf-8"))
            except JSON_LIMITS as exc:
                yield self.reject(n, Reason.BAD_JSON, json_problem(exc), line.data)
                continue
            if not isinstance(record, dict):
                # Parsed, so no excerpt (module doc): its type is all the lab needs to find it.
                yield self.reject(n, Reason.BAD_JSON, f"the line is a JSON {type(record).__name__}, not an object")
                continue
            if whole:
                yield DumpRow(n, n, record=record)
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


__all__ = ["JsonLines"]
