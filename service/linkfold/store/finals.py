"""What a link stands for: the *final URL* of each canonical URL, after short links and redirects.

Wrappers need nothing here: the canonicaliser unwraps them, so a wrapper's canonical URL already is its
target. Redirects and short links are resolved from ``follow_results``, the latest follow outcome per
canonical URL (fetched, learned from another chain, or imported as a (short, expanded) pair). Its
``final_id``, when it names another URL, is an *edge* of a walk: a resolved chain leads there; a chain
that stopped (failed or refused) is walked on only for what is resolved beyond the URL it stopped at.
``canonical_urls.final_id`` stores where the walk ends, the target of the last resolved chain on it
(so a short link whose expansion is another short link, followed or imported later, leads where that
one leads), or NULL when no resolved chain leads elsewhere (never followed, failed, refused, or a cycle
of imported pairs).

The final columns are then read, never stored per sighting:

* ``final_id`` NULL: the URL stands for itself;
* else it stands for the URL ``final_id`` names (a redirect to a non-article page, a subscribe or home
  page, is where the link leads: its ``is_article`` says what it is);
* either way, when the URL it stands for is on a shortener host of the newest ruleset
  (``ruleset_hosts``), nothing is known yet: every final column is NULL, not the shortener's own.

:func:`refresh_finals` keeps ``final_id`` current for the URLs whose outcomes a batch wrote and for every
URL whose walk passes through them (found through the index on ``follow_results.final_id``); the follow
stage and the redirect import call it in the transaction of their results. :func:`refresh_all_finals`
recomputes every row (``linkfold db refresh-finals``; migration 0012 did the same once).
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from . import tables as t

SHORTENER = "shortener"
#: The final columns, in the order the view, the export and lookup give them.
FINAL_COLUMNS = ("final_url", "final_domain", "final_outlet", "final_is_article")
_IN_CHUNK = 500
#: Rounds of "where does that lead" before a walk gives up; far beyond any real chain of chains.
MAX_DEPTH = 64


def _chunks(items: Sequence[Any]) -> Iterator[Sequence[Any]]:
    for i in range(0, len(items), _IN_CHUNK):
        yield items[i:i + _IN_CHUNK]


# --- the hosts a ruleset gives a role -------------------------------------------------------------------
def store_ruleset_hosts(conn: Connection, ruleset_id: int, shortener_hosts: Iterable[str]) -> None:
    """Record the shortener hosts of ruleset ``ruleset_id`` (idempotent)."""
    rh = t.ruleset_hosts
    have = set(conn.execute(sa.select(rh.c.host).where(rh.c.ruleset_id == ruleset_id,
                                                        rh.c.role == SHORTENER)).scalars())
    rows = [{"ruleset_id": ruleset_id, "role": SHORTENER, "host": h} for h in sorted(set(shortener_hosts) - have)]
    if rows:
        conn.execute(sa.insert(rh), rows)


# --- reading the final columns ---------------------------------------------------------------------------
def list_in_force() -> sa.ScalarSelect[Any]:
    """The version of the outlet list in force (the newest ``outlet_lists`` row; NULL without one)."""
    return sa.select(sa.func.max(t.outlet_lists.c.id)).scalar_subquery()


@dataclass(frozen=True)
class FinalsJoin:
    """How a query reads the final columns of canonical URL ``c`` (the table or an alias): outer joins,
    ``f`` the URL that ``c.final_id`` names, ``sh`` the shortener host of the newest ruleset that URL
    (or ``c`` itself) is on, and ``oh`` / ``od`` the entries of the outlet list in force for that URL's
    host and registered domain (docs/outlets.md), at most one row each (unique keys), then a CASE per
    column. The final outlet is the list's when it names the final URL's host or domain, else the
    canonicaliser's."""

    c: Any
    f: Any
    sh: Any
    oh: Any = None
    od: Any = None

    @classmethod
    def of(cls, c: Any) -> FinalsJoin:
        return cls(c, t.canonical_urls.alias("fc"), t.ruleset_hosts.alias("sh"),
                   t.outlet_entries.alias("foh"), t.outlet_entries.alias("fod"))

    def join(self, base: Any) -> Any:
        """``base`` (a FROM clause holding ``c``) with the outer joins."""
        c, f, sh, oh, od = self.c, self.f, self.sh, self.oh, self.od
        newest = sa.select(sa.func.max(t.rulesets.c.id)).scalar_subquery()
        in_force = list_in_force()
        return (base.outerjoin(f, f.c.id == c.c.final_id)
                .outerjoin(sh, sa.and_(sh.c.host == sa.func.coalesce(f.c.host, c.c.host), sh.c.role == SHORTENER,
                                       sh.c.ruleset_id == newest))
                .outerjoin(oh, sa.and_(oh.c.list_id == in_force, oh.c.match == sa.func.coalesce(f.c.host, c.c.host)))
                .outerjoin(od, sa.and_(od.c.list_id == in_force,
                                       od.c.match == sa.func.coalesce(f.c.domain, c.c.domain))))

    def column(self, column: str) -> sa.ColumnElement[Any]:
        """One of url, domain, outlet, is_article of the URL that ``c`` stands for."""
        c, f = self.c, self.f
        own: sa.ColumnElement[Any] = sa.case((c.c.final_id.is_(None), c.c[column]), else_=f.c[column])
        if column == "outlet":
            own = sa.func.coalesce(self.oh.c.outlet, self.od.c.outlet, own)
        picked = sa.case((self.sh.c.host.is_not(None), sa.null()), else_=own)
        return sa.type_coerce(picked, t.canonical_urls.c[column].type)  # SQLite hands truth values back as 0/1

    def columns(self) -> list[sa.ColumnElement[Any]]:
        """The four final columns, labelled as :data:`FINAL_COLUMNS`."""
        return [self.column(col).label(name)
                for col, name in zip(("url", "domain", "outlet", "is_article"), FINAL_COLUMNS, strict=True)]


