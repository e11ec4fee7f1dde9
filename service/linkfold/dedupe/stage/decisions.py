"""Manual decisions: a person says two things are the same, or are not, and every later run obeys.

A reference is a URL (as loaded, or any spelling that canonicalises to a stored canonical URL), a url
key, or an article or story ID (any ID ever issued; a retired one is resolved to the live ID it maps to
now). Each side is anchored to one canonical URL, which never goes away: a URL or key anchors to itself,
an ID to its founder. The level is the story level when either side is a story ID, else the article
level. Decisions are append-only; the latest on a pair is in force, and the earlier ones stay in the log.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ...errors import InputError, NotFound
from ...ingest.lookup import lookup
from ...store import clusters as cs
from ...store import tables as t
from ...store.registry import now, utc

VERDICTS = ("same", "different")
MAX_NOTE = 2000


@dataclass(frozen=True)
class Anchor:
    ref: str
    member: int          # canonical URL id
    url: str
    cluster: str | None  # the live ID an ID reference resolved to
    level: str | None    # the level of an ID reference; None for a URL or key


@dataclass(frozen=True)
class Decision:
    id: int
    verdict: str
    level: str
    a: Anchor
    b: Anchor
    note: str | None
    decided_by: str


@dataclass(frozen=True)
class DecisionResult:
    decision: Decision
    supersedes: list[int]   # earlier decisions on the same pair, now out of force


def resolve_ref(engine: Engine, conn: Connection, ref: str) -> Anchor:
    text = ref.strip()
    if not text:
        raise InputError("an empty reference: give a URL, a url key or an article/story ID")
    if cs.is_cluster_id(text):
        res = cs.resolve(conn, text)
        if res is None:
            raise NotFound(f"{text}: no such article or story ID was ever issued")
        row = cs.id_rows(conn, [res.current])[res.current]
        url = conn.execute(sa.select(t.canonical_urls.c.url).where(t.canonical_urls.c.id == row["founder_id"])).scalar_one()
        return Anchor(text, int(row["founder_id"]), url, res.current, res.level)
    answer = next(iter(lookup(engine, [text])))
    if answer["error"] and not answer["url_key"]:
        raise InputError(f"{text}: not a URL, url key or ID the registry can read ({answer['error']})")
    if not answer["seen"] or not answer["url_key"]:
        raise NotFound(f"{text}: not in the registry (canonical form {answer['canonical']!r}); load it first")
    c = t.canonical_urls
    found = conn.execute(sa.select(c.c.id, c.c.url).where(c.c.url_key == answer["url_key"])).first()
    if found is None:
        raise NotFound(f"{text}: not in the registry")
    return Anchor(text, int(found.id), found.url, None, None)


def record_decision(engine: Engine, verdict: str, a_ref: str, b_ref: str, *, decided_by: str,
                    note: str | None = None) -> DecisionResult:
    """Store a decision (it takes effect at the next clustering: ``linkfold dedupe`` or the nightly job)."""
    if verdict not in VERDICTS:
        raise InputError(f"verdict must be one of {', '.join(VERDICTS)}, not {verdict!r}")
    who = (decided_by or "").strip()
    if not who:
        raise InputError("say who decided (--by NAME)")
    if note is not None and len(note) > MAX_NOTE:
        raise InputError(f"the note is {len(note)} characters; keep it under {MAX_NOTE}")
    with engine.connect() as conn:
        a, b = resolve_ref(engine, conn, a_ref), resolve_ref(engine, conn, b_ref)
    levels = {x.level for x in (a, b) if x.level}
    level = "story" if "story" in levels else "article"
    if a.member == b.member:
        if verdict == "different":
            raise InputError(f"{a_ref} and {b_ref} name the same canonical URL ({a.url}); it cannot be "
                             "separated from itself")
        raise InputError(f"{a_ref} and {b_ref} name the same canonical URL ({a.url}); nothing to join")
    if a.member > b.member:
        a, b = b, a
    with engine.begin() as conn:
        earlier = [d["id"] for d in cs.decision_history(conn, level, a.member, b.member)]
        new_id = cs.add_decision(conn, {
            "verdict": verdict, "level": level, "a_ref": a.ref, "b_ref": b.ref, "a_member": a.member,
            "b_member": b.member, "a_cluster": a.cluster, "b_cluster": b.cluster, "note": note,
            "decided_by": who[:200], "decided_at": now()})
    return DecisionResult(Decision(new_id, verdict, level, a, b, note, who[:200]), earlier)


def list_decisions(engine: Engine, *, limit: int | None = None) -> list[dict[str, Any]]:
    """Every decision, newest first, with whether it is still in force."""
    d, c1, c2 = t.decisions, t.canonical_urls.alias("ca"), t.canonical_urls.alias("cb")
    q = (sa.select(d, c1.c.url.label("a_url"), c2.c.url.label("b_url"))
         .select_from(d.join(c1, c1.c.id == d.c.a_member).join(c2, c2.c.id == d.c.b_member))
         .order_by(d.c.id.desc()))
    if limit:
        q = q.limit(limit)
    with engine.connect() as conn:
        rows = [dict(r) for r in conn.execute(q).mappings()]
        in_force: set[int] = set()
        for level in ("article", "story"):
            anchors = {x["a_member"] for x in rows if x["level"] == level}
            in_force.update(r["id"] for r in cs.decisions_touching(conn, level, anchors))
    for r in rows:
        r["in_force"] = r["id"] in in_force
        r["decided_at"] = utc(r["decided_at"])
    return rows


__all__ = ["VERDICTS", "Anchor", "Decision", "DecisionResult", "list_decisions", "record_decision",
           "resolve_ref"]
