"""Rule suggestions from the stored evidence: one pass over the canonical URLs (ordered by registered
domain, so one domain's shapes are held at a time), then the host-level questions from grouped counts.

What is proposed, and when (docs/rule-suggestions.md has the method and its limits):

* article patterns per site (templates.py) and parameter drops and keeps (params.py);
* **shortener hosts**: at least ``min_support`` followed URLs, at least ``SHORTENER_SHARE`` of them ending
  on another registered domain, and no usable text on the host;
* **never-article hosts**: at least ``min_support`` URLs with a stored document, none of them usable nor
  behind a paywall or consent wall (an outlet whose every article is walled is still an outlet), and not
  a shortener;
* **aliases**: two hosts holding the same texts at the same paths (at least ``min_support`` paths, at least
  ``ALIAS_SHARE`` of their shared texts at the same path, and no path with different texts on the two);
  and a host that would be a shortener but whose redirects keep the path: an outlet that moved;
* **sinks** are listed with their kind and fan-in, as dedupe/sinks.py decides them: evidence for review.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass, field
from itertools import combinations
from typing import Any

from sqlalchemy.engine import Connection

from ..canon import Ruleset
from ..errors import NotFound
from ..progress import SILENT, Progress
from ..store.rulesets import current_ruleset, list_rulesets
from . import evidence as ev
from .params import ParamTable, ParamVerdict, judge_params, param_evidence
from .templates import DEFAULT_MIN_PRECISION, Learned, Proposal, ShapeTable, covers, learn_templates

#: Pieces of evidence (URLs, followed links, shared paths) a proposal needs unless asked for more or fewer.
DEFAULT_MIN_SUPPORT = 10
#: "Redirect off-domain nearly always": common practice for a link shortener or click redirector.
SHORTENER_SHARE = 0.9
#: Share of a host pair's shared texts that sit at the same path before one is called an alias of the
#: other (the rest may be syndicated copies at other paths); a value of our own choosing.
ALIAS_SHARE = 0.9


@dataclass
class SiteSuggestion:
    """What is proposed for one site section (an existing one, or a new one for a host)."""

    key: str
    existing: bool
    learned: Learned
    patterns: list[Proposal] = field(default_factory=list)   # new article patterns
    covered: list[Proposal] = field(default_factory=list)    # templates the patterns in force already match
    params: list[ParamVerdict] = field(default_factory=list)
    aliases: list[AliasProposal] = field(default_factory=list)
    #: patterns in force that match stored URLs without article text: (pattern, negative, positive URLs)
    doubtful: list[tuple[str, int, int]] = field(default_factory=list)

    @property
    def drops(self) -> list[ParamVerdict]:
        return [p for p in self.params if p.action == "drop"]

    @property
    def keeps(self) -> list[ParamVerdict]:
        return [p for p in self.params if p.action == "keep"]

    def has_proposal(self) -> bool:
        return bool(self.patterns or self.drops or self.keeps or self.aliases)


@dataclass(frozen=True)
class HostProposal:
    host: str
    kind: str  # shortener | never_article
    counts: ev.HostCounts
    sinks: int = 0


@dataclass(frozen=True)
class AliasProposal:
    """``same_path``/``other_path``: shared texts at the same path or not; for a ``moved`` host, its
    followed URLs that redirected to the same path on the site, or elsewhere."""

    alias: str
    site_host: str
    same_path: int
    other_path: int
    conflicting: int
    moved: bool = False


@dataclass
class Suggestions:
    """Everything ``linkfold rules suggest`` proposes, with the ruleset it was measured against."""

    base_version: int | None
    base: Ruleset
    min_support: int
    outlet: str | None
    sites: dict[str, SiteSuggestion] = field(default_factory=dict)
    shorteners: list[HostProposal] = field(default_factory=list)
    never_article: list[HostProposal] = field(default_factory=list)
    sinks: list[ev.SinkRow] = field(default_factory=list)
    urls: int = 0

    @property
    def thin(self) -> list[tuple[str, str]]:
        """Sites with usable texts but too little evidence for an article pattern, and why."""
        # A host seen once with no page is not worth a line; one with some text, or many URLs, is.
        return [(k, s.learned.thin) for k, s in sorted(self.sites.items())
                if s.learned.thin and not s.patterns and not s.covered
                and (s.learned.totals.positive > 0 or s.learned.totals.labelled + s.learned.totals.unknown
                     >= self.min_support)]

    def counts(self) -> dict[str, int]:
        return {"urls": self.urls, "sites": len(self.sites),
                "article_patterns": sum(len(s.patterns) for s in self.sites.values()),
                "param_drops": sum(len(s.drops) for s in self.sites.values()),
                "param_keeps": sum(len(s.keeps) for s in self.sites.values()),
                "aliases": sum(len(s.aliases) for s in self.sites.values()),
                "shortener_hosts": len(self.shorteners), "never_article_hosts": len(self.never_article),
                "sinks": len(self.sinks), "thin": len(self.thin)}

    def as_dict(self) -> dict[str, Any]:
        return {"ruleset": self.base_version, **self.counts()}

    def lines(self) -> list[str]:
        c = self.counts()
        out = [f"suggested from {c['urls']:,} stored URLs against ruleset "
               f"{self.base_version if self.base_version is not None else '(defaults)'}: "
               f"{c['article_patterns']} article patterns, {c['param_drops']} parameter drops, "
               f"{c['param_keeps']} keeps, {c['aliases']} aliases, {c['shortener_hosts']} shortener hosts, "
               f"{c['never_article_hosts']} never-article hosts; {c['sinks']} sinks listed"]
        if self.thin:
            out.append(f"  too little evidence for an article pattern: {len(self.thin)} sites "
                       f"({', '.join(k for k, _ in self.thin[:5])}{', …' if len(self.thin) > 5 else ''})")
        return out


def _site_key(rules: Ruleset, host: str, domain: str) -> str:
    site = rules.site_for(host, domain)
    return site.host if site is not None else host


def suggest_rules(conn: Connection, *, outlet: str | None = None, min_support: int = DEFAULT_MIN_SUPPORT,
                  min_precision: float = DEFAULT_MIN_PRECISION, sink_fan_in: int = 50,
                  base: tuple[int | None, Ruleset] | None = None, progress: Progress = SILENT) -> Suggestions:
    """Propose site rules from the evidence stored in the registry (module doc); writes nothing.

    ``base`` is the (version, ruleset) to measure against: by default the ruleset in force."""
    if min_support < 1:
        raise ValueError("min_support must be at least 1")
    if base is None:
        stored = list_rulesets(conn)
        base = (stored[-1]["version"] if stored else None, current_ruleset(conn))
    version, rules = base
    domains = ev.domains_of_outlet(conn, outlet) if outlet else None
    if domains == []:
        raise NotFound(f"no stored URL belongs to outlet {outlet!r}",
                       hint="give an outlet name as `linkfold outlets` shows it, a host or a registered domain")
    out = Suggestions(version, rules, min_support, outlet)
    counts = ev.host_counts(conn, domains=domains)
    _hosts(out, counts, rules, min_support)
    skip = {p.host for p in out.shorteners} | {p.host for p in out.never_article}
    progress.start("learning from stored URLs", sum(c.urls for c in counts.values()))
    _learn_sites(out, ev.stream_urls(conn, domains=domains), rules, skip, min_support, min_precision, progress)
    progress.finish()
    _aliases(out, conn, counts, rules, domains, min_support)
    _moved_hosts(out, conn, rules)
    sink_rows = ev.sinks(conn, rules, limit=sink_fan_in)
    out.sinks = [s for s in sink_rows if domains is None or s.host in counts]
    by_host = Counter(s.host for s in out.sinks)
    out.never_article = [HostProposal(p.host, p.kind, p.counts, by_host.get(p.host, 0)) for p in out.never_article]
    return out


def _hosts(out: Suggestions, counts: dict[str, ev.HostCounts], rules: Ruleset, min_support: int) -> None:
    for host, c in sorted(counts.items()):
        if host in rules.shortener_hosts:
            continue
        if c.followed >= min_support and c.off_domain >= SHORTENER_SHARE * c.followed and c.usable == 0:
            out.shorteners.append(HostProposal(host, "shortener", c))
        elif c.documents >= min_support and c.usable == 0 and c.hidden == 0 and not rules.never_article(host):
            out.never_article.append(HostProposal(host, "never_article", c))


def _moved_hosts(out: Suggestions, conn: Connection, rules: Ruleset) -> None:
    """A shortener candidate whose redirects keep the path (``old.example/news/7`` → ``new.example/news/7``)
    is an outlet that moved: it becomes an alias of the site it moved to (its URLs then fold without a
    request), or nothing at all when that site is out of scope. A shortener's paths are its own codes."""
    kept = []
    for p in out.shorteners:
        same, total, target = ev.redirect_paths(conn, p.host)
        if not total or same < SHORTENER_SHARE * total:
            kept.append(p)
            continue
        key = _site_key(rules, target, ev.domain_of(conn, target) or target) if target else None
        site = out.sites.get(key) if key else None
        if site is not None and p.host not in rules.site_hosts:
            site.aliases.append(AliasProposal(p.host, site.key, same, total - same, 0, moved=True))
    out.shorteners = kept


