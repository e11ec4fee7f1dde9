"""Opening an input file: which format it is, gzip or not, its encoding, its digest.

Everything here streams: a file is read in bounded pieces whatever its size or what it inflates to. A
gzip'd file is recognised by its magic number (RFC 1952 §2.3.1), whatever it is called; a file in
another encoding than UTF-8 (UTF-16 or UTF-32 text, binary data) is refused as a whole before any of it
is read as lines (:func:`foreign_encoding`), so that one wrong export never becomes a problem per line.
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
#: The piece a stream is read in (and the bound on what one read inflates to).
CHUNK_BYTES = _CHUNK
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
    """The formats a dump file can be read in (``--format``; guessed from the file's name otherwise)."""

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


#: Formats of tables with a header (or one object a line): what a reader of named columns can read.
TABLE_FORMATS = (DumpFormat.CSV, DumpFormat.TSV, DumpFormat.JSONL)


def guess_format(path: Path, allowed: tuple[DumpFormat, ...] = tuple(DumpFormat)) -> DumpFormat:
    """The format a file's name announces; ``InputError`` when it announces none of ``allowed``."""
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    for suffix, fmt in _SUFFIXES.items():
        if name.endswith(suffix) and fmt in allowed:
            return fmt
    known = ", ".join(sorted(s for s, f in _SUFFIXES.items() if f in allowed))
    raise InputError(f"{path}: cannot tell the format from the name (known endings: {known}, "
                     "each optionally followed by .gz)",
                     hint=f"pass --format {'|'.join(f.value for f in allowed)}")


def parse_format(text: str | DumpFormat | None, path: Path,
                 allowed: tuple[DumpFormat, ...] = tuple(DumpFormat)) -> DumpFormat:
    """``text`` as a format (any case), or the one ``path``'s name announces when ``text`` is None."""
    if text is None:
        return guess_format(path, allowed)
    try:
        fmt = DumpFormat(str(text).lower())
    except ValueError:
        fmt = None
    if fmt is None or fmt not in allowed:
        raise InputError(f"unknown input format {text!r}: use one of "
                         f"{', '.join(f.value for f in allowed)}")
    return fmt


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


def _open_raw(path: Path) -> BinaryIO:
    try:
        return path.open("rb")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from None


class _InflatingFile(io.RawIOBase):
    """A gzip file's decompressed bytes, through :class:`_Inflater` (bounded, members, padding).

    Unlike ``gzip.GzipFile`` it hands out everything that inflated before a truncation, then ends as if
    the stream were complete and sets ``truncated``: the reader of its lines reports every whole line and
    then raises (``reading.RecordReader``). A corrupt stream raises ``zlib.error`` where it breaks.
    """

    def __init__(self, path: Path) -> None:
        self._fh = _open_raw(path)
        self._inflater = _Inflater()
        self._outputs: Iterator[bytes] = iter(())
        self._pending = memoryview(b"")
        # Bytes after the last line end inflated so far, held back so that a cut-off last line is never
        # handed out as if it were whole (bounded: a longer run without a line end goes out anyway).
        self._tail = b""
        self._done = False
        self.truncated = False

    def readable(self) -> bool:
        return True

    def _next_output(self) -> bytes | None:
        while True:
            out = next(self._outputs, None)
            if out is not None:
                data = self._tail + out
                cut = data.rfind(b"\n") + 1
                if len(data) - cut > _CHUNK:
                    cut = len(data)
                self._tail = data[cut:]
                if cut:
                    return data[:cut]
                continue
            if self._done:
                return None
            data = self._fh.read(_CHUNK)
            if not data:
                self._done = True
                self.truncated = not self._inflater.complete
                tail, self._tail = self._tail, b""
                return tail if tail and not self.truncated else None
            self._outputs = self._inflater.feed(data)

    def readinto(self, buffer) -> int:  # type: ignore[override]
        if not self._pending:
            out = self._next_output()
            if out is None:
                return 0
            self._pending = memoryview(out)
        n = min(len(buffer), len(self._pending))
        buffer[:n] = self._pending[:n]
        self._pending = self._pending[n:]
        return n

    def close(self) -> None:
        self._fh.close()
        super().close()


def truncated(stream: BinaryIO) -> bool:
    """Whether ``stream`` (from :func:`open_input`) was a gzip stream that ended before its last member."""
    raw = getattr(stream, "raw", None)
    return bool(getattr(raw, "truncated", False))


def open_input(path: Path, *, text: bool = True) -> BinaryIO:
    """Open ``path`` for reading its bytes, decompressed when it starts with the gzip magic number.

    With ``text`` (an input table, JSON lines, a manifest), a file in another encoding than UTF-8 is
    refused first, as :func:`inspect_file` refuses it (``DumpFormatError``). Without it (a page body,
    whose charset is the page's business) the bytes are handed on as they are. A corrupt gzip stream
    raises ``zlib.error`` where it breaks (:data:`GZIP_ERRORS`; reading it through
    :class:`~linkfold.inputs.lines.PhysicalLines` turns that into ``InputError``); a truncated one ends
    early, everything before the cut handed out, and :func:`truncated` says so. Inflating is bounded as in
    :func:`inspect_file`: no read returns more than a piece, whatever the data inflates to.
    """
    with _open_raw(path) as probe:
        gz = probe.read(2) == GZIP_MAGIC
    # The buffered reader owns the raw file, so closing the stream closes the file too.
    stream: Any = io.BufferedReader(_InflatingFile(path), buffer_size=_CHUNK) if gz else _open_raw(path)
    if text:
        try:
            _refuse_encoding(path, stream.peek(_SNIFF_BYTES)[:_SNIFF_BYTES])
        except GZIP_ERRORS as exc:
            stream.close()
            raise InputError(f"{path}: not a readable gzip file ({exc})") from None
        except BaseException:
            stream.close()
            raise
    return stream


#: What a broken or truncated gzip stream raises while it is read.
GZIP_ERRORS = (EOFError, zlib.error, gzip.BadGzipFile)


__all__ = [
    "CHUNK_BYTES",
    "DEFAULT_MAX_LINE_BYTES",
    "GZIP_ERRORS",
    "GZIP_MAGIC",
    "TABLE_FORMATS",
    "DumpFormat",
    "DumpStream",
    "FileFacts",
    "foreign_encoding",
    "guess_format",
    "inspect_file",
    "open_binary",
    "open_input",
    "parse_format",
    "truncated",
]
