"""Line numbers for TOML keys, so a semantic error in a rules file can name its line.

``tomllib`` reports line numbers only for syntax errors. For a value that parses but is wrong (an unknown
key, a bad regular expression) we find the line of the offending key ourselves by scanning the text for
table headers and ``key =`` lines. This is a locator, not a parser: the text has already been parsed by
``tomllib``, so it only has to recognise headers and keys, and it falls back to the nearest enclosing
table when a value sits somewhere it cannot follow (inside an inline table, say).
"""

from __future__ import annotations

import re
from collections.abc import Sequence

_HEADER = re.compile(r"^\s*(\[\[?)\s*(.+?)\s*\]\]?\s*(?:#.*)?$")
_KEY = re.compile(r"""^\s*((?:[A-Za-z0-9_-]+|"(?:[^"\\]|\\.)*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_-]+|"(?:[^"\\]|\\.)*"|'[^']*'))*)\s*=""")
_PART = re.compile(r"""\s*([A-Za-z0-9_-]+|"(?:[^"\\]|\\.)*"|'[^']*')\s*(?:\.|$)""")

Path = tuple[str | int, ...]


def _split_key(text: str) -> tuple[str, ...]:
    parts = []
    for m in _PART.finditer(text):
        raw = m.group(1)
        if raw[0] == '"':
            raw = raw[1:-1].encode("utf-8").decode("unicode_escape") if "\\" in raw else raw[1:-1]
        elif raw[0] == "'":
            raw = raw[1:-1]
        parts.append(raw)
    return tuple(parts)


def _index(text: str) -> list[tuple[Path, int]]:
    """Every header and key of the text as (full path, 1-based line), in order."""
    found: list[tuple[Path, int]] = []
    table: Path = ()
    counts: dict[Path, int] = {}
    in_multiline = None  # the closing quote of a multi-line string we are inside, if any
    for lineno, line in enumerate(text.splitlines(), start=1):
        if in_multiline:
            if in_multiline in line:
                in_multiline = None
            continue
        header = _HEADER.match(line)
        if header and not _KEY.match(line):
            names = _split_key(header.group(2))
            if header.group(1) == "[[":
                # An array of tables: the n-th header of the same name (under the same parent) is element n.
                array = (*_resolve_prefix(names[:-1], counts), names[-1])
                counts[array] = counts.get(array, -1) + 1
                table = (*array, counts[array])
            else:
                table = _resolve_prefix(names, counts)
            found.append((table, lineno))
            continue
        key = _KEY.match(line)
        if key:
            found.append(((*table, *_split_key(key.group(1))), lineno))
            rest = line[key.end():]
            for quote in ('"""', "'''"):
                if rest.count(quote) == 1:
                    in_multiline = quote
    return found


def _resolve_prefix(names: tuple[str, ...], counts: dict[Path, int]) -> Path:
    """Header names with the current element index of any array of tables they pass through."""
    out: Path = ()
    for name in names:
        out = (*out, name)
        if out in counts:
            out = (*out, counts[out])
    return out


def locate(text: str, path: Sequence[str | int], value: object = None) -> int | None:
    """The 1-based line that best matches ``path`` (the nearest enclosing key or table), or None.

    When the path ends in a list index and ``value`` is the offending string, the line where that string
    is written is preferred, so an error in a list spread over several lines points at the right one.
    """
    index = _index(text)
    target = tuple(path)
    best_line: int | None = None
    best_len = -1
    for found, lineno in index:
        n = len(found)
        if n > best_len and found == target[:n]:
            best_len, best_line = n, lineno
    if best_line is not None and isinstance(value, str) and best_len < len(target):
        lines = text.splitlines()
        for quoted in (f'"{value}"', f"'{value}'"):
            for lineno in range(best_line, len(lines) + 1):
                if quoted in lines[lineno - 1]:
                    return lineno
    return best_line
