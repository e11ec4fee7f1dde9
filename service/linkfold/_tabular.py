"""Writing tables out: one text form of a CSV cell, and a file that appears only when it is complete.

Shared by every command that writes rows to a file (export, exposure, network, outlets), so a value reads
the same in each of their CSV files and none leaves a half-written file behind.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime
from pathlib import Path
from typing import IO, Any

from .errors import InputError


def csv_cell(value: Any) -> Any:
    """A value as a CSV cell: empty for NULL, ``true``/``false``, ISO 8601 times, JSON for lists and
    objects (outlet attributes); anything else as the csv module writes it (a float as its shortest
    round-tripping text)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, datetime):
        return value.isoformat()
    if isinstance(value, dict | list):
        return json.dumps(value, ensure_ascii=False)
    return value


@contextmanager
def atomic_path(out: Path) -> Iterator[Path]:
    """A temporary path beside ``out`` to write to; renamed to ``out`` when the block ends normally and
    removed when it fails, so a reader never sees a partial file and nothing of the user's is lost."""
    out = out.expanduser()
    if not out.parent.is_dir():
        raise InputError(f"{out}: folder {out.parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".part", dir=out.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, out)
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise


def write_out(out: str | Path | IO[str] | None, *, text: Callable[[IO[str]], int],
              binary: Callable[[Path], int] | None = None, newline: str = "") -> tuple[int, str | None]:
    """Write a table to ``out`` and return (rows written, the path written or None).

    A path is written beside itself and renamed when complete (:func:`atomic_path`): by ``binary`` when
    given (a Parquet writer opens the file itself), else by ``text`` on the file opened as UTF-8. An open
    text stream, or ``None`` for stdout, gets ``text`` and is flushed. One place for the rule every table
    writer follows: a reader never sees half a file.
    """
    if isinstance(out, str | Path):
        path = Path(out)
        with atomic_path(path) as tmp:
            if binary is not None:
                n = binary(tmp)
            else:
                with tmp.open("w", encoding="utf-8", newline=newline) as fh:
                    n = text(fh)
        return n, str(path)
    stream = out if out is not None else sys.stdout
    n = text(stream)
    stream.flush()
    return n, None