def listed_outlets(conn: Connection, keys: Iterable[str]) -> dict[str, str]:
    """Hosts and registered domains among ``keys`` that the outlet list in force names -> their outlet
    (for outlets computed in memory, such as a URL never loaded: host first, then domain)."""
    oe = t.outlet_entries
    version = conn.execute(sa.select(list_in_force())).scalar()
    out: dict[str, str] = {}
    if version is None:
        return out
    for part in _chunks(sorted(set(keys))):
        out.update((m, o) for m, o in conn.execute(sa.select(oe.c.match, oe.c.outlet).where(
            oe.c.list_id == version, oe.c.match.in_(part))))
    return out


def finals_of(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, dict[str, Any]]:
    """The final columns of canonical URLs by id."""
    c = t.canonical_urls
    fj = FinalsJoin.of(c)
    out: dict[int, dict[str, Any]] = {}
    for part in _chunks(sorted(set(canonical_ids))):
        q = sa.select(c.c.id, *fj.columns()).select_from(fj.join(c)).where(c.c.id.in_(part))
        for row in conn.execute(q).mappings():
            out[int(row["id"])] = {name: row[name] for name in FINAL_COLUMNS}
    return out


# --- keeping final_id current ------------------------------------------------------------------------------
#: An edge of the walk: where a URL's latest follow outcome says it leads, and whether that chain resolved.
Edge = tuple[int, bool]


def edges_of(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, Edge]:
    """The outgoing edge of each of ``canonical_ids`` that has one: ``follow_results.final_id`` when it
    names another URL, with whether the outcome is ``resolved`` (else the chain stopped there: failed or
    refused)."""
    fr = t.follow_results
    out: dict[int, Edge] = {}
    for part in _chunks(sorted(set(canonical_ids))):
        q = sa.select(fr.c.canonical_id, fr.c.final_id, fr.c.state).where(
            fr.c.canonical_id.in_(part), fr.c.final_id.is_not(None), fr.c.final_id != fr.c.canonical_id)
        for src, dst, state in conn.execute(q):
            out[int(src)] = (int(dst), state == "resolved")
    return out


def _edges(conn: Connection, start: Iterable[int]) -> dict[int, Edge]:
    """Every edge reachable from ``start``."""
    edges: dict[int, Edge] = {}
    seen: set[int] = set()
    frontier = set(start)
    for _ in range(MAX_DEPTH):
        frontier -= seen
        if not frontier:
            break
        seen |= frontier
        found = edges_of(conn, frontier)
        edges.update(found)
        frontier = {dst for dst, _resolved in found.values()}
    return edges


def _sources(conn: Connection, targets: Iterable[int]) -> set[int]:
    """Every URL whose walk reaches one of ``targets`` (through the index on ``follow_results.final_id``)."""
    fr = t.follow_results
    out: set[int] = set()
    frontier = set(targets)
    for _ in range(MAX_DEPTH):
        found: set[int] = set()
        for part in _chunks(sorted(frontier)):
            found.update(int(i) for i in conn.execute(sa.select(fr.c.canonical_id).where(
                fr.c.final_id.in_(part), fr.c.final_id != fr.c.canonical_id)).scalars())
        frontier = found - out
        if not frontier:
            break
        out |= frontier
    return out


