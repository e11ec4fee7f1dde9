"""Rule suggestions: the site rules a lab writes by hand, proposed from the evidence in the registry.

:func:`suggest_rules_file` is what ``linkfold rules suggest`` runs: it reads the stored URLs, pages, texts
and redirects (learn.py, evidence.py), writes a rules file that keeps the ruleset in force and adds each
proposal with its evidence beside it (write.py), and with ``diff`` measures what the file would change
(diff.py). Nothing in the registry is written; applying is ``linkfold rules load FILE`` and the
re-canonicalisation stage (``linkfold recanonicalize``, which the nightly job runs first). The method and its limits: docs/rule-suggestions.md.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import parse_rules
from ..progress import SILENT, Progress
from .diff import RulesDiff, diff_rules, rule_changes
from .learn import DEFAULT_MIN_SUPPORT, SiteSuggestion, Suggestions, suggest_rules
from .templates import DEFAULT_MIN_PRECISION
from .write import render, save


@dataclass
class SuggestResult:
    suggestions: Suggestions
    text: str
    path: Path | None = None
    diff: RulesDiff | None = None

    def as_dict(self) -> dict[str, Any]:
        out = {"file": str(self.path) if self.path else None, **self.suggestions.as_dict(),
               "thin_sites": [k for k, _ in self.suggestions.thin]}
        if self.diff is not None:
            out["diff"] = self.diff.as_dict()
        return out

    def lines(self) -> list[str]:
        out = self.suggestions.lines()
        if self.path is not None:
            out.append(f"  written to {self.path}; review it, then: linkfold rules load {self.path} && "
                       "linkfold recanonicalize")
        return out


def suggest_rules_file(engine: Engine, *, out: Path | None = None, outlet: str | None = None,
                       min_support: int = DEFAULT_MIN_SUPPORT, min_precision: float = DEFAULT_MIN_PRECISION,
                       diff: bool = False, sink_fan_in: int = 50, cache_size: int = 65536,
                       progress: Progress = SILENT) -> SuggestResult:
    """Propose rules from the stored evidence; write them to ``out`` (when given); with ``diff``, compare
    them with the ruleset in force over every stored raw URL. Writes nothing to the registry."""
    with engine.connect() as conn:
        found = suggest_rules(conn, outlet=outlet, min_support=min_support, min_precision=min_precision,
                              sink_fan_in=sink_fan_in, progress=progress)
        text = render(found)
        result = SuggestResult(found, text)
        if diff:
            proposed = parse_rules(text, source=str(out) if out else "<suggested rules>")
            result.diff = diff_rules(conn, found.base, proposed, cache_size=cache_size, progress=progress)
    if out is not None:
        save(text, out)
        result.path = out
    return result


__all__ = ["DEFAULT_MIN_PRECISION", "DEFAULT_MIN_SUPPORT", "RulesDiff", "SiteSuggestion", "SuggestResult",
           "Suggestions", "diff_rules", "render", "rule_changes", "suggest_rules", "suggest_rules_file"]
