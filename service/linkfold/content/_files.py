"""Opening input files that may be gzip'd, and reading JSON lines from them with numbered problems."""

from __future__ import annotations

import gzip
import json
import zlib
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

from .._json import JSON_LIMITS, json_problem
from ..errors import InputError

_GZIP_MAGIC = b"\x1f\x8b"

#: What a broken or truncated gzip stream raises while it is read.
GZIP_ERRORS = (EOFError, zlib.error, gzip.BadGzipFile)


def open_maybe_gzip(path: Path) -> IO[bytes]:
    """Open ``path`` for reading bytes, decompressing it when it starts with the gzip magic number
    (RFC 1952 §2.3.1: ID1 ID2 = 0x1f 0x8b), whatever the file is called."""
    try:
        raw = path.open("rb")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open: {exc.strerror or exc}") from None
    if raw.peek(2)[:2] == _GZIP_MAGIC:
        raw.close()
        # gzip.open owns the file it opens, so closing the reader closes the file too.
        return gzip.open(path, "rb")  # type: ignore[return-value]
    return raw


class LineProblem(Exception):
    """One JSON line that is not an object: ``reason`` is a stable code, ``detail`` says more."""

    def __init__(self, reason: str, detail: str = "") -> None:
        super().__init__(detail)
        self.reason = reason
        self.detail = detail


def _parse(raw: bytes) -> dict[str, Any]:
    try:
        obj = json.loads(raw)
    except UnicodeDecodeError as exc:
        raise LineProblem("bad_json", f"not UTF-8: {exc.reason} at byte {exc.start}") from None
    except json.JSONDecodeError as exc:
        raise LineProblem("bad_json", f"{exc.msg} at column {exc.colno}") from None
    except JSON_LIMITS as exc:  # too deep, a number too long: this line's problem, not the file's
        raise LineProblem("bad_json", json_problem(exc)) from None
    if not isinstance(obj, dict):
        raise LineProblem("not_object", f"a JSON {type(obj).__name__}, not an object")
    return obj


def json_objects(path: Path, *, line_cap: int) -> Iterator[tuple[int, dict[str, Any] | LineProblem]]:
    """(line number, object or problem) for every non-blank line of a JSON-lines file, gzip'd or not.

    A line longer than ``line_cap`` bytes is skipped unread (``too_large``) so that one runaway line
    cannot exhaust memory. Raises :class:`InputError` when the file cannot be opened, when its compressed
    data breaks, and when its first non-blank line is not even meant as a JSON object (a CSV, a JSON
    array, HTML): one problem per line would bury that.
    """
    with open_maybe_gzip(path) as fh:
        number = 0
        first = True
        while True:
            try:
                raw = fh.readline(line_cap + 1)
                if raw and len(raw) > line_cap and not raw.endswith(b"\n"):
                    while True:
                        more = fh.readline(1 << 20)
                        if not more or more.endswith(b"\n"):
                            break
                    number += 1
                    first = False
                    yield number, LineProblem("too_large", f"line longer than {line_cap:,} bytes")
                    continue
            except GZIP_ERRORS as exc:
                raise InputError(f"{path}: compressed data ends or breaks after line {number}: {exc}") from None
            if not raw:
                return
            number += 1
            if not raw.strip():
                continue
            try:
                obj: dict[str, Any] | LineProblem = _parse(raw)
            except LineProblem as bad:
                if first and not raw.lstrip(b"\xef\xbb\xbf \t").startswith(b"{"):
                    raise InputError(f"{path}:{number}: not a JSON-lines file: {bad.detail}") from None
                obj = bad
            first = False
            yield number, obj