def _learn_sites(out: Suggestions, rows: Iterable[ev.UrlRow], rules: Ruleset, skip: set[str], min_support: int,
                 min_precision: float, progress: Progress) -> None:
    shapes: dict[str, ShapeTable] = {}
    texts: dict[str, ParamTable] = {}
    domain = None
    for row in rows:
        out.urls += 1
        progress.advance()
        if row.domain != domain:
            _finish_domain(out, shapes, texts, rules, min_support, min_precision)
            shapes, texts, domain = {}, {}, row.domain
        if row.host in skip or row.host in rules.shortener_hosts or rules.never_article(row.host):
            continue
        key = _site_key(rules, row.host, row.domain)
        path, _, query = ev.path_of(row.url).partition("?")
        shapes.setdefault(key, ShapeTable()).add(path, query, row.label)
        if row.text_hash is not None:
            texts.setdefault(key, ParamTable()).add(path, query, row.text_hash)
    _finish_domain(out, shapes, texts, rules, min_support, min_precision)


def _finish_domain(out: Suggestions, shapes: dict[str, ShapeTable], texts: dict[str, ParamTable],
                   rules: Ruleset, min_support: int, min_precision: float) -> None:
    for key, table in shapes.items():
        site = rules.sites.get(key)
        learned = learn_templates(table, min_support=min_support, min_precision=min_precision)
        s = SiteSuggestion(key, site is not None, learned)
        in_force = site.article if site is not None else ()
        for p in learned.proposals:
            samples = [table.samples[t] for t, st in table.stats.items() if st.positive and covers(p.template, t)]
            if in_force and all(any(rx.search(x) for rx in in_force) for x in samples):
                s.covered.append(p)
            else:
                s.patterns.append(p)
        for rx in in_force:
            pos = sum(st.positive for t, st in table.stats.items() if rx.search(table.samples[t]))
            neg = sum(st.negative for t, st in table.stats.items() if rx.search(table.samples[t]))
            if neg:
                s.doubtful.append((rx.pattern, neg, pos))
        protected = site.keep_params if site is not None else frozenset()
        if key in texts:
            s.params = judge_params(param_evidence(texts[key]), min_support=min_support, protected=protected)
        out.sites[key] = s


