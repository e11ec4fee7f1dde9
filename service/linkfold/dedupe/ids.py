"""Stable IDs for clusters: mint once, keep through merges and splits, resolve forever.

Given the previous assignment and a new clustering, :func:`assign_ids` computes the new assignment and
the events that explain every change (docs/dedupe.md, "Stable IDs"). The rules, from DESIGN.md:

* An ID is minted once, when a cluster first forms, from its founding member (the smallest member by
  ``founder_key``, then by value), and never reused: if the ID derived from that founder was ever
  issued before, a counter suffix ``-2``, ``-3``, … makes it new.
* Merge: a new cluster that holds the founders of several live IDs keeps the oldest of them (lowest
  mint order, then the ID itself); each other one is retired and maps forward to it.
* Split: the part of an old cluster that holds the founder keeps the ID; a part without any founder
  gets a new ID, minted from its own founding member, and an event says which ID(s) it split from.
* Founder moved: when a person moves a member out of an ID ("this URL is not in that cluster") and the
  member is the ID's founder, the caller names the remaining member that takes over (``handoff``); if
  the old founder and that member end up apart, the founder is handed over (event ``founder_moved``)
  and the ID stays with the rest, so the part the person left alone keeps its ID.

Invariant kept by these rules and checked by :func:`check_state`: every live ID's founder is assigned
to it. So each live ID is claimed by exactly one new cluster (the one with its founder) and either
survives there or merges; an ID never ends up with no members and no successor.
"""

from __future__ import annotations

import base64
import enum
import hashlib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

# 12 base32 characters = 60 bits of SHA-256: with ten million IDs the chance that two founders share a
# derived ID is about 4 in 100 000, and such a clash only costs a "-2" suffix, never a wrong answer.
DIGEST_CHARS = 12


class EventKind(enum.StrEnum):
    MINTED = "minted"
    MERGED_INTO = "merged_into"
    SPLIT_FROM = "split_from"
    FOUNDER_MOVED = "founder_moved"


@dataclass(frozen=True)
class IdEvent:
    """``minted``: ``id`` is new, founded by ``member``. ``merged_into``: ``id`` retired, maps to ``other``.
    ``split_from``: the new ``id`` took members that held ``other``, whose founder stayed behind.
    ``founder_moved``: ``id`` is now founded by ``member`` (its old founder was moved out by a person)."""

    kind: EventKind
    id: str
    other: str | None = None
    member: Any = None
    reason: str = ""


@dataclass(frozen=True)
class MemberChange:
    member: Any
    old: str | None
    new: str


@dataclass(frozen=True)
class IdState:
    """The registry of one ID family (articles or stories) as the pure algorithm sees it.

    ``assigned`` maps each member to its live ID; ``founders`` and ``order`` hold every ID ever issued
    (its founding member and mint order, smaller = older); ``successors`` maps each retired ID to the ID
    it was merged into.
    """

    assigned: Mapping[Any, str] = field(default_factory=dict)
    founders: Mapping[str, Any] = field(default_factory=dict)
    order: Mapping[str, int] = field(default_factory=dict)
    successors: Mapping[str, str] = field(default_factory=dict)

    def issued(self) -> set[str]:
        return set(self.order)

    def live(self) -> set[str]:
        return set(self.order) - set(self.successors)

    def resolve(self, id_: str) -> str:
        """The live ID that ``id_`` stands for today; raises ``KeyError`` for an ID never issued."""
        if id_ not in self.order:
            raise KeyError(id_)
        seen = {id_}
        while id_ in self.successors:
            id_ = self.successors[id_]
            if id_ in seen:
                raise ValueError(f"successor cycle through {id_!r}")
            seen.add(id_)
        return id_


@dataclass(frozen=True)
class IdUpdate:
    state: IdState
    events: list[IdEvent]
    changes: list[MemberChange]


def derive_id(prefix: str, founder: Any) -> str:
    """``prefix`` + the first 12 characters of lower-case base32 (RFC 4648 §6) of SHA-256(str(founder))."""
    digest = hashlib.sha256(str(founder).encode("utf-8")).digest()
    return prefix + base64.b32encode(digest).decode("ascii")[:DIGEST_CHARS].lower()


