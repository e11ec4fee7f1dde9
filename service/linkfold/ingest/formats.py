"""The byte layer of a dump: which format it is, gzip or not, its digest, and its physical lines.

Everything here streams: a file is read in bounded pieces whatever its size (a piece and at most the line
limit more), and a line longer than the limit is never held whole beyond its piece.
"""

from __future__ import annotations

import enum
import gzip
import hashlib
import io
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

from ..errors import DumpFormatError, InputError

GZIP_MAGIC = b"\x1f\x8b"  # RFC 1952 §2.3.1: ID1 = 31, ID2 = 139
UTF8_BOM = b"\xef\xbb\xbf"
DEFAULT_MAX_LINE_BYTES = 1 << 20
_CHUNK = 1 << 20
_SNIFF_BYTES = 4096  # of the decompressed start: enough to tell UTF-16 from UTF-8 text

# Byte order marks of the encodings a dump must not be read as UTF-8 in (Unicode §23.8, Table 23-5; the
# UTF-32 marks first, as UTF-32LE's begins with UTF-16LE's).
_FOREIGN_BOMS = (
    (b"\xff\xfe\x00\x00", "UTF-32 (little-endian)"),
    (b"\x00\x00\xfe\xff", "UTF-32 (big-endian)"),
    (b"\xff\xfe", "UTF-16 (little-endian)"),
    (b"\xfe\xff", "UTF-16 (big-endian)"),
)


class DumpFormat(enum.StrEnum):
    CSV = "csv"
    TSV = "tsv"
    JSONL = "jsonl"
    LINES = "lines"


# Suffixes we recognise, after an optional ".gz". ".json" is left out on purpose: a file so named is
# usually one JSON document (an array), not one object a line, and guessing wrong would reject every row.
_SUFFIXES = {
    ".csv": DumpFormat.CSV,
    ".tsv": DumpFormat.TSV,
    ".tab": DumpFormat.TSV,
    ".jsonl": DumpFormat.JSONL,
    ".ndjson": DumpFormat.JSONL,
    ".txt": DumpFormat.LINES,
    ".urls": DumpFormat.LINES,
    ".list": DumpFormat.LINES,
}


def guess_format(path: Path) -> DumpFormat:
    """The format a file's name announces; ``InputError`` when it announces none."""
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    for suffix, fmt in _SUFFIXES.items():
        if name.endswith(suffix):
            return fmt
    known = ", ".join(sorted(_SUFFIXES))
    raise InputError(f"{path}: cannot tell the format from the name (known endings: {known}, "
                     "each optionally followed by .gz)", hint="pass --format csv|tsv|jsonl|lines")


def parse_format(text: str | DumpFormat | None, path: Path) -> DumpFormat:
    if text is None:
        return guess_format(path)
    try:
        return DumpFormat(str(text).lower())
    except ValueError:
        raise InputError(f"unknown dump format {text!r}: use one of "
                         f"{', '.join(f.value for f in DumpFormat)}") from None


@dataclass(frozen=True)
class FileFacts:
    """What the pre-pass learns: provenance digest, size, compression and an estimate of the work."""

    path: Path
    sha256: str  # of the bytes on disk, compressed or not: that is the file the lab holds
    size_bytes: int
    gzipped: bool
    lines: int  # newline count of the decompressed text (+1 if the last line has none): the progress total
    empty: bool = False  # nothing but white space (and a UTF-8 byte order mark) once decompressed


def _is_gzip(path: Path) -> bool:
    with path.open("rb") as fh:
        return fh.read(2) == GZIP_MAGIC


def foreign_encoding(head: bytes) -> str | None:
    """The encoding the start of a dump is in when it is plainly not UTF-8 text, else None.

    A byte order mark names UTF-16 or UTF-32. Without one, text in those encodings shows as NUL bytes at
    every second (or in three of four) positions, as RFC 4627 §3 used to tell them apart: ASCII
    characters in UTF-16LE are ``X 00``, in UTF-16BE ``00 X``. Other NUL-heavy starts are binary data.
    A stray NUL here and there is left to the line checks (a reject of that line, not of the file).
    """
    for bom, name in _FOREIGN_BOMS:
        if head.startswith(bom):
            return f"{name} text (it starts with that byte order mark)"
    sample = head[:_SNIFF_BYTES]
    if len(sample) < 2 or sample.count(0) * 4 < len(sample):
        return None
    even, odd = sample[0::2], sample[1::2]
    if odd.count(0) * 10 >= len(odd) * 9 and even.count(0) * 2 < len(even):
        return "UTF-16 (little-endian) text without a byte order mark (every second byte is NUL)"
    if even.count(0) * 10 >= len(even) * 9 and odd.count(0) * 2 < len(odd):
        return "UTF-16 (big-endian) text without a byte order mark (every second byte is NUL)"
    return "binary data, not text (a quarter or more of its first bytes are NUL)"


def _refuse_encoding(path: Path, head: bytes) -> None:
    found = foreign_encoding(head)
    if found is not None:
        raise DumpFormatError(f"{path}:1: the file is {found}; linkfold reads UTF-8 (or ASCII) dumps, "
                              "nothing was loaded from it",
                              hint="convert it first, e.g. iconv -f UTF-16 -t UTF-8 FILE > FILE.utf8"
                              if "UTF-" in found else None)


