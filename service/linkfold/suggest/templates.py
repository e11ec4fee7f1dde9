"""Article-URL templates learned from one outlet's canonical URLs and what their pages held. Pure.

Each stored canonical URL comes with a label: ``POSITIVE`` (a usable article text was extracted from it),
``NEGATIVE`` (a page was stored and held no article: empty, too short, not HTML, a video; or the site's
root) or ``UNKNOWN`` (never fetched, behind a paywall or consent wall, or its extraction broke). Its path
is cut into segments, each turned into a typed token by :func:`linkfold.canon.shapes.segment_shape`
(a fixed word stays as written; ``{n5}`` is a number of five digits; ``{date}``, ``{hex}``, ``{uuid}``,
``{id}``, ``{slug}``, ``{slug}-{n5}``, ``{slug}.html``…). When the path is all fixed words, the query key
whose value is ID-shaped (``?id={n5}``) is part of the token tuple: the query then carries the article.

The tuples seen are the most specific templates. They are generalised bottom-up, one step at a time, and
a step is taken only when the more general template is still precise on every labelled URL of the outlet
(counter-examples included, not only the ones that were merged):

1. numbers of different lengths at one position, other tokens equal → a range (``\\d{5,6}``);
2. ``{slug}-{nK}`` beside ``{slug}`` at one position → ``{slug}``;
3. at least ``MIN_VARIANTS`` different fixed words at one position, each on at least two URLs with
   text, other tokens equal → any word (``/politics/{n6}``, ``/sport/{n6}``, ``/culture/{n6}`` →
   ``/{word}/{n6}``: section/ID paths; a word seen once is a short title, not a section).

A template is proposed when it covers at least ``min_support`` URLs with usable text and its precision on
the labelled URLs it covers is at least ``min_precision``; of two templates where one covers the other,
only the general one survives, and only because its own precision passed. The method follows the idea of
learning URL rules from evidence in Bar-Yossef, Keidar and Schonfeld, "Do not crawl in the DUST:
different URLs with similar text", ACM Transactions on the Web 3(1), 2009 (cited from memory), applied to
the question "which URLs are articles" rather than "which URLs are the same".
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from enum import IntEnum
from urllib.parse import parse_qsl, unquote

from ..canon.shapes import segment_shape

#: Different fixed words at one position before it becomes "any word" (common practice: two sections may
#: be the only two; three suggest a family).
MIN_VARIANTS = 3
#: Least share of a template's labelled URLs that held article text. Extraction fails on a few real articles
#: (a page half loaded, a gallery, a live blog), a few per cent of them, so zero tolerance would refuse
#: most large outlets; a page type that is not an article (tags, sections, search) holds text on almost none
#: of its pages, so the two are far apart. A value of our own choosing (docs/rule-suggestions.md).
DEFAULT_MIN_PRECISION = 0.95
_ID_VALUE = re.compile(r"^\{(?:n\d+|hex|uuid|id)\}$")
_NUM = re.compile(r"^\{n(\d+)(?:-(\d+))?\}$")
_WORD = "{word}"
_SLUG_REGEX = r"(?:[^\W_]|%[0-9A-F]{2})+(?:[-_](?:[^\W_]|%[0-9A-F]{2})+){2,}"
_WORD_REGEX = r"[A-Za-z][\w-]*"


class Label(IntEnum):
    NEGATIVE = 0
    POSITIVE = 1
    UNKNOWN = 2


Tokens = tuple[str, ...]


def url_tokens(path: str, query: str) -> Tokens:
    """The token tuple of a canonical URL's path and query (see the module doc). A query key that carries
    the ID is appended as ``?name={shape}``."""
    tokens = tuple(_segment_token(s) for s in path.split("/"))
    if query and not any("{" in tok for tok in tokens):
        for name, value in sorted(parse_qsl(query, keep_blank_values=True)):
            shape = segment_shape(value)
            if _ID_VALUE.match(shape):
                return (*tokens, f"?{name}={shape}")
    return tokens


def _segment_token(segment: str) -> str:
    shape = segment_shape(segment)
    if shape == segment and "%" in segment:
        # A slug in another script arrives percent-encoded as UTF-8 (RFC 3986 §2.1, WHATWG path encoding);
        # it is shaped as the words it encodes, and the slug expression accepts the escapes.
        decoded = segment_shape(unquote(segment))
        if decoded.startswith("{slug}"):
            return decoded
    return shape


@dataclass
class Stats:
    positive: int = 0
    negative: int = 0
    unknown: int = 0

    def add(self, other: Stats) -> None:
        self.positive += other.positive
        self.negative += other.negative
        self.unknown += other.unknown

    @property
    def labelled(self) -> int:
        return self.positive + self.negative

    @property
    def precision(self) -> float:
        return self.positive / self.labelled if self.labelled else 0.0


@dataclass
class ShapeTable:
    """What one outlet's URLs look like: counts by token tuple, and one sample path per tuple (the
    sample is used to check the written regular expression against the shape, never written out)."""

    stats: dict[Tokens, Stats] = field(default_factory=dict)
    samples: dict[Tokens, str] = field(default_factory=dict)

    def add(self, path: str, query: str, label: Label) -> None:
        tokens = url_tokens(path, query)
        s = self.stats.get(tokens)
        if s is None:
            s = self.stats[tokens] = Stats()
            self.samples[tokens] = path + ("?" + query if query else "")
        elif not query and "?" in self.samples[tokens]:
            # The plainest spelling is the sample, whatever order the URLs came in (both backends alike).
            self.samples[tokens] = path
        if label is Label.POSITIVE:
            s.positive += 1
        elif label is Label.NEGATIVE:
            s.negative += 1
        else:
            s.unknown += 1

    def totals(self) -> Stats:
        out = Stats()
        for s in self.stats.values():
            out.add(s)
        return out


def _num_range(token: str) -> tuple[int, int] | None:
    m = _NUM.match(token)
    if not m:
        return None
    lo = int(m.group(1))
    return lo, int(m.group(2) or lo)


def token_covers(general: str, specific: str) -> bool:
    """Whether the token ``general`` covers the token ``specific``."""
    if general == specific:
        return True
    g, s = _num_range(general), _num_range(specific)
    if g and s:
        return g[0] <= s[0] and s[1] <= g[1]
    if general == _WORD:
        return "{" not in specific and "?" not in specific and re.fullmatch(_WORD_REGEX, specific) is not None
    if general == "{slug}":
        return specific.startswith("{slug}-{n") and specific.endswith("}") and "." not in specific
    return False


def covers(template: Tokens, tokens: Tokens) -> bool:
    return len(template) == len(tokens) and all(token_covers(g, s) for g, s in zip(template, tokens, strict=True))


def _token_regex(token: str) -> str:
    if token.startswith("?"):
        name, _, value = token[1:].partition("=")
        return r"\?(?:[^#]*&)?" + re.escape(name) + "=" + _token_regex(value) + "(?:&|$)"
    rng = _num_range(token)
    if rng:
        return rf"\d{{{rng[0]}}}" if rng[0] == rng[1] else rf"\d{{{rng[0]},{rng[1]}}}"
    if "{" not in token:
        return re.escape(token)
    if token == _WORD:
        return _WORD_REGEX
    fixed = {"{date}": r"\d{4}-?\d{2}-?\d{2}", "{uuid}": r"[0-9a-fA-F]{8}(?:-[0-9a-fA-F]{4}){3}-[0-9a-fA-F]{12}",
             "{hex}": r"[0-9a-fA-F]{8,}", "{id}": r"[A-Za-z0-9]{12,}", "{slug}": _SLUG_REGEX}
    if token in fixed:
        return fixed[token]
    # Composite tokens: "{slug}-{n5}", "{slug}.html", "{n6}.html".
    out, rest = [], token
    for part in re.split(r"(\{[a-z0-9-]+\})", rest):
        if not part:
            continue
        out.append(_token_regex(part) if part.startswith("{") else re.escape(part))
    return "".join(out)


def template_regex(template: Tokens) -> str:
    """The article pattern of a template, for the rules file (searched in the path, ``?`` and query)."""
    query = template[-1] if template and template[-1].startswith("?") else None
    path = template[:-1] if query else template
    body = "/".join(_token_regex(t) for t in path)
    return "^" + body + (_token_regex(query) if query else r"(?:\?|$)")


def template_text(template: Tokens) -> str:
    """A template for people: ``/news/{n5}``, ``/article.php?id={n5}``."""
    query = template[-1] if template and template[-1].startswith("?") else ""
    path = template[:-1] if query else template
    return ("/".join(path) or "/") + query


@dataclass
class Proposal:
    template: Tokens
    regex: str
    stats: Stats
    coverage: float  # share of the outlet's URLs with usable text that it covers

    @property
    def text(self) -> str:
        return template_text(self.template)


@dataclass
class Learned:
    proposals: list[Proposal]
    totals: Stats
    thin: str | None = None  # why nothing was proposed, when evidence was too thin
    uncovered: int = 0       # URLs with usable text no proposal covers


def _stats_of(template: Tokens, table: ShapeTable) -> Stats:
    out = Stats()
    for tokens, s in table.stats.items():
        if covers(template, tokens):
            out.add(s)
    return out


def _generalise(current: set[Tokens], table: ShapeTable, step: int, min_precision: float) -> set[Tokens]:
    """One generalisation step (1, 2 or 3 of the module doc) over every position."""
    changed = True
    while changed:
        changed = False
        for pos in range(1, max((len(t) for t in current), default=0)):
            groups: dict[Tokens, list[Tokens]] = {}
            for t in current:
                if pos < len(t):
                    groups.setdefault((*t[:pos], "*", *t[pos + 1:]), []).append(t)
            for key, members in groups.items():
                if step == 3:
                    # A section name repeats across its articles (/sport/…, /sport/…); a word seen on one
                    # URL only is more likely a short title (/flood-warning) than a section: it does not
                    # count towards "any word", which would also take in /about and /contact.
                    members = [m for m in members if _stats_of(m, table).positive >= 2]
                merged = _merge_at(pos, [m[pos] for m in members], step)
                if merged is None:
                    continue
                candidate = (*key[:pos], merged, *key[pos + 1:])
                if candidate in current:
                    continue
                s = _stats_of(candidate, table)
                if s.positive and s.precision >= min_precision:
                    current = {t for t in current if not covers(candidate, t)} | {candidate}
                    changed = True
                    break
            if changed:
                break
    return current


def _merge_at(pos: int, tokens: list[str], step: int) -> str | None:
    distinct = set(tokens)
    if len(distinct) < 2:
        return None
    if step == 1:
        ranges = [_num_range(t) for t in distinct]
        if all(ranges):
            return f"{{n{min(r[0] for r in ranges if r)}-{max(r[1] for r in ranges if r)}}}"
    elif step == 2:
        if "{slug}" in distinct and all(t == "{slug}" or token_covers("{slug}", t) for t in distinct):
            return "{slug}"
    elif step == 3:
        words = [t for t in distinct if token_covers(_WORD, t) or t == _WORD]
        if len(words) == len(distinct) and len(distinct) >= MIN_VARIANTS:
            return _WORD
    return None


def _without_redundant(proposals: list[Proposal], table: ShapeTable) -> list[Proposal]:
    """Leave out a proposal whose URLs with text a larger one's expression already matches (an all-digit
    hex ID is ``{n12}`` by shape, and ``[0-9a-fA-F]{8,}`` matches it)."""
    kept: list[Proposal] = []
    for p in proposals:
        samples = [table.samples[t] for t, s in table.stats.items() if s.positive and covers(p.template, t)]
        if kept and samples and all(any(re.search(k.regex, x) for k in kept) for x in samples):
            continue
        kept.append(p)
    return kept


def learn_templates(table: ShapeTable, *, min_support: int,
                    min_precision: float = DEFAULT_MIN_PRECISION) -> Learned:
    """The article templates of one outlet (see the module doc)."""
    totals = table.totals()
    if totals.positive < min_support:
        return Learned([], totals, thin=f"{totals.positive} URLs with usable text (at least {min_support} needed)")
    current = {t for t, s in table.stats.items() if s.positive}
    for step in (1, 2, 3):
        current = _generalise(current, table, step, min_precision)
    proposals: list[Proposal] = []
    for template in current:
        s = _stats_of(template, table)
        if s.positive < min_support or s.precision < min_precision:
            continue
        regex = template_regex(template)
        # The regex must say what the template says: a shape whose sample it matches is counted in.
        compiled = re.compile(regex)
        checked = Stats()
        for tokens, ts in table.stats.items():
            if covers(template, tokens) or compiled.search(table.samples[tokens]):
                checked.add(ts)
        if checked.positive < min_support or checked.precision < min_precision:
            continue
        proposals.append(Proposal(template, regex, checked, checked.positive / totals.positive))
    proposals.sort(key=lambda p: (-p.stats.positive, p.regex))
    proposals = _without_redundant(proposals, table)
    expressions = [re.compile(p.regex) for p in proposals]
    covered = sum(s.positive for t, s in table.stats.items()
                  if any(covers(p.template, t) for p in proposals) or matches_any(expressions, table.samples[t]))
    thin = None if proposals else (f"no template covers {min_support} URLs with usable text at precision "
                                   f"{min_precision}")
    return Learned(proposals, totals, thin=thin, uncovered=totals.positive - covered)


def matches_any(patterns: Iterable[re.Pattern[str]], path_and_query: str) -> bool:
    return any(p.search(path_and_query) for p in patterns)


__all__ = ["DEFAULT_MIN_PRECISION", "MIN_VARIANTS", "Label", "Learned", "Proposal", "ShapeTable", "Stats",
           "covers", "learn_templates", "matches_any", "template_regex", "template_text", "token_covers",
           "url_tokens"]
