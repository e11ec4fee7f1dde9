"""The byte layer of a dump: which format it is, gzip or not, its digest, and its physical lines.

Everything here streams: a file is read in bounded pieces whatever its size, and no line longer than
the limit is ever held in memory whole.
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

from ..errors import InputError

GZIP_MAGIC = b"\x1f\x8b"  # RFC 1952 §2.3.1: ID1 = 31, ID2 = 139
UTF8_BOM = b"\xef\xbb\xbf"
DEFAULT_MAX_LINE_BYTES = 1 << 20
_CHUNK = 1 << 20


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


def _is_gzip(path: Path) -> bool:
    with path.open("rb") as fh:
        return fh.read(2) == GZIP_MAGIC


def inspect_file(path: Path) -> FileFacts:
    """Hash the file and count its lines in one streaming pass.

    The digest has to be known before anything is written (it decides whether the file is new, resumed
    or already loaded), so this pass cannot be folded into the load itself.
    """
    try:
        if not path.is_file():
            raise InputError(f"{path}: no such file")
        gz = _is_gzip(path)
        digest = hashlib.sha256()
        size = 0
        lines = 0
        last = b"\n"
        inflate = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS) if gz else None
        with path.open("rb") as fh:
            while chunk := fh.read(_CHUNK):
                digest.update(chunk)
                size += len(chunk)
                text = chunk
                if inflate is not None:
                    text = inflate.decompress(chunk)
                    # Concatenated gzip members (RFC 1952 §2.2) are one file to gzip.open; follow suit.
                    while inflate.eof and inflate.unused_data:
                        rest = inflate.unused_data
                        inflate = zlib.decompressobj(wbits=16 + zlib.MAX_WBITS)
                        text += inflate.decompress(rest)
                if text:
                    lines += text.count(b"\n")
                    last = text[-1:]
        if inflate is not None and not inflate.eof:
            raise InputError(f"{path}: the gzip stream is truncated (it ends before its last member "
                             "does); nothing was loaded from it")
        if last != b"\n":
            lines += 1
    except zlib.error as exc:
        raise InputError(f"{path}: not a readable gzip file ({exc})") from exc
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    return FileFacts(path=path, sha256=digest.hexdigest(), size_bytes=size, gzipped=gz, lines=lines)


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


def physical_lines(stream: BinaryIO, max_line_bytes: int) -> Iterator[PhysicalLine]:
    """Every line of ``stream``, never holding more than ``max_line_bytes`` of one line.

    A longer line comes out once, flagged ``too_long`` with its first bytes; the rest of it is read and
    dropped, so the next line still starts at the right place and keeps its true line number.
    """
    reader: Any = stream if isinstance(stream, io.BufferedIOBase | gzip.GzipFile) else io.BufferedReader(stream)  # type: ignore[type-var]
    number = 0
    first = True
    try:
        while True:
            data = reader.readline(max_line_bytes + 1)
            if not data:
                return
            number += 1
            if first:
                first = False
                if data.startswith(UTF8_BOM):
                    # A byte order mark is how some spreadsheet exports say "UTF-8"; it is not content.
                    data = data[len(UTF8_BOM):]
            if data.endswith(b"\n"):
                if data.endswith(b"\r\n"):
                    yield PhysicalLine(number, data[:-2], b"\r\n")
                else:
                    yield PhysicalLine(number, data[:-1], b"\n")
                continue
            if len(data) <= max_line_bytes:
                yield PhysicalLine(number, data, b"")  # the last line, without a newline
                return
            prefix = data[:512]
            while True:
                rest = reader.readline(_CHUNK)
                if not rest or rest.endswith(b"\n"):
                    break
            yield PhysicalLine(number, prefix, b"", too_long=True)
    except (OSError, EOFError, zlib.error) as exc:
        # A truncated or corrupt gzip stream shows up only when it is read this far.
        raise InputError(f"cannot read past line {number}: {exc}") from exc


__all__ = [
    "DEFAULT_MAX_LINE_BYTES",
    "DumpFormat",
    "DumpStream",
    "FileFacts",
    "PhysicalLine",
    "guess_format",
    "inspect_file",
    "open_binary",
    "parse_format",
    "physical_lines",
]
