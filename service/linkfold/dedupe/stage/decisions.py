"""Manual decisions: a person says two things are the same, or are not, and every later run obeys.

A reference is a URL (as loaded, or any spelling that canonicalises to a stored canonical URL), a url
key, or an article or story ID (any ID ever issued; a retired one is resolved to the live ID it maps to
now). Each side is anchored to one canonical URL, which never goes away: a URL or key anchors to itself,
an ID to a member of the cluster it names (its founder, unless the founder is the member being moved).

The level follows from what is named (docs/dedupe.md §10.6): a story ID → story level; an article ID →
article level; two URLs or keys on one outlet → article level; on different outlets → story level (a
story-level fact), unless they share an article now (a short link and its target), or ``level`` says
otherwise; the outlet is the one a URL stands for after short links and redirects (its final outlet).
"different URL ID" at the ID's level is a *move-out*: the URL (at story level, its article) leaves the
cluster and the ID stays with the rest, founder or not. Decisions are append-only; the latest
on a pair is in force, and the earlier ones stay in the log.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ...errors import InputError
from ...store import canonicals as cu
from ...store import clusters as cs
from ...store import decisions as ds
from ...store.clock import now, utc
from ...store.finals import finals_of
from ...store.lookup import locate
from ...store.migrate import require_schema

VERDICTS = ("same", "different")
LEVELS = ("article", "story")
MAX_NOTE = 2000
#: What a decision does to the clusters as they stand (it is kept and obeyed by every run either way).
CHANGES, ALREADY_SEPARATE, ALREADY_TOGETHER = "changes", "already_separate", "already_together"


@dataclass(frozen=True)
class Anchor:
    ref: str
    member: int          # canonical URL id
    url: str
    cluster: str | None  # the live ID an ID reference resolved to
    level: str | None    # the level of an ID reference; None for a URL or key
    outlet: str | None = None   # the outlet of what the URL stands for (its final outlet); None: not known


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
    level_reason: str = ""  # why this level: what was named, or the option given
    effect: str = CHANGES   # CHANGES, ALREADY_SEPARATE or ALREADY_TOGETHER (as the clusters stand now)
    message: str = ""       # one line for a person: level, what the next run will do

    def as_dict(self) -> dict[str, Any]:
        d = self.decision
        return {"decision": d.id, "verdict": d.verdict, "level": d.level, "level_reason": self.level_reason,
                "effect": self.effect, "a": {"ref": d.a.ref, "url": d.a.url, "id": d.a.cluster},
                "b": {"ref": d.b.ref, "url": d.b.url, "id": d.b.cluster}, "note": d.note,
                "decided_by": d.decided_by, "supersedes": self.supersedes, "message": self.message}


def resolve_ref(engine: Engine, conn: Connection, ref: str) -> Anchor:
    """The anchor of one side of a decision: what ``ref`` names, found the way lookup finds it."""
    found = locate(engine, conn, ref)
    return Anchor(found.ref, found.canonical_id, found.url, found.cluster, found.level, found.outlet)


def decision_level(a: Anchor, b: Anchor, *, same_article: bool, level: str | None = None) -> tuple[str, str]:
    """(level, why) of a decision between ``a`` and ``b`` (``same_article``: both share an article ID now)."""
    if level is not None and level not in LEVELS:
        raise InputError(f"level must be one of {', '.join(LEVELS)}, not {level!r}")
    id_levels = {x.level for x in (a, b) if x.level}
    if level == "article" and "story" in id_levels:
        raise InputError("a story ID names a story: a decision about it is at the story level, not "
                         "--level article (name an article ID or a URL instead)")
    if level is not None:
        return level, f"--level {level}"
    if "story" in id_levels:
        return "story", "a story ID is named"
    if id_levels:
        return "article", "an article ID is named"
    if same_article:
        return "article", "both URLs are in one article now"
    if a.outlet is None or b.outlet is None:
        return "article", "the outlet a URL stands for is not known yet (a short link not followed)"
    if a.outlet == b.outlet:
        return "article", f"two URLs on one outlet: {a.outlet}"
    return "story", f"two URLs on different outlets: {a.outlet}, {b.outlet}"


def _held(conn: Connection, level: str, members: list[int]) -> dict[int, str]:
    return cs.assignments(conn, level, members)


def _names_level(cluster_id: str | None, level: str) -> bool:
    return bool(cluster_id) and cs.level_of_id(cluster_id or "") == level


def _anchor_cluster_side(conn: Connection, level: str, mover: Anchor, side: Anchor, verdict: str) -> Anchor:
    """Anchor the ID side of a decision between a URL (``mover``) and a cluster of ``level``.

    The mover leaves (or joins) the cluster as a whole; its anchor on the cluster side is a member that
    stays: the founder, unless the founder moves with the mover (it is the mover, or at story level in
    the mover's article), then the member with the smallest url key among the rest, the one the founder
    rule would choose for them. An earlier decision between the mover and a member of the cluster is
    reused, so a later decision on the same pair supersedes it even after the founder moved.
    """
    assert side.cluster is not None
    members = sorted(cs.members_of(conn, [side.cluster]))
    moving = {mover.member}
    if level == "story":
        art = _held(conn, "article", [mover.member]).get(mover.member)
        if art is not None:
            moving |= set(cs.members_of(conn, [art]))
    rest = [m for m in members if m not in moving]
    for d in ds.decisions_touching(conn, level, [mover.member]):
        mine, theirs = ("a", "b") if d["a_member"] == mover.member else ("b", "a")
        partner = d[f"{theirs}_member"]
        # only a decision of the same shape: the mover on the URL side, a cluster of this level opposite
        if partner in rest and _names_level(d[f"{theirs}_cluster"], level) \
                and not _names_level(d[f"{mine}_cluster"], level):
            row = cu.url_row(conn, partner)
            return Anchor(side.ref, partner, row.url, side.cluster, side.level, row.outlet)
    if side.member not in moving:
        return side
    if not rest:
        what = "the only member of" if level == "article" else "in the only article of"
        if verdict == "different":
            raise InputError(f"{mover.ref} is {what} {side.cluster}: there is no rest for the ID to stay with")
        raise InputError(f"{mover.ref} is {what} {side.cluster} already; nothing to join")
    keys = cu.url_keys(conn, rest)
    heir = min(rest, key=lambda m: keys[m])
    row = cu.url_row(conn, heir)
    return Anchor(side.ref, heir, row.url, side.cluster, side.level, row.outlet)


def record_decision(engine: Engine, verdict: str, a_ref: str, b_ref: str, *, decided_by: str,
                    note: str | None = None, level: str | None = None) -> DecisionResult:
    """Store a decision (it takes effect at the next clustering: ``linkfold dedupe`` or the nightly job).

    ``level`` (``article`` or ``story``) overrides the level that follows from the references; the result
    says which level was recorded and why, and whether the decision changes anything as clusters stand.
    """
    require_schema(engine)
    if verdict not in VERDICTS:
        raise InputError(f"verdict must be one of {', '.join(VERDICTS)}, not {verdict!r}")
    who = (decided_by or "").strip()
    if not who:
        raise InputError("say who decided (--by NAME)")
    if note is not None and len(note) > MAX_NOTE:
        raise InputError(f"the note is {len(note)} characters; keep it under {MAX_NOTE}")
    with engine.connect() as conn:
        a, b = resolve_ref(engine, conn, a_ref), resolve_ref(engine, conn, b_ref)
        if a.cluster is not None and a.cluster == b.cluster:
            raise InputError(f"{a_ref} and {b_ref} name one {a.level} ({a.cluster}); name a URL to move out of it")
        # The outlet that counts is the one a URL stands for: a short link's is its target's.
        finals = finals_of(conn, [a.member, b.member])
        a = replace(a, outlet=finals.get(a.member, {}).get("final_outlet"))
        b = replace(b, outlet=finals.get(b.member, {}).get("final_outlet"))
        arts = _held(conn, "article", [a.member, b.member])
        same_article = a.member != b.member and arts.get(a.member) is not None \
            and arts.get(a.member) == arts.get(b.member)
        lvl, why = decision_level(a, b, same_article=same_article, level=level)
        # A URL (or an ID of a lower level) against an ID of the decision's level: the URL's side moves.
        a_is_cluster, b_is_cluster = a.level == lvl, b.level == lvl
        if a_is_cluster != b_is_cluster:
            mover, side = (b, a) if a_is_cluster else (a, b)
            side = _anchor_cluster_side(conn, lvl, mover, side, verdict)
            a, b = (side, mover) if a_is_cluster else (mover, side)
        if a.member == b.member:
            if verdict == "different":
                raise InputError(f"{a_ref} and {b_ref} name the same canonical URL ({a.url}); it cannot be "
                                 "separated from itself")
            raise InputError(f"{a_ref} and {b_ref} name the same canonical URL ({a.url}); nothing to join")
        held = _held(conn, lvl, [a.member, b.member])
        moving = a_is_cluster != b_is_cluster
        effect, what = _effect(verdict, lvl, a, b, held, moving=moving)
    if a.member > b.member:
        a, b = b, a
    with engine.begin() as conn:
        earlier = [d["id"] for d in ds.decision_history(conn, lvl, a.member, b.member)]
        new_id = ds.add_decision(conn, {
            "verdict": verdict, "level": lvl, "a_ref": a.ref, "b_ref": b.ref, "a_member": a.member,
            "b_member": b.member, "a_cluster": a.cluster, "b_cluster": b.cluster, "note": note,
            "decided_by": who[:200], "decided_at": now()})
    message = f"decision {new_id} recorded at the {lvl} level ({why}): {what}"
    return DecisionResult(Decision(new_id, verdict, lvl, a, b, note, who[:200]), earlier, why, effect, message)


def _effect(verdict: str, level: str, a: Anchor, b: Anchor, held: dict[int, str], *,
            moving: bool) -> tuple[str, str]:
    ia, ib = held.get(a.member), held.get(b.member)
    together = ia is not None and ia == ib
    later = "; it takes effect at the next `linkfold dedupe` or nightly run"
    if verdict == "same":
        if together:
            return ALREADY_TOGETHER, (f"changes nothing now: both are in {level} {ia} already; every run "
                                      "keeps them together")
        return CHANGES, f"{a.ref} and {b.ref} will be one {level}{later}"
    if not together:
        return ALREADY_SEPARATE, (f"changes nothing now: they are in different {level}s already; every run "
                                  "keeps them apart")
    if moving:
        mover, side = (a, b) if a.level != level else (b, a)
        return CHANGES, (f"{mover.ref} will move out of {level} {side.cluster}, which stays with the rest"
                         f"{later}")
    return CHANGES, f"{a.ref} and {b.ref} will be kept apart, splitting {level} {ia}{later}"


def list_decisions(engine: Engine, *, limit: int | None = None) -> list[dict[str, Any]]:
    """Every decision, newest first, with whether it is still in force."""
    with engine.connect() as conn:
        rows = ds.decision_log(conn, limit=limit)
        in_force: set[int] = set()
        for level in ("article", "story"):
            anchors = {x["a_member"] for x in rows if x["level"] == level}
            in_force.update(r["id"] for r in ds.decisions_touching(conn, level, anchors))
    for r in rows:
        r["in_force"] = r["id"] in in_force
        r["decided_at"] = utc(r["decided_at"])
    return rows


__all__ = ["ALREADY_SEPARATE", "ALREADY_TOGETHER", "CHANGES", "LEVELS", "VERDICTS", "Anchor", "Decision",
           "DecisionResult", "decision_level", "list_decisions", "record_decision", "resolve_ref"]