def end_of(start: int, edges: Mapping[int, Edge]) -> int | None:
    """Where ``start`` leads in the end: the URL the last resolved chain on its walk ended at. None when
    no resolved chain leads anywhere from it (it stands for itself) or the walk runs into a cycle.

    A chain that stopped (a short link whose expansion is another short link that could not be fetched)
    is walked on, so that when the URL it stopped at is resolved later (by an import), the first link
    leads there too; a stop with nothing resolved after it leads nowhere.
    """
    end = None
    path = {start}
    here = start
    while here in edges:
        here, resolved = edges[here]
        if here in path or len(path) > MAX_DEPTH:
            return None  # a cycle (possible only through imported pairs): no end is known
        path.add(here)
        if resolved:
            end = here
    return end


def refresh_finals(conn: Connection, changed: Iterable[int], *,
                   edges_before: Mapping[int, Edge] | None = None) -> int:
    """Recompute ``final_id`` for the canonical URLs in ``changed`` (their follow outcomes were just
    written) and for every URL whose walk passes through one whose edge or end moved. Runs in the
    caller's transaction; returns the number of rows changed.

    ``edges_before`` is :func:`edges_of` ``changed`` taken before the outcomes were written: with it, a
    URL whose edge is as it was and whose end did not move (the subscribe page a thousand ad clicks end
    at, learned again from each new chain) moves nothing upstream; without it, every one with an edge
    is taken to have a new one.
    """
    c = t.canonical_urls
    changed = sorted(set(changed))
    if not changed:
        return 0
    current = _current(conn, c.c.id, changed)
    edges = _edges(conn, current)
    moved = _write(conn, current, edges)
    if edges_before is None:
        news = {cid for cid in current if cid in edges}
    else:
        news = {cid for cid in current if edges.get(cid) != edges_before.get(cid)}
    upstream = sorted(_sources(conn, news | set(moved)) - set(current))
    return len(moved) + len(_write(conn, _current(conn, c.c.id, upstream)))


def _current(conn: Connection, column: Any, values: Sequence[int]) -> dict[int, int | None]:
    """Stored ``final_id`` by canonical id, for the rows whose ``column`` is one of ``values``."""
    c = t.canonical_urls
    out: dict[int, int | None] = {}
    for part in _chunks(values):
        out.update((int(i), fin) for i, fin in conn.execute(sa.select(c.c.id, c.c.final_id).where(column.in_(part))))
    return out


def _write(conn: Connection, current: dict[int, int | None],
           edges: Mapping[int, Edge] | None = None) -> dict[int, int | None]:
    """Store the ends of the URLs in ``current`` (id -> stored final_id); return the old value of each row
    that changed. ``edges``: those reachable from ``current``, when the caller has them."""
    if not current:
        return {}
    if edges is None:
        edges = _edges(conn, current)
    moved: dict[int, int | None] = {}
    updates = []
    for cid, old in current.items():
        new = end_of(cid, edges)
        if new != old:
            moved[cid] = old
            updates.append({"b_id": cid, "final_id": new})
    if updates:
        c = t.canonical_urls
        conn.execute(sa.update(c).where(c.c.id == sa.bindparam("b_id")).values(final_id=sa.bindparam("final_id")),
                     updates)
    return moved


def refresh_all_finals(conn: Connection, *, batch: int = 20000) -> int:
    """Recompute ``final_id`` for every canonical URL that has one or a follow outcome leading elsewhere;
    returns the number of rows changed. For a registry whose evidence was changed by other means, or to
    check (``linkfold db refresh-finals``)."""
    c, fr = t.canonical_urls, t.follow_results
    candidates = sa.union(
        sa.select(fr.c.canonical_id.label("id")).where(fr.c.final_id.is_not(None),
                                                       fr.c.final_id != fr.c.canonical_id),
        sa.select(c.c.id).where(c.c.final_id.is_not(None))).subquery()
    ids = sorted(int(i) for i in conn.execute(sa.select(candidates.c.id)).scalars())
    changed = 0
    for i in range(0, len(ids), batch):
        changed += len(_write(conn, _current(conn, c.c.id, ids[i:i + batch])))
    return changed


def recompute_finals(engine: Engine) -> int:
    """:func:`refresh_all_finals` in a transaction of its own."""
    with engine.begin() as conn:
        return refresh_all_finals(conn)


__all__ = [
    "FINAL_COLUMNS",
    "SHORTENER",
    "Edge",
    "FinalsJoin",
    "edges_of",
    "end_of",
    "finals_of",
    "list_in_force",
    "listed_outlets",
    "recompute_finals",
    "refresh_all_finals",
    "refresh_finals",
    "store_ruleset_hosts",
]