class _Inflater:
    """A gzip file's members decompressed a bounded piece at a time.

    ``zlib``'s ``decompress(data)`` without a bound returns all the data inflates to at once: a 1 MiB piece
    of a gzip of zeros is a gigabyte. With ``max_length`` it returns at most that and keeps the rest of
    the input in ``unconsumed_tail``. Concatenated members (RFC 1952 §2.2) are one file to ``gzip.open``;
    so they are here.
    """

    def __init__(self, piece: int = _CHUNK) -> None:
        self._z = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS)
        self._piece = piece

    def feed(self, data: bytes) -> Iterator[bytes]:
        while data:
            if self._z.eof:
                # Zero bytes after a member are padding, as gzip.open reads them (its _read_eof).
                data = data.lstrip(b"\x00")
                if not data:
                    return
                self._z = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS)  # the next member
            z = self._z
            out = z.decompress(data, self._piece)
            if out:
                yield out
            data = z.unused_data if z.eof else z.unconsumed_tail

    @property
    def complete(self) -> bool:
        """Whether the last member read so far ended (False: the stream is truncated)."""
        return self._z.eof


def inspect_file(path: Path) -> FileFacts:
    """Hash the file and count its lines in one streaming pass, in bounded memory whatever it inflates to.

    The digest has to be known before anything is written (it decides whether the file is new, resumed
    or already loaded), so this pass cannot be folded into the load itself. The same pass refuses a file
    in another encoding than UTF-8 (:func:`foreign_encoding`) and notes one with no content at all.
    """
    try:
        if not path.is_file():
            raise InputError(f"{path}: no such file")
        gz = _is_gzip(path)
        digest = hashlib.sha256()
        size = 0
        lines = 0
        last = b"\n"
        head = b""  # the first decompressed bytes, for the encoding check
        blank = True
        inflate = _Inflater() if gz else None
        with path.open("rb") as fh:
            while chunk := fh.read(_CHUNK):
                digest.update(chunk)
                size += len(chunk)
                for text in inflate.feed(chunk) if inflate is not None else (chunk,):
                    if len(head) < _SNIFF_BYTES:
                        at = len(head)
                        head += text[:_SNIFF_BYTES - at]
                        if len(head) >= _SNIFF_BYTES:
                            _refuse_encoding(path, head)  # now, not after a large file was read to its end
                        if at < len(UTF8_BOM) and head.startswith(UTF8_BOM):
                            text = text[len(UTF8_BOM) - at:]
                    if blank and text:
                        blank = text.isspace()
                    lines += text.count(b"\n")
                    last = text[-1:] or last
        if inflate is not None and not inflate.complete:
            raise InputError(f"{path}: the gzip stream is truncated (it ends before its last member "
                             "does); nothing was loaded from it")
        _refuse_encoding(path, head)
        if last != b"\n":
            lines += 1
    except zlib.error as exc:
        raise InputError(f"{path}: not a readable gzip file ({exc})") from exc
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    return FileFacts(path=path, sha256=digest.hexdigest(), size_bytes=size, gzipped=gz, lines=lines,
                     empty=blank)


class _HashingFile(io.RawIOBase):
    """The file's bytes as read, hashed on the way, so a load can prove it read the file it hashed."""

    def __init__(self, path: Path) -> None:
        self._fh = path.open("rb", buffering=0)
        self.digest = hashlib.sha256()

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[override]
        n = self._fh.readinto(buffer)
        if n:
            self.digest.update(memoryview(buffer)[:n])
        return n or 0

    def finish_digest(self) -> str:
        """Hash whatever was not read yet (a reader may stop before the end) and return the hex digest."""
        while chunk := self._fh.read(_CHUNK):
            self.digest.update(chunk)
        return self.digest.hexdigest()

    def close(self) -> None:
        self._fh.close()
        super().close()


class DumpStream:
    """The decompressed bytes of a dump (``binary``) and the digest of the file bytes read (``sha256()``)."""

    def __init__(self, path: Path, gzipped: bool) -> None:
        self._raw = _HashingFile(path)
        buffered = io.BufferedReader(self._raw, buffer_size=_CHUNK)
        self.binary: BinaryIO = gzip.GzipFile(fileobj=buffered, mode="rb") if gzipped else buffered  # type: ignore[assignment]
        self._buffered = buffered

    def sha256(self) -> str:
        # Bytes the BufferedReader holds were already hashed when they were read into it.
        return self._raw.finish_digest()

    def close(self) -> None:
        self.binary.close()
        self._buffered.close()


def open_binary(path: Path, gzipped: bool) -> DumpStream:
    """Open a dump for reading; close it with ``close()`` (or ``contextlib.closing``)."""
    try:
        return DumpStream(path, gzipped)
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from exc


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


__all__ = [
    "DEFAULT_MAX_LINE_BYTES",
    "DumpFormat",
    "DumpStream",
    "FileFacts",
    "PhysicalLine",
    "PhysicalLines",
    "foreign_encoding",
    "guess_format",
    "inspect_file",
    "open_binary",
    "parse_format",
    "physical_lines",
]
