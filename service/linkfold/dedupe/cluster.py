"""Clustering with constraints: union-find over evidence edges that obeys manual decisions.

The rule (docs/dedupe.md, "Clustering"):

1. Manual "same" decisions (must-links) are applied first, in order of their member pair.
2. Evidence edges follow, strongest first; equal strengths in order of their member pair. Sorting is
   what makes the result a function of the data alone, not of the order rows came out of a query.
3. A union that would put into one component two members that a person separated (a cannot-link)
   is refused and reported. This holds for must-links too: when manual decisions contradict each
   other, the separation wins and the refused "same" decision is reported as a conflict for a
   person to settle, since wrongly joining two clusters spreads to everything that joins them later.

Members are any hashable, orderable values (url keys for articles, article IDs for stories).
"""

from __future__ import annotations

from collections.abc import Hashable, Iterable
from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class Edge:
    """Evidence that ``a`` and ``b`` belong together; ``strength`` orders edges, ``kind`` explains them."""

    a: Any
    b: Any
    strength: float = 1.0
    kind: str = "similar"


@dataclass(frozen=True)
class Refusal:
    """An edge that was not applied because it would join members a person separated."""

    edge: Edge
    manual: bool            # True when the refused edge was itself a manual "same" decision (a conflict)
    separated: tuple[Any, Any]   # the cannot-link pair that blocked it


@dataclass
class Clustering:
    components: list[tuple[Any, ...]]   # each sorted; the list sorted by first member
    refused: list[Refusal] = field(default_factory=list)

    def component_of(self) -> dict[Any, int]:
        return {m: i for i, comp in enumerate(self.components) for m in comp}


def _pair(a: Any, b: Any) -> tuple[Any, Any]:
    return (a, b) if a <= b else (b, a)


class _UnionFind:
    def __init__(self, members: Iterable[Hashable]) -> None:
        self.parent: dict[Any, Any] = {m: m for m in members}
        self.size: dict[Any, int] = dict.fromkeys(self.parent, 1)
        # root → cannot-link partners (members, not roots: roots change as components merge)
        self.apart: dict[Any, set[Any]] = {}

    def find(self, x: Any) -> Any:
        parent = self.parent
        while parent[x] != x:
            parent[x] = parent[parent[x]]   # path halving
            x = parent[x]
        return x

    def union(self, ra: Any, rb: Any) -> None:
        if self.size[ra] < self.size[rb]:
            ra, rb = rb, ra
        self.parent[rb] = ra
        self.size[ra] += self.size[rb]
        moved = self.apart.pop(rb, None)
        if moved:
            self.apart.setdefault(ra, set()).update(moved)


def cluster(members: Iterable[Any], edges: Iterable[Edge], *,
            must_link: Iterable[tuple[Any, Any]] = (),
            cannot_link: Iterable[tuple[Any, Any]] = ()) -> Clustering:
    """Components of ``members`` under ``edges`` and the manual decisions; deterministic."""
    uf = _UnionFind(members)
    known = uf.parent

    def check(*ms: Any) -> None:
        for m in ms:
            if m not in known:
                raise ValueError(f"edge or decision names {m!r}, which is not among the members")

    apart_pairs: set[tuple[Any, Any]] = set()
    for a, b in cannot_link:
        check(a, b)
        if a == b:
            raise ValueError(f"a member cannot be separated from itself: {a!r}")
        apart_pairs.add(_pair(a, b))
    # Partners are filed under each member's current root; at this point every member is its own root.
    for a, b in apart_pairs:
        uf.apart.setdefault(a, set()).add(b)
        uf.apart.setdefault(b, set()).add(a)

    refused: list[Refusal] = []

    def apply(edge: Edge, manual: bool) -> None:
        ra, rb = uf.find(edge.a), uf.find(edge.b)
        if ra == rb:
            return
        block = _find_block(uf, ra, rb, apart_pairs)
        if block is not None:
            refused.append(Refusal(edge, manual, block))
            return
        uf.union(ra, rb)

    musts = sorted({_pair(a, b) for a, b in must_link if a != b})
    for a, b in musts:
        check(a, b)
        apply(Edge(a, b, 1.0, "manual"), True)
    normalised: list[Edge] = []
    for e in edges:
        check(e.a, e.b)
        if e.a != e.b:
            lo, hi = _pair(e.a, e.b)
            normalised.append(Edge(lo, hi, float(e.strength), e.kind))
    normalised.sort(key=lambda e: (-e.strength, e.a, e.b, e.kind))
    for e in normalised:
        apply(e, False)

    groups: dict[Any, list[Any]] = {}
    for m in known:
        groups.setdefault(uf.find(m), []).append(m)
    components = sorted(tuple(sorted(g)) for g in groups.values())
    return Clustering(components=components, refused=refused)


def _find_block(uf: _UnionFind, ra: Any, rb: Any, apart_pairs: set[tuple[Any, Any]]) -> tuple[Any, Any] | None:
    small, other = (ra, rb) if len(uf.apart.get(ra, ())) <= len(uf.apart.get(rb, ())) else (rb, ra)
    hits = []
    for partner in uf.apart.get(small, ()):
        if uf.find(partner) == other:
            hits.append(partner)
    if not hits:
        return None
    # Report the smallest blocking pair so the report, too, is deterministic.
    pairs = []
    for partner in hits:
        for x in uf.apart.get(other, ()):
            if _pair(partner, x) in apart_pairs and uf.find(x) == small:
                pairs.append(_pair(partner, x))
    return min(pairs)

