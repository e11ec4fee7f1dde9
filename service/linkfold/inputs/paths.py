"""Dotted paths into nested JSON objects, for JSON-lines dumps whose links sit deep inside each record.

Syntax (ours): segments joined by ``.``.

* ``name`` — the member ``name`` of an object;
* ``*`` — every element of an array, in order (so one record can give several URLs);
* ``3`` — the element at index 3 (from 0) of an array; on an object, the member named ``"3"``;
* ``\\.``, ``\\*`` and ``\\\\`` write a literal dot, star or backslash inside a name.

``entities.links.*.expanded`` reads ``{"entities": {"links": [{"expanded": "…"}, …]}}``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..errors import InputError

STAR = object()  # the segment marker for "every element", distinct from a member named "*"


@dataclass(frozen=True)
class JsonPath:
    text: str
    segments: tuple[Any, ...]  # str (member name) or STAR

    @property
    def root(self) -> str | None:
        first = self.segments[0]
        return first if isinstance(first, str) else None


def parse_path(text: str) -> JsonPath:
    """Split ``text`` into segments; ``InputError`` for an empty path or segment or a dangling escape."""
    if not text:
        raise InputError("an empty column path")
    segments: list[Any] = []
    current: list[str] = []
    escaped_star = False
    i = 0
    while i < len(text):
        ch = text[i]
        if ch == "\\":
            if i + 1 >= len(text) or text[i + 1] not in ".*\\":
                raise InputError(f"column path {text!r}: a backslash must be followed by . * or \\")
            current.append(text[i + 1])
            escaped_star = escaped_star or text[i + 1] == "*"
            i += 2
            continue
        if ch == ".":
            segments.append(_segment(text, current, escaped_star))
            current, escaped_star = [], False
        else:
            current.append(ch)
        i += 1
    segments.append(_segment(text, current, escaped_star))
    return JsonPath(text, tuple(segments))


def _segment(text: str, chars: list[str], escaped_star: bool) -> Any:
    name = "".join(chars)
    if not name:
        raise InputError(f"column path {text!r} has an empty segment (two dots, or a dot at an end)")
    if name == "*" and not escaped_star:
        return STAR
    return name


@dataclass(slots=True)
class Reached:
    """What a path reaches in one record: the values in document order, or why there are none."""

    values: list[Any]
    missing: str | None = None  # set when the path is absent as a whole (before any ``*`` spread out)
    dropped: int = 0  # branches that found nothing after a ``*`` (a typo deep in the path shows here)


def _kind(value: Any) -> str:
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, list):
        return "an array"
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int | float):
        return "a number"
    return "a string"


def resolve(path: JsonPath, record: Any) -> Reached:
    """Follow ``path`` through ``record``.

    Before the first ``*``, a step that finds nothing means the record lacks the path (``missing``).
    After it, a branch that finds nothing is simply not a value: a link object without the member is
    not a link, and its siblings still count.
    """
    # The usual cases first, walked directly: members of objects all the way (a record's key and time),
    # or members, one '*' over an array, and members of its elements (a post's links). Anything else — an
    # index, a second '*', a member absent before the '*' — is followed from the start by _resolve.
    node = record
    segments = path.segments
    for i, seg in enumerate(segments):
        if seg is STAR:
            if type(node) is not list:
                return _resolve(path, record)
            rest = segments[i + 1:]
            values = []
            dropped = 0
            for element in node:
                for name in rest:
                    if isinstance(element, dict) and name in element:  # a second STAR is never a member
                        element = element[name]
                    elif name is STAR or (isinstance(element, list) and name.isdigit()):
                        return _resolve(path, record)
                    else:
                        dropped += 1
                        break
                else:
                    values.append(element)
            return Reached(values, dropped=dropped)
        if type(node) is dict and seg in node:
            node = node[seg]
        else:
            return _resolve(path, record)
    return Reached([node])


def _resolve(path: JsonPath, record: Any) -> Reached:
    nodes = [record]
    spread = False
    dropped = 0
    walked: list[str] = []
    for seg in path.segments:
        nxt: list[Any] = []
        for node in nodes:
            if seg is STAR:
                if isinstance(node, list):
                    nxt.extend(node)
                    continue
                if not spread:
                    where = ".".join(walked) or "the record"
                    return Reached([], f"{where} is {_kind(node)}, not an array, so '*' reaches nothing")
            elif isinstance(node, dict):
                if seg in node:
                    nxt.append(node[seg])
                    continue
                if not spread:
                    where = ".".join(walked)
                    return Reached([], f"no member {seg!r}" + (f" in {where}" if where else ""))
            elif isinstance(node, list) and seg.isdigit():
                idx = int(seg)
                if idx < len(node):
                    nxt.append(node[idx])
                    continue
                if not spread:
                    return Reached([], f"{'.'.join(walked)} has {len(node)} elements, no index {idx}")
            elif not spread:
                where = ".".join(walked) or "the record"
                hint = " (use * to take every element)" if isinstance(node, list) else ""
                return Reached([], f"{where} is {_kind(node)}, it has no member {seg!r}{hint}")
            dropped += 1
        if seg is STAR:
            spread = True
        walked.append("*" if seg is STAR else seg)
        nodes = nxt
    return Reached(nodes, dropped=dropped)


__all__ = ["STAR", "JsonPath", "Reached", "parse_path", "resolve"]
