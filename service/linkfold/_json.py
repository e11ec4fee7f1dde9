"""What ``json.loads`` can fail with on one line of input, and how to say so in a reject.

Besides malformed JSON (``JSONDecodeError``), the parser gives up on text it cannot hold: nesting deeper
than the interpreter's recursion limit (``RecursionError``: it recurses once per level), a number with
more digits than Python converts to an int (a plain ``ValueError``, ``sys.get_int_max_str_digits()``, a
guard against the conversion's quadratic cost), and a value too large for memory. Every reader of JSON
lines catches all of them, so that each is a problem of its line and never ends a load.
"""

from __future__ import annotations

import json
import sys

#: Catch these around ``json.loads`` of one line.
JSON_LIMITS = (ValueError, RecursionError, MemoryError)


def json_problem(exc: BaseException) -> str:
    """Why ``json.loads`` could not read a line (one of :data:`JSON_LIMITS`), for a reject's detail."""
    if isinstance(exc, json.JSONDecodeError):
        return f"not valid JSON: {exc}"
    if isinstance(exc, RecursionError):
        return ("JSON nested deeper than the reader can follow (arrays and objects more than about "
                f"{sys.getrecursionlimit():,} levels deep)")
    if isinstance(exc, MemoryError):
        return "a JSON value too large to hold in memory"
    if "integer string conversion" in str(exc):
        return f"a JSON number with more than {sys.get_int_max_str_digits():,} digits"
    if isinstance(exc, UnicodeDecodeError):
        return f"not UTF-8: {exc.reason} at byte {exc.start}"
    return f"not valid JSON: {exc}"


def past_a_limit(exc: BaseException) -> bool:
    """Whether the text may well be JSON that only a limit kept the parser from holding."""
    return not isinstance(exc, json.JSONDecodeError | UnicodeDecodeError)


__all__ = ["JSON_LIMITS", "json_problem", "past_a_limit"]