def _aliases(out: Suggestions, conn: Connection, counts: dict[str, ev.HostCounts], rules: Ruleset,
             domains: list[str] | None, min_support: int) -> None:
    same: Counter[tuple[str, str]] = Counter()
    other: Counter[tuple[str, str]] = Counter()
    for group in ev.shared_texts(conn, domains=domains):
        paths: dict[str, set[str]] = {}
        for host, path in group:
            paths.setdefault(host, set()).add(path)
        for a, b in combinations(sorted(paths), 2):
            (same if paths[a] & paths[b] else other)[(a, b)] += 1
    taken: set[str] = set()
    for (a, b), n in same.most_common():
        if n < min_support or n < ALIAS_SHARE * (n + other[(a, b)]):
            continue
        urls_a = counts[a].urls if a in counts else 0
        urls_b = counts[b].urls if b in counts else 0
        # The host with more stored URLs (or the one with a site section) is the site; the other its alias.
        primary, alias = (a, b) if (a in rules.site_hosts, urls_a) >= (b in rules.site_hosts, urls_b) else (b, a)
        if alias in rules.site_hosts or alias in taken or primary in taken:
            continue
        agree, conflicting = ev.same_path_texts(conn, primary, alias)
        if conflicting:
            continue
        domain = counts[primary].domain if primary in counts else None
        key = _site_key(rules, primary, domain or primary)
        site = out.sites.get(key)
        if site is None:
            continue
        site.aliases.append(AliasProposal(alias, key, agree, other[(a, b)], conflicting))
        taken.add(alias)
        # The alias's URLs fold onto the site once the alias is in force: nothing of its own is proposed.
        out.sites.pop(alias, None)


__all__ = ["ALIAS_SHARE", "DEFAULT_MIN_SUPPORT", "SHORTENER_SHARE", "AliasProposal", "HostProposal",
           "SiteSuggestion", "Suggestions", "suggest_rules"]
