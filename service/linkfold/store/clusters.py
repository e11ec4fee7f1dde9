"""Reads and writes of the ID registry: ``cluster_ids``, ``cluster_members``, ``id_events``, ``decisions``
and ``stage_marks``.

Every function works inside the caller's transaction. The pure ID algorithm (:mod:`linkfold.dedupe.ids`)
sees members as url keys; here they are canonical URL ids, and the dedupe stage translates at the edge.
Nothing here deletes: IDs are retired with a successor, events and decisions are append-only; only
``cluster_members`` (the current assignment) and ``stage_marks`` are updated in place.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .clock import utc
from .finals import finals_of

LEVELS = ("article", "story")
PREFIXES = {"article": "a", "story": "s"}
LIVE, RETIRED = "live", "retired"
_IN_CHUNK = 500  # ids per IN (…) list, under SQLite's default limit of bound parameters
#: The shape of an ID (docs/dedupe.md §8): prefix, 12 base32 characters, optional counter suffix.
ID_RE = re.compile(r"[as][a-z2-7]{12}(?:-[1-9][0-9]*)?")


def is_cluster_id(text: str) -> bool:
    return ID_RE.fullmatch(text) is not None


def chunks(items: Sequence[Any], size: int = _IN_CHUNK) -> Iterator[Sequence[Any]]:
    for i in range(0, len(items), size):
        yield items[i:i + size]


def level_of_id(cluster_id: str) -> str | None:
    """``article`` for ``a…``, ``story`` for ``s…`` (the shape docs/dedupe.md gives), else ``None``."""
    for level, prefix in PREFIXES.items():
        if cluster_id.startswith(prefix):
            return level
    return None


def stem_of(cluster_id: str) -> str:
    """The ID without its counter suffix: ``a…-2`` → ``a…``."""
    return cluster_id.split("-", 1)[0]


# --- stage marks ---------------------------------------------------------------------------------------
def get_mark(conn: Connection, name: str) -> int | None:
    return conn.execute(sa.select(t.stage_marks.c.value).where(t.stage_marks.c.name == name)).scalar()


def set_mark(conn: Connection, name: str, value: int, *, run_id: int | None, now: datetime) -> None:
    m = t.stage_marks
    done = conn.execute(m.update().where(m.c.name == name).values(value=value, run_id=run_id, updated_at=now))
    if done.rowcount == 0:
        conn.execute(m.insert().values(name=name, value=value, run_id=run_id, updated_at=now))


# --- assignments -----------------------------------------------------------------------------------------
def assignments(conn: Connection, level: str, canonical_ids: Iterable[int]) -> dict[int, str]:
    """Current ID of each of ``canonical_ids`` that has one."""
    cm = t.cluster_members
    out: dict[int, str] = {}
    for part in chunks(sorted(set(canonical_ids))):
        out.update((int(c), i) for c, i in conn.execute(
            sa.select(cm.c.canonical_id, cm.c.cluster_id).where(cm.c.level == level, cm.c.canonical_id.in_(part))))
    return out


def members_of(conn: Connection, cluster_ids: Iterable[str]) -> dict[int, str]:
    """Every current member (canonical id → ID) of the given IDs."""
    cm = t.cluster_members
    out: dict[int, str] = {}
    for part in chunks(sorted(set(cluster_ids))):
        out.update((int(c), i) for c, i in conn.execute(
            sa.select(cm.c.canonical_id, cm.c.cluster_id).where(cm.c.cluster_id.in_(part))))
    return out


def id_rows(conn: Connection, ids: Iterable[str]) -> dict[str, dict[str, Any]]:
    ci = t.cluster_ids
    out: dict[str, dict[str, Any]] = {}
    for part in chunks(sorted(set(ids))):
        for row in conn.execute(sa.select(ci).where(ci.c.id.in_(part))).mappings():
            out[row["id"]] = dict(row)
    return out


def issued_with_stems(conn: Connection, stems: Iterable[str]) -> dict[str, int]:
    """Every issued ID (any level) whose stem is one of ``stems``, with its mint order: what a new mint
    must not repeat."""
    ci = t.cluster_ids
    out: dict[str, int] = {}
    for part in chunks(sorted(set(stems))):
        out.update((i, int(o)) for i, o in conn.execute(
            sa.select(ci.c.id, ci.c.mint_order).where(ci.c.stem.in_(part))))
    return out


def any_clustered(conn: Connection) -> bool:
    """Whether any canonical URL holds an ID yet (False on a registry never clustered)."""
    return conn.execute(sa.select(t.cluster_members.c.canonical_id).limit(1)).first() is not None


def max_mint_order(conn: Connection, level: str) -> int:
    ci = t.cluster_ids
    return int(conn.execute(sa.select(sa.func.max(ci.c.mint_order)).where(ci.c.level == level)).scalar() or 0)


@dataclass(frozen=True)
class NewId:
    id: str
    founder_id: int
    mint_order: int


@dataclass(frozen=True)
class EventRow:
    cluster_id: str
    event: str
    other_id: str | None
    member_id: int | None
    reason: str


def write_ids(conn: Connection, level: str, *, minted: Sequence[NewId], retired: Mapping[str, str],
              moves: Mapping[int, str], events: Sequence[EventRow], run_id: int | None, now: datetime,
              founders: Mapping[str, int] | None = None) -> None:
    """Apply one clustering result: new IDs, retired IDs (→ successor), member moves, new founders of
    live IDs (a founder moved out by a person), and their events."""
    ci, cm = t.cluster_ids, t.cluster_members
    if founders:
        conn.execute(ci.update().where(ci.c.id == sa.bindparam("b_id")).values(founder_id=sa.bindparam("b_f")),
                     [{"b_id": i, "b_f": f} for i, f in sorted(founders.items())])
    if minted:
        conn.execute(ci.insert(), [
            {"id": n.id, "level": level, "stem": stem_of(n.id), "founder_id": n.founder_id,
             "mint_order": n.mint_order, "state": LIVE, "successor": None, "minted_run": run_id,
             "minted_at": now, "retired_run": None, "retired_at": None} for n in minted])
    if retired:
        conn.execute(ci.update().where(ci.c.id == sa.bindparam("b_id")).values(
            state=RETIRED, successor=sa.bindparam("b_succ"), retired_run=run_id, retired_at=now),
            [{"b_id": old, "b_succ": new} for old, new in sorted(retired.items())])
    if moves:
        have = set(assignments(conn, level, moves))
        updates = [{"b_cid": c, "b_id": i} for c, i in sorted(moves.items()) if c in have]
        inserts = [{"level": level, "canonical_id": c, "cluster_id": i, "run_id": run_id}
                   for c, i in sorted(moves.items()) if c not in have]
        if updates:
            conn.execute(cm.update().where(cm.c.level == level, cm.c.canonical_id == sa.bindparam("b_cid"))
                         .values(cluster_id=sa.bindparam("b_id"), run_id=run_id), updates)
        if inserts:
            conn.execute(cm.insert(), inserts)
    if events:
        conn.execute(t.id_events.insert(), [
            {"cluster_id": e.cluster_id, "event": e.event, "other_id": e.other_id, "member_id": e.member_id,
             "reason": e.reason, "run_id": run_id, "at": now} for e in events])


# --- resolving IDs -----------------------------------------------------------------------------------------
def events_of(conn: Connection, cluster_ids: Iterable[str]) -> list[dict[str, Any]]:
    """Events naming any of the IDs, as subject or as the other side, oldest first."""
    e = t.id_events
    rows: dict[int, dict[str, Any]] = {}
    for part in chunks(sorted(set(cluster_ids))):
        q = sa.select(e).where(sa.or_(e.c.cluster_id.in_(part), e.c.other_id.in_(part)))
        for row in conn.execute(q).mappings():
            rows[row["id"]] = dict(row) | {"at": utc(row["at"])}
    return [rows[k] for k in sorted(rows)]


@dataclass(frozen=True)
class Resolution:
    """Where an issued ID stands today: ``current`` is the live ID it maps to; ``path`` the IDs passed
    through (``id`` first, ``current`` last); ``events`` what happened to each of them."""

    id: str
    level: str
    current: str
    path: list[str]
    events: list[dict[str, Any]]


def resolve(conn: Connection, cluster_id: str) -> Resolution | None:
    """Follow ``merged_into`` successors from an ID ever issued to the live one (``None``: never issued)."""
    rows = id_rows(conn, [cluster_id])
    if cluster_id not in rows:
        return None
    level = rows[cluster_id]["level"]
    path = [cluster_id]
    row = rows[cluster_id]
    while row["state"] == RETIRED and row["successor"]:
        nxt = row["successor"]
        if nxt in path:
            raise RuntimeError(f"successor cycle through {nxt!r} in cluster_ids")
        path.append(nxt)
        row = id_rows(conn, [nxt])[nxt]
    events = [ev for ev in events_of(conn, path) if ev["cluster_id"] in path]
    return Resolution(id=cluster_id, level=level, current=path[-1], path=path, events=events)


def current_ids(conn: Connection, canonical_ids: Iterable[int]) -> dict[int, tuple[str | None, str | None]]:
    """(article ID, story ID) of each canonical URL that has one, for lookup and export."""
    cm = t.cluster_members
    out: dict[int, list[str | None]] = {}
    for part in chunks(sorted(set(canonical_ids))):
        for cid, level, cluster_id in conn.execute(
                sa.select(cm.c.canonical_id, cm.c.level, cm.c.cluster_id).where(cm.c.canonical_id.in_(part))):
            out.setdefault(int(cid), [None, None])[0 if level == "article" else 1] = cluster_id
    return {k: (v[0], v[1]) for k, v in out.items()}


__all__ = [
    "ID_RE",
    "LEVELS",
    "LIVE",
    "PREFIXES",
    "RETIRED",
    "EventRow",
    "NewId",
    "Resolution",
    "any_clustered",
    "assignments",
    "chunks",
    "current_ids",
    "events_of",
    "get_mark",
    "id_rows",
    "is_cluster_id",
    "issued_with_stems",
    "level_of_id",
    "max_mint_order",
    "members_of",
    "resolve",
    "set_mark",
    "stem_of",
    "write_ids",
]


def cluster_size_counts(conn: Connection, level: str) -> dict[int, int]:
    """How many clusters of ``level`` have each size (members counted in ``cluster_members``)."""
    cm = t.cluster_members
    sizes = (sa.select(sa.func.count().label("size")).where(cm.c.level == level)
             .group_by(cm.c.cluster_id).subquery())
    q = sa.select(sizes.c.size, sa.func.count()).group_by(sizes.c.size)
    return {int(size): int(n) for size, n in conn.execute(q)}


#: Most members a cluster summary lists; ``size`` always counts them all.
SUMMARY_MEMBERS = 1000


def cluster_summaries(conn: Connection, ids: Iterable[str], *,
                      max_members: int = SUMMARY_MEMBERS) -> dict[str, dict[str, Any]]:
    """For live IDs: what the cluster is — ``id``, ``level``, ``size``, ``founder`` (URL), ``title`` (of the
    founder's current document, else of the first member with one), ``outlets`` (the members' final outlets,
    sorted, as every per-outlet count of the tool), ``members`` (``url``, ``url_key``, ``outlet``,
    ``final_url``, ``final_outlet``, ``founder``; founder first, then by URL; at most ``max_members``) and
    ``members_truncated``."""
    wanted = sorted(set(ids))
    if not wanted:
        return {}
    rows = id_rows(conn, wanted)
    cm, c, d = t.cluster_members, t.canonical_urls, t.documents
    # Pairs, not members_of's mapping: one URL is a member at both levels, and both may be asked at once.
    pairs: list[tuple[int, str]] = []
    for part in chunks(wanted):
        pairs.extend((int(m), i) for m, i in conn.execute(
            sa.select(cm.c.canonical_id, cm.c.cluster_id).where(cm.c.cluster_id.in_(part))))
    urls: dict[int, Any] = {}
    titles: dict[int, str] = {}
    for part in chunks(sorted({m for m, _ in pairs})):
        urls.update((int(r.id), r) for r in conn.execute(
            sa.select(c.c.id, c.c.url, c.c.url_key, c.c.outlet).where(c.c.id.in_(part))))
        # Ascending ids: the newest usable document of a URL wins, as everywhere else.
        for cid, title in conn.execute(sa.select(d.c.canonical_id, d.c.title).where(
                d.c.canonical_id.in_(part), d.c.state == "usable", d.c.title.is_not(None)).order_by(d.c.id)):
            titles[int(cid)] = title
    final = finals_of(conn, [m for m, _ in pairs])
    by_id: dict[str, list[int]] = {i: [] for i in wanted}
    for m, cid in pairs:
        by_id[cid].append(m)
    out: dict[str, dict[str, Any]] = {}
    for cid in wanted:
        row = rows.get(cid)
        if row is None:
            continue
        founder = int(row["founder_id"])
        ordered = sorted(by_id[cid], key=lambda m: (m != founder, urls[m].url))
        title = titles.get(founder) or next((titles[m] for m in ordered if m in titles), None)
        founder_url = urls[founder].url if founder in urls else None
        if founder_url is None:  # a founder moved out by a decision: its URL still names the cluster's origin
            founder_url = conn.execute(sa.select(c.c.url).where(c.c.id == founder)).scalar()
        out[cid] = {
            # founder: the old name of founder_url (as the cluster listing says), kept for one release.
            "id": cid, "level": row["level"], "size": len(ordered), "founder_url": founder_url, "title": title,
            "outlets": sorted({final[m]["final_outlet"] for m in ordered if final[m]["final_outlet"]}),
            "members": [{"url": urls[m].url, "url_key": urls[m].url_key, "outlet": urls[m].outlet,
                         "final_url": final[m]["final_url"], "final_outlet": final[m]["final_outlet"],
                         "founder": m == founder} for m in ordered[:max_members]],
            "members_truncated": len(ordered) > max_members,
            "founder": founder_url,
        }
    return out
