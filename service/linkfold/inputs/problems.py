"""One style for a problem with one line of input: the same dataclass and reason codes for every reader.

A reader never stops at a bad line: it hands on a :class:`LineProblem` (file, line, reason code, message)
and goes on in line order. The caller stores it (``ingest``: the ``rejects`` table) or counts and prints
it (redirect import, page import, documents load: the run's summary, and ``Context.problem`` on stderr
even under ``-q``), always in the same shape: ``FILE:LINE: reason: message``.

An excerpt of the line is kept only when the line could not be parsed at all (:data:`UNPARSED`: broken
CSV quoting, bytes that are not UTF-8, a line over the length limit, text that is not JSON): a record
that was parsed is found again by its line number, and its fields are not ours to keep (they can be
personal data; docs/ingest.md, "What is stored"). :class:`LineProblem` refuses an excerpt for any other
reason.
"""

from __future__ import annotations

from dataclasses import dataclass


class Reason:
    """Stable reason codes of the readers (stored in ``rejects.reason`` by ingest, counted in every
    summary; documented in docs/ingest.md, "Reason codes"). A caller adds its own codes for what it
    checks in a parsed record (a URL the canonicaliser refuses, a page body over the cap)."""

    MALFORMED_CSV = "malformed_csv"  # CSV quoting that does not parse (RFC 4180)
    FIELD_COUNT = "field_count"  # more fields than the header names
    MISSING_COLUMN = "missing_column"  # fewer fields than the header names
    INVALID_UTF8 = "invalid_utf8"
    LINE_TOO_LONG = "line_too_long"
    BAD_JSON = "bad_json"  # not JSON (excerpt kept), or JSON that is not an object (no excerpt)
    NO_URL = "no_url"  # no longer written (a row without a URL is counted); older loads hold it
    NOT_TEXT = "not_text"  # a JSON number, object or array where text was expected
    CONTROL_CHARS = "control_chars"
    MISSING_KEY = "missing_key"
    BAD_KEY = "bad_key"
    MISSING_TIME = "missing_time"
    BAD_TIME = "bad_time"  # not a time by linkfold.inputs.times (or, for a publication date, a future one)
    MISSING_UNIT = "missing_unit"
    BAD_UNIT = "bad_unit"


#: The reasons of a line that was never parsed: the only ones whose problem may carry an excerpt.
UNPARSED = frozenset({Reason.MALFORMED_CSV, Reason.INVALID_UTF8, Reason.LINE_TOO_LONG, Reason.BAD_JSON})

EXCERPT_CHARS = 200


@dataclass(frozen=True, slots=True)
class LineProblem:
    """A problem with one line (or record) of an input file. ``line`` is 1-based (the first physical line
    of a record that spans lines; a WARC record's number), None for the file as a whole."""

    file: str
    line: int | None
    reason: str
    message: str = ""
    excerpt: str | None = None

    def __post_init__(self) -> None:
        if self.excerpt is not None and self.reason not in UNPARSED:
            # The rule of the module doc, kept where it cannot be bypassed.
            raise ValueError(f"a {self.reason!r} problem concerns a parsed record: it keeps no excerpt")

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line is not None else self.file
        return f"{where}: {self.reason}" + (f": {self.message}" if self.message else "")


class RecordProblem(ValueError):
    """Raised by a caller's check of one parsed record (a missing field, a bad URL); the reading loop
    turns it into a :class:`LineProblem` with :meth:`at`. Never carries an excerpt."""

    def __init__(self, reason: str, message: str = "") -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message

    def at(self, file: str, line: int | None) -> LineProblem:
        return LineProblem(file, line, self.reason, self.message)


def excerpt(text: str | bytes | None, limit: int = EXCERPT_CHARS) -> str | None:
    """A short, storable piece of the input: valid Unicode, no NUL, at most ``limit`` characters."""
    if text is None:
        return None
    if isinstance(text, bytes):
        text = text.decode("utf-8", "replace")
    else:
        text = text.encode("utf-8", "surrogateescape").decode("utf-8", "replace") if not text.isascii() \
            else text
    text = text.replace("\x00", "\ufffd")
    return text if len(text) <= limit else text[:limit - 1] + "…"


def utf8_problem(data: bytes) -> str | None:
    """Why ``data`` is not UTF-8 (the byte and its column), or None when it is."""
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        return f"byte 0x{data[exc.start]:02x} at column {exc.start + 1} is not valid UTF-8 ({exc.reason})"
    return None


__all__ = ["EXCERPT_CHARS", "UNPARSED", "LineProblem", "Reason", "RecordProblem", "excerpt", "utf8_problem"]
