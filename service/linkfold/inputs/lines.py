"""The physical lines of an input stream, read a bounded piece at a time.

A line longer than the limit is never held whole beyond its piece: it comes out once, flagged, with its
first bytes, and the rest of it is read and dropped, so the next line keeps its true number.
"""

from __future__ import annotations

import gzip
import io
import zlib
from dataclasses import dataclass
from typing import Any, BinaryIO

from ..errors import InputError
from .opening import CHUNK_BYTES, UTF8_BOM

_CHUNK = CHUNK_BYTES


@dataclass(slots=True)
class PhysicalLine:
    """One line of the file as bytes, without its terminator; ``too_long`` lines carry a prefix only."""

    number: int  # 1-based
    data: bytes
    terminator: bytes  # b"\n", b"\r\n" or b"" (last line without newline, or a cut-off long line)
    too_long: bool = False


class PhysicalLines:
    """Every line of a stream as a :class:`PhysicalLine`. A line longer than ``max_line_bytes`` comes out
    once, flagged ``too_long`` with its first bytes; the rest of it is read and dropped, so the next line
    still starts at the right place and keeps its true line number.

    The stream is read a piece at a time: ``chunk_bytes``, completed to its last line end but by no more
    than ``max_line_bytes``, so memory is bounded by the two whatever a line's length. Besides one line
    at a time, a reader's fast lane can take the rest of the piece at once as text (:meth:`plain_run`),
    when every line in it is ordinary: a line object costs more than the reading of most rows.
    """

    def __init__(self, stream: BinaryIO, max_line_bytes: int, chunk_bytes: int = _CHUNK) -> None:
        self._stream: Any = (stream if isinstance(stream, io.BufferedIOBase | gzip.GzipFile)
                             else io.BufferedReader(stream))  # type: ignore[arg-type]
        self._max = max_line_bytes
        self._chunk = max(chunk_bytes, 1)
        self.number = 0  # lines handed out so far (the number of the last one)
        self._items: list[Any] = []  # the piece: bytes (a line without its "\n") or a ready PhysicalLine
        self._i = 0  # next item to hand out
        self._clean = 0  # items[:_clean] are all bytes (no over-long or unterminated line among them)
        self._texts: list[str] | None = None  # items[:_clean] as text, once asked for (plain_run)
        self._texts_for: bytes | None = None  # the quote byte _texts was checked against
        self._checked = False  # whether _texts says something about this piece (None: not plain)
        self._eof = False
        self._first = True

    def __iter__(self) -> PhysicalLines:
        return self

    def __next__(self) -> PhysicalLine:
        if self._i >= len(self._items) and not self._fill():
            raise StopIteration
        item = self._items[self._i]
        self._i += 1
        self.number += 1
        if type(item) is bytes:
            if item.endswith(b"\r"):
                return PhysicalLine(self.number, item[:-1], b"\r\n")
            return PhysicalLine(self.number, item, b"\n")
        item.number = self.number
        return item

    def plain_run(self, quote: bytes | None) -> tuple[list[str], int] | None:
        """The rest of the current piece as text lines and the index of the next one in that list (its line
        number is ``number + 1``), if all of it is plain: complete lines within the limit, valid UTF-8, no NUL,
        no CR but in a CRLF line end, and no ``quote`` byte. Else None (read it line by line). Hand out what
        was used with :meth:`skip`."""
        if self._i >= len(self._items) and not self._fill():
            return None
        if self._i >= self._clean:
            return None
        if not self._checked or self._texts_for != quote:
            self._texts = self._plain_texts(quote)
            self._texts_for, self._checked = quote, True
        if self._texts is None:
            return None
        return self._texts, self._i

    def skip(self, count: int) -> None:
        """Hand out ``count`` lines of the current piece's plain run (see :meth:`plain_run`)."""
        self._i += count
        self.number += count

    def _plain_texts(self, quote: bytes | None) -> list[str] | None:
        region = b"\n".join(self._items[:self._clean])
        if b"\x00" in region or (quote is not None and quote in region):
            return None
        crs = region.count(b"\r")
        # With CRs, only CRLF files: every line ends in CR and no other CR appears.
        if crs and (crs != self._clean or region.count(b"\r\n") != crs - 1 or not region.endswith(b"\r")):
            return None
        try:
            text = region.decode("utf-8")
        except UnicodeDecodeError:
            return None
        if crs:
            return text[:-1].split("\r\n")
        return text.split("\n")

    def _fill(self) -> bool:
        """Read the next piece; False at the end of the stream."""
        self._items, self._i, self._clean, self._texts, self._checked = [], 0, 0, None, False
        while not self._items:
            if self._eof:
                return False
            try:
                self._read_piece()
            except (OSError, EOFError, zlib.error) as exc:
                # A truncated or corrupt gzip stream shows up only when it is read this far.
                raise InputError(f"cannot read past line {self.number}: {exc}") from exc
        return True

    def _read_piece(self) -> None:
        stream, limit = self._stream, self._max
        if self._first:
            self._first = False
            data = stream.read(max(self._chunk, len(UTF8_BOM)))
            if data.startswith(UTF8_BOM):
                # A byte order mark is how some spreadsheet exports say "UTF-8"; it is not content.
                data = data[len(UTF8_BOM):] or stream.read(self._chunk)
        else:
            data = stream.read(self._chunk)
        if not data:
            self._eof = True
            return
        if not data.endswith(b"\n"):
            # Complete the piece's last line, reading no more of it than the limit allows.
            budget = limit + 1 - (len(data) - data.rfind(b"\n") - 1)
            if budget > 0:
                data += stream.readline(budget)
        items: list[Any] = data.split(b"\n")
        tail = items.pop()  # b"" when the piece ends with a line end
        clean = len(items)
        if len(data) > limit:
            for k, line in enumerate(items):
                if len(line) > limit:
                    items[k] = PhysicalLine(0, line[:limit + 1][:512], b"", too_long=True)
                    clean = min(clean, k)
        if tail:
            if len(tail) > limit:
                # An over-long line: keep its first bytes, read the rest and drop it.
                while True:
                    rest = stream.readline(_CHUNK)
                    if not rest or rest.endswith(b"\n"):
                        break
                items.append(PhysicalLine(0, tail[:limit + 1][:512], b"", too_long=True))
            else:
                items.append(PhysicalLine(0, tail, b""))  # the last line, without a line end
                self._eof = True
        self._items, self._clean = items, clean


def physical_lines(stream: BinaryIO, max_line_bytes: int, chunk_bytes: int = _CHUNK) -> PhysicalLines:
    """The lines of ``stream`` (see :class:`PhysicalLines`)."""
    return PhysicalLines(stream, max_line_bytes, chunk_bytes)



__all__ = ["PhysicalLine", "PhysicalLines", "physical_lines"]
