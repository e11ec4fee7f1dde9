"""Query parameters that never change the page: the DUST rule of one outlet, learned from URL pairs. Pure.

Bar-Yossef, Keidar and Schonfeld ("Do not crawl in the DUST: different URLs with similar text", ACM
Transactions on the Web 3(1), 2009; cited from memory) learn rules that rewrite one URL into another from
pairs of URLs whose content is the same. We take the simplest of their rule forms, the one a rules file
can express: *removing one query parameter*. Two stored URLs of one outlet form a pair for parameter
``p`` when they differ only in ``p`` (its value, or its presence). A pair whose two texts have the same
hash supports dropping ``p``; a pair whose texts differ is a counter-example: ``p`` changes the page
(pagination, an article ID, a language) and must be kept.

A drop is proposed only with at least ``min_support`` supporting pairs and **no** counter-example at all:
a wrong drop merges two different articles, which no later stage can take apart; a missed drop only
leaves two spellings of one article for the text stages to join. A keep is proposed with at least
``min_support`` counter-examples.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from urllib.parse import parse_qsl, urlencode

_ABSENT = "\x00absent"


@dataclass
class ParamEvidence:
    support: int = 0           # pairs that differ only in this parameter and have equal text
    counter: int = 0           # pairs that differ only in this parameter and have different text
    urls: int = 0              # URLs with usable text that carry it


@dataclass
class ParamTable:
    """The URLs with usable text of one outlet, by path and sorted query, with their text hash."""

    texts: dict[str, str] = field(default_factory=dict)

    def add(self, path: str, query: str, text_hash: str) -> None:
        self.texts[_key(path, parse_qsl(query, keep_blank_values=True)) if query else path] = text_hash


def _key(path: str, pairs: list[tuple[str, str]]) -> str:
    return path + ("?" + urlencode(sorted(pairs)) if pairs else "")


def param_evidence(table: ParamTable) -> dict[str, ParamEvidence]:
    """Support and counter-examples of every parameter name seen (see the module doc)."""
    # (name, the URL without any value of it) -> {value or absent: set of text hashes}
    groups: dict[tuple[str, str], dict[str, set[str]]] = {}
    out: dict[str, ParamEvidence] = {}
    for key, text_hash in table.texts.items():
        path, _, query = key.partition("?")
        if not query:
            continue
        pairs = parse_qsl(query, keep_blank_values=True)
        for name in {n for n, _ in pairs}:
            out.setdefault(name, ParamEvidence()).urls += 1
            rest = [(n, v) for n, v in pairs if n != name]
            value = "&".join(v for n, v in pairs if n == name)
            base = _key(path, rest)
            group = groups.setdefault((name, base), {})
            group.setdefault(value, set()).add(text_hash)
            if base in table.texts:
                group.setdefault(_ABSENT, set()).add(table.texts[base])
    for (name, _base), variants in groups.items():
        if len(variants) < 2:
            continue
        hashes = set().union(*variants.values())
        evidence = out[name]
        # One group of n variants gives n-1 independent pairs: that many pieces of evidence.
        if len(hashes) == 1:
            evidence.support += len(variants) - 1
        else:
            evidence.counter += len(variants) - 1
    return out


@dataclass(frozen=True)
class ParamVerdict:
    name: str
    action: str  # "drop" | "keep" | "undecided"
    evidence: ParamEvidence


def judge_params(evidence: dict[str, ParamEvidence], *, min_support: int,
                 protected: frozenset[str] = frozenset()) -> list[ParamVerdict]:
    """Drop, keep or leave each parameter (``protected``: already kept by the rules in force)."""
    out = []
    for name in sorted(evidence):
        ev = evidence[name]
        if ev.counter == 0 and ev.support >= min_support and name.lower() not in protected:
            action = "drop"
        elif ev.counter >= min_support and name.lower() not in protected:
            action = "keep"
        else:
            action = "undecided"
        out.append(ParamVerdict(name, action, ev))
    return out


__all__ = ["ParamEvidence", "ParamTable", "ParamVerdict", "judge_params", "param_evidence"]
