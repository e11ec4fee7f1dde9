"""What a suggested rules file would change against the ruleset in force: the rules, and the stored URLs.

Every stored raw URL is canonicalised in memory twice, under the ruleset in force and under the proposed
one (all of them, streamed, not a sample; nothing is written), and the two results are compared: how many
raw URLs would get another canonical URL, how many distinct canonical URLs of today that touches, and how
many would change article status (``is_article`` true / false / unknown), with a few examples as path
shapes (never a stored URL itself: raw URLs come from people's browsing).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon import Canonicaliser, Ruleset
from ..errors import InvalidURL
from ..progress import SILENT, Progress
from ..store import tables as t
from .evidence import shown_url

_EXAMPLES = 5


@dataclass
class RulesDiff:
    rules: list[str] = field(default_factory=list)  # one line per changed rule
    examined: int = 0
    canonical_changed: int = 0
    canonical_urls_touched: int = 0
    article_changed: Counter[tuple[bool | None, bool | None]] = field(default_factory=Counter)
    examples: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {"rules_changed": len(self.rules), "raw_urls": self.examined,
                "canonical_changed": self.canonical_changed, "canonical_urls_touched": self.canonical_urls_touched,
                "article_status_changed": sum(self.article_changed.values()),
                "article_status": {f"{_word(a)}->{_word(b)}": n for (a, b), n in sorted(
                    self.article_changed.items(), key=lambda kv: (-kv[1], str(kv[0])))}}

    def lines(self) -> list[str]:
        out = [f"rules: {len(self.rules)} changes against the ruleset in force"]
        out += [f"  {line}" for line in self.rules]
        out.append(f"stored URLs (all {self.examined:,} raw URLs, canonicalised in memory under both rulesets): "
                   f"{self.canonical_changed:,} would change canonical form ({self.canonical_urls_touched:,} "
                   f"canonical URLs of today), {sum(self.article_changed.values()):,} article status")
        for (a, b), n in sorted(self.article_changed.items(), key=lambda kv: -kv[1]):
            out.append(f"  is_article {_word(a)} → {_word(b)}: {n:,}")
        out += [f"  e.g. {e}" for e in self.examples]
        return out


def _word(v: bool | None) -> str:
    return "unknown" if v is None else str(v).lower()


def rule_changes(old: Ruleset, new: Ruleset) -> list[str]:
    """The rules that differ, one line each (site keys, host lists, switches)."""
    out: list[str] = []
    a, b = old.normalised, new.normalised
    for key in sorted(set(a) | set(b)):
        if key in ("name", "site"):
            continue
        va, vb = a.get(key), b.get(key)
        if va == vb:
            continue
        if isinstance(va, list | type(None)) and isinstance(vb, list | type(None)):
            added = [x for x in vb or [] if x not in (va or [])]
            removed = [x for x in va or [] if x not in (vb or [])]
            out += [f"{key}: + {x}" for x in added] + [f"{key}: - {x}" for x in removed]
        else:
            out.append(f"{key}: changed")
    sa_, sb = a.get("site", {}), b.get("site", {})
    for host in sorted(set(sa_) | set(sb)):
        xa, xb = sa_.get(host), sb.get(host)
        if xa == xb:
            continue
        if xa is None:
            out.append(f"site {host}: new section")
            xa = {}
        if xb is None:
            out.append(f"site {host}: section removed")
            continue
        for key in sorted(set(xa) | set(xb)):
            va, vb = xa.get(key), xb.get(key)
            if va == vb:
                continue
            if isinstance(vb, list) and isinstance(va, list | type(None)):
                out += [f"site {host}: {key} + {x}" for x in vb if x not in (va or [])]
                out += [f"site {host}: {key} - {x}" for x in va or [] if x not in vb]
            else:
                out.append(f"site {host}: {key} {va!r} → {vb!r}")
    return out


def diff_rules(conn: Connection, old: Ruleset, new: Ruleset, *, cache_size: int = 65536,
               progress: Progress = SILENT) -> RulesDiff:
    """The rule changes and their effect on every stored raw URL (module doc)."""
    out = RulesDiff(rule_changes(old, new))
    before, after = Canonicaliser(old, cache_size=cache_size), Canonicaliser(new, cache_size=cache_size)
    touched: set[str] = set()
    total = conn.execute(sa.select(sa.func.count()).select_from(t.raw_urls)).scalar_one()
    progress.start("comparing stored URLs under both rulesets", int(total))
    q = sa.select(t.raw_urls.c.raw).where(t.raw_urls.c.reason.is_(None)).order_by(t.raw_urls.c.id)
    for (raw,) in conn.execution_options(yield_per=10_000).execute(q):
        progress.advance()
        try:
            a = before(raw)
        except InvalidURL:
            continue
        out.examined += 1
        try:
            b = after(raw)
        except InvalidURL:
            out.canonical_changed += 1  # a lab rewrite can refuse a URL; it counts as a change
            continue
        if a.url != b.url:
            out.canonical_changed += 1
            if a.url_key not in touched:
                touched.add(a.url_key)
                if len(out.examples) < _EXAMPLES:
                    out.examples.append(f"{shown_url(a.host, a.url)} → {shown_url(b.host, b.url)}")
        if a.is_article != b.is_article:
            out.article_changed[(a.is_article, b.is_article)] += 1
    progress.finish()
    out.canonical_urls_touched = len(touched)
    return out


__all__ = ["RulesDiff", "diff_rules", "rule_changes"]