def mint_id(prefix: str, founder: Any, issued: set[str] | Mapping[str, Any]) -> str:
    base = derive_id(prefix, founder)
    if base not in issued:
        return base
    n = 2
    while f"{base}-{n}" in issued:
        n += 1
    return f"{base}-{n}"


def assign_ids(state: IdState, components: Iterable[Iterable[Any]], *, prefix: str,
               founder_key: Callable[[Any], Any] | None = None,
               handoff: Mapping[str, Any] | None = None) -> IdUpdate:
    """New assignment and events for ``components``, which must cover every member ``state`` assigns.

    Components are taken in sorted order, so events, mint order and counter suffixes are a function of
    the data alone.

    ``handoff`` maps a live ID to a member that holds it now and takes over as its founder when the old
    founder and that member land in different components (a person moved the founder out); otherwise
    the entry changes nothing, so a caller may pass it again on every run.
    """
    comps = sorted(tuple(sorted(c)) for c in components)
    seen: set[Any] = set()
    for comp in comps:
        for m in comp:
            if m in seen:
                raise ValueError(f"member {m!r} is in more than one component")
            seen.add(m)
    missing = [m for m in state.assigned if m not in seen]
    if missing:
        raise ValueError(f"{len(missing)} member(s) that hold IDs are in no component "
                         f"(e.g. {sorted(missing)[:3]!r}); pass singletons as one-member components")

    assigned = dict(state.assigned)
    founders = dict(state.founders)
    order = dict(state.order)
    successors = dict(state.successors)
    next_order = max(order.values(), default=0) + 1
    events: list[IdEvent] = []
    changes: list[MemberChange] = []

    def rank(m: Any) -> tuple[Any, Any]:
        return (founder_key(m), m) if founder_key else (m, m)

    if handoff:
        comp_of = {m: i for i, comp in enumerate(comps) for m in comp}
        live = state.live()
        for id_, heir in sorted(handoff.items()):
            old = founders.get(id_)
            if id_ not in live or state.assigned.get(heir) != id_ or old == heir:
                continue
            if comp_of.get(old) == comp_of[heir]:
                continue   # the founder did not leave: nothing to hand over
            founders[id_] = heir
            events.append(IdEvent(EventKind.FOUNDER_MOVED, id_, None, heir, "moved_out"))

    for comp in comps:
        members = set(comp)
        held = sorted({state.assigned[m] for m in comp if m in state.assigned})
        claims = [i for i in held if founders[i] in members]
        if claims:
            winner = min(claims, key=lambda i: (order[i], i))
            for loser in sorted(c for c in claims if c != winner):
                successors[loser] = winner
                events.append(IdEvent(EventKind.MERGED_INTO, loser, winner, None, "merge"))
        else:
            founder = min(comp, key=rank)
            winner = mint_id(prefix, founder, order)
            founders[winner] = founder
            order[winner] = next_order
            next_order += 1
            events.append(IdEvent(EventKind.MINTED, winner, None, founder, "split" if held else "new_cluster"))
            for parent in held:
                events.append(IdEvent(EventKind.SPLIT_FROM, winner, parent, None, "split"))
        for m in comp:
            old = state.assigned.get(m)
            if old != winner:
                assigned[m] = winner
                changes.append(MemberChange(m, old, winner))
    new_state = IdState(assigned=assigned, founders=founders, order=order, successors=successors)
    return IdUpdate(state=new_state, events=events, changes=changes)


def check_state(state: IdState) -> list[str]:
    """Problems with ``state`` (empty when consistent); the stage runs it before trusting stored IDs."""
    problems = []
    live = state.live()
    if set(state.founders) != set(state.order):
        problems.append("founders and mint order do not name the same IDs")
    for id_, succ in state.successors.items():
        if id_ not in state.order or succ not in state.order:
            problems.append(f"successor entry {id_!r} → {succ!r} names an ID never issued")
    for m, id_ in state.assigned.items():
        if id_ not in live:
            problems.append(f"member {m!r} holds {id_!r}, which is not live")
    for id_ in sorted(live):
        f = state.founders.get(id_)
        if state.assigned.get(f) != id_:
            problems.append(f"live ID {id_!r} does not hold its founder {f!r}")
    for id_ in sorted(state.successors):
        try:
            state.resolve(id_)
        except ValueError as exc:
            problems.append(str(exc))
    return problems
