"""One plain record per raw URL: the shape ``linkfold canonicalize`` prints and other projects read.

The field names are a published interface (scripts depend on them): keep them.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

from ..errors import InvalidURL
from .core import Canonical

# ``canonical`` and ``error`` are the old names of ``canonical_url`` and ``reason`` (the names lookup, export
# and the view use), still given, last, for one release (docs/vocabulary.md).
FIELDS = ("input", "canonical_url", "url_key", "host", "domain", "outlet", "is_article", "ruleset", "reason",
          "detail", "canonical", "error")


def record(raw: str, canon: Callable[[str], Canonical], *, explain: bool = False) -> dict[str, Any]:
    """The record of one raw URL: its canonical form, or ``reason`` (a reason code) and ``detail``."""
    try:
        c = canon(raw)
    except InvalidURL as exc:
        out: dict[str, Any] = dict.fromkeys(FIELDS)
        # Broken Unicode (lone surrogates) cannot be written out as UTF-8: show it escaped instead.
        out["input"] = raw.encode("utf-8", "backslashreplace").decode("utf-8") if isinstance(raw, str) else raw
        out["reason"] = out["error"] = exc.reason
        out["detail"] = exc.detail
        if explain:
            out["steps"] = []
        return out
    out = {"input": raw, "canonical_url": c.url, "url_key": c.url_key, "host": c.host, "domain": c.domain,
           "outlet": c.outlet, "is_article": c.is_article, "ruleset": c.ruleset, "reason": None, "detail": None,
           "canonical": c.url, "error": None}
    if explain:
        out["steps"] = list(c.steps)
    return out


@dataclass
class Tally:
    """Counts for the closing summary."""

    lines: int = 0
    canonical: int = 0
    refused: Counter[str] = field(default_factory=Counter)
    distinct: set[str] = field(default_factory=set)

    def add(self, rec: dict[str, Any]) -> None:
        self.lines += 1
        if rec["reason"] is None:
            self.canonical += 1
            self.distinct.add(rec["url_key"])
        else:
            self.refused[rec["reason"]] += 1

    def summary(self) -> str:
        refused = sum(self.refused.values())
        text = (f"{self.lines:,} lines: {self.canonical:,} canonical ({len(self.distinct):,} distinct), "
                f"{refused:,} refused")
        if refused:
            text += " (" + ", ".join(f"{reason} {n:,}" for reason, n in self.refused.most_common()) + ")"
        return text


def records(lines: Iterable[str], canon: Callable[[str], Canonical], *, explain: bool = False,
            tally: Tally | None = None) -> Iterator[dict[str, Any]]:
    """Records for raw URLs, one per input line, in order."""
    for raw in lines:
        rec = record(raw, canon, explain=explain)
        if tally is not None:
            tally.add(rec)
        yield rec
