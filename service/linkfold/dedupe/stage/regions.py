"""Incremental clustering: recompute only the parts of the registry that new evidence or decisions touch.

Every canonical URL has an article ID and a story ID. A run starts from *seeds* — new canonical URLs,
the ends of links written since the last run, the anchors of new decisions — and grows each seed into
its **region**: the smallest set that holds the seed, every member of the clusters its members belong
to now, and both ends of every link and manual "same" decision at that level touching any of them
(for stories also every member of the articles involved). A region is a union of whole connected
components of the evidence graph, and the pure clustering of a component does not depend on anything
outside it (docs/dedupe.md §7), so clustering a region alone gives exactly what clustering the whole
registry would give for those members: the cost follows the new evidence, and the result follows the
data, not the batch boundaries.

* Articles cluster canonical URLs. Evidence: ``redirect`` links (a short link and its target are one
  article), same-outlet ``declared`` canonicals, and same-outlet ``same_text`` / ``similar_text``. A
  redirect or declared canonical into a *sink* (a home page, a non-article, a target of very many URLs)
  and any link touching a never-article host are kept but never used (:mod:`linkfold.dedupe.sinks`).
* Stories cluster whole articles (an article is never cut by story clustering) across outlets:
  ``same_text``, ``similar_text`` and ``declared`` links whose ends are on different outlets. Story IDs
  are held by canonical URLs too, so a story's founder is a URL that never goes away, whatever happens to
  the article IDs.

Manual decisions are constraints at their level (``cluster``'s must- and cannot-links); the latest
decision on a pair is in force. IDs are then assigned by :func:`linkfold.dedupe.assign_ids` over the
region, with the registry's mint order and every issued ID that could clash loaded from the database.
"""

from __future__ import annotations

import logging
from collections import defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ...errors import DatabaseError
from ...progress import SILENT, Progress
from ...settings import Settings
from ...store import canonicals as cu
from ...store import clusters as cs
from ...store import decisions as ds
from ...store import linkgraph as lg
from ...store import pending as pq
from ...store.clock import now
from .. import Edge, EventKind, IdState, Reason, Thresholds, assign_ids, cluster, derive_id
from ..sinks import POINTING_KINDS, End, link_joins
from .sinks import SinkJudge

log = logging.getLogger("linkfold")

CANONICAL = "dedupe.canonical"
LINKS = "dedupe.links"
DECISIONS = "dedupe.decisions"
SEEDS_PER_TRANSACTION = 5000


@dataclass
class ClusterCounts:
    level: str
    seeds: int = 0
    members: int = 0
    components: int = 0
    minted: int = 0
    split: int = 0
    merged: int = 0
    moved: int = 0
    refused: int = 0
    sink_links: int = 0  # links met but not used: into a sink, or touching a never-article host
    founders_moved: int = 0
    conflicts: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {"seeds": self.seeds, "members": self.members, "components": self.components,
                "minted": self.minted, "split": self.split, "merged": self.merged, "moved": self.moved,
                "refused": self.refused, "sink_links": self.sink_links, "founders_moved": self.founders_moved,
                "conflicts": len(self.conflicts)}


def link_level(kind: str, src_outlet: str | None, dst_outlet: str | None) -> str | None:
    """The level a link is evidence for (``None``: neither)."""
    if kind == "redirect":
        return "article"
    if kind in ("declared", "same_text", "similar_text"):
        if src_outlet is None or dst_outlet is None:
            return None
        return "article" if src_outlet == dst_outlet else "story"
    return None


def link_strength(kind: str, detail: Mapping[str, Any] | None, thresholds: Thresholds) -> float | None:
    """The edge strength of a link under the current thresholds (``None``: no longer strong enough).

    A similarity link keeps the scores it was accepted with, so raising a threshold takes effect on the
    next clustering of its region without verifying anything again.
    """
    if kind != "similar_text":
        return 1.0
    detail = detail or {}
    strength = float(detail.get("strength", 0.0))
    reason = detail.get("reason")
    if reason == Reason.NEAR_EXACT_TEXT and strength < thresholds.article:
        return None
    if reason == Reason.SIMILAR_TEXT and strength < thresholds.story:
        return None
    if reason == Reason.TITLE_AND_DATE:
        # The title ratio decided; links stored before strength said so carry the short texts' Jaccard.
        ratio = float(detail.get("title_ratio") or 0.0)
        return None if ratio < thresholds.title else ratio / 100.0
    return strength


@dataclass
class Region:
    members: set[int]
    edges: dict[tuple[int, int], tuple[float, str]]
    decisions: list[dict[str, Any]]
    #: Links at this level left unused because they lead into a sink or touch a never-article host.
    sink_links: int = 0


def joining(conn: Connection, rows: Sequence[Any], judge: SinkJudge) -> set[int]:
    """The ids of the links among ``rows`` that may join their ends (docs/dedupe.md §10, "Sinks")."""
    ends: dict[int, tuple[End, End]] = {}
    targets: dict[int, End] = {}
    for r in rows:
        src = End(r.src_url, r.src_host, r.src_is_article, judge.rules.never_article(r.src_host))
        dst = End(r.dst_url, r.dst_host, r.dst_is_article, judge.rules.never_article(r.dst_host))
        ends[r.id] = (src, dst)
        if r.kind in POINTING_KINDS:
            targets[r.dst_id] = dst
    kinds = judge.kinds(conn, targets)
    return {r.id for r in rows if link_joins(r.kind, ends[r.id][0], ends[r.id][1], kinds.get(r.dst_id))}


def closure(conn: Connection, level: str, seeds: Iterable[int], thresholds: Thresholds,
            judge: SinkJudge | None = None) -> Region:
    """The region of ``seeds`` at ``level``. Links into a sink (or touching a never-article host) neither
    join nor grow the region; the sink's current cluster still belongs to it, so a cluster that was joined
    through a sink before is clustered again, and split, as soon as the sink is met."""
    if judge is None:
        judge = SinkJudge.load(conn)
    region: set[int] = set()
    frontier = set(seeds)
    edges: dict[tuple[int, int], tuple[float, str]] = {}
    decisions: dict[int, dict[str, Any]] = {}
    unused: set[int] = set()
    while frontier:
        region |= frontier
        part = sorted(frontier)
        grown: set[int] = set()
        current = cs.assignments(conn, level, part)
        grown.update(cs.members_of(conn, set(current.values())))
        if level == "story":
            articles = cs.assignments(conn, "article", part)
            grown.update(cs.members_of(conn, set(articles.values())))
        rows = [r for r in lg.links_touching(conn, part)
                if r.src_id != r.dst_id and link_level(r.kind, r.src_outlet, r.dst_outlet) == level]
        usable = joining(conn, rows, judge)
        for r in rows:
            if r.id not in usable:
                unused.add(r.id)
                continue
            strength = link_strength(r.kind, r.detail, thresholds)
            if strength is None:
                continue
            pair = (min(r.src_id, r.dst_id), max(r.src_id, r.dst_id))
            if pair not in edges or edges[pair][0] < strength:
                edges[pair] = (strength, r.kind)
            grown.update(pair)
        for d in ds.decisions_touching(conn, level, part):
            decisions[d["id"]] = d
            if d["verdict"] == "same":
                grown.update((d["a_member"], d["b_member"]))
        frontier = grown - region
    return Region(region, edges, ds.latest_per_pair(decisions.values()), len(unused))


def move_out(decision: Mapping[str, Any], level: str) -> tuple[int, int] | None:
    """(mover, heir) of a decision "URL is not in ID": a "different" that names a cluster of its own level
    on exactly one side. The other side (a URL, key or lower-level ID) leaves that cluster; the heir is
    the member the ID side is anchored to, which stays (docs/dedupe.md §8, "founder moved")."""
    if decision["verdict"] != "different":
        return None
    a_id = bool(decision["a_cluster"]) and cs.level_of_id(decision["a_cluster"]) == level
    b_id = bool(decision["b_cluster"]) and cs.level_of_id(decision["b_cluster"]) == level
    if a_id == b_id:
        return None
    return (decision["b_member"], decision["a_member"]) if a_id else (decision["a_member"], decision["b_member"])


def _components(conn: Connection, level: str, region: Region, ukey: Mapping[int, str],
                current: Mapping[int, str], founder_of: Mapping[str, int],
                counts: ClusterCounts) -> tuple[list[tuple[str, ...]], dict[str, str]]:
    """The region's components under evidence and decisions, and the founder hand-offs of move-outs."""
    must = [(d["a_member"], d["b_member"]) for d in region.decisions if d["verdict"] == "same"]
    apart: list[tuple[int, int]] = []
    moves: list[tuple[int, int]] = []
    for d in region.decisions:
        if d["verdict"] != "different" or d["a_member"] not in region.members or d["b_member"] not in region.members:
            continue
        mv = move_out(d, level)
        if mv is None:
            apart.append((d["a_member"], d["b_member"]))
        else:
            moves.append(mv)
    unit: dict[int, str] = {}
    if level == "story":
        unit = cs.assignments(conn, "article", region.members)
        missing = region.members - set(unit)
        if missing:
            raise DatabaseError(f"{len(missing)} canonical URL(s) have no article ID while clustering stories "
                                f"(e.g. id {min(missing)}); run linkfold dedupe --full")
    # A move-out keeps the mover (at story level, its whole article) apart from every member of the
    # heir's cluster as it stands, so the mover leaves and the rest stays together whatever links it.
    leaving: dict[str, set[int]] = defaultdict(set)
    heirs: dict[str, list[int]] = defaultdict(list)
    for mover, heir in moves:
        movers = {m for m in region.members if unit[m] == unit[mover]} if level == "story" else {mover}
        held = current.get(heir)
        rest = {m for m in region.members if held is not None and current.get(m) == held} or {heir}
        apart.extend((mover, r) for r in sorted(rest - movers))
        if held is not None:
            leaving[held] |= movers
            heirs[held].append(heir)
    handoff: dict[str, str] = {}
    for held, gone in leaving.items():
        if founder_of.get(held) not in gone:
            continue
        staying = sorted((m for m in heirs[held] if m not in gone), key=lambda m: ukey[m])
        if not staying:
            staying = sorted((m for m in region.members if current.get(m) == held and m not in gone),
                             key=lambda m: ukey[m])
        if staying:
            handoff[held] = ukey[staying[0]]
    if level == "article":
        found = cluster([ukey[m] for m in region.members],
                        [Edge(ukey[a], ukey[b], s, k) for (a, b), (s, k) in region.edges.items()],
                        must_link=[(ukey[a], ukey[b]) for a, b in must],
                        cannot_link=[(ukey[a], ukey[b]) for a, b in apart])
        comps = list(found.components)
    else:
        usable_apart = []
        for a, b in apart:
            if unit[a] == unit[b]:
                counts.conflicts.append(f"story-level 'different' on {ukey[a]} and {ukey[b]} cannot be kept: "
                                        f"both are in article {unit[a]}")
            else:
                usable_apart.append((unit[a], unit[b]))
        found = cluster(sorted(set(unit.values())),
                        [Edge(unit[a], unit[b], s, k) for (a, b), (s, k) in region.edges.items()
                         if unit[a] != unit[b]],
                        must_link=[(unit[a], unit[b]) for a, b in must if unit[a] != unit[b]],
                        cannot_link=usable_apart)
        by_unit: dict[str, list[str]] = defaultdict(list)
        for m in region.members:
            by_unit[unit[m]].append(ukey[m])
        comps = [tuple(sorted(k for u in comp for k in by_unit[u])) for comp in found.components]
    counts.refused += len(found.refused)
    for r in found.refused:
        if r.manual:
            counts.conflicts.append(f"{level}-level 'same' on {r.edge.a} and {r.edge.b} conflicts with the "
                                    f"'different' on {r.separated[0]} and {r.separated[1]}; the separation is kept")
    return comps, handoff


def cluster_region(conn: Connection, level: str, region: Region, *, run_id: int | None,
                   counts: ClusterCounts) -> None:
    """Cluster one region, assign IDs, and write the changes and their events."""
    prefix = cs.PREFIXES[level]
    current = cs.assignments(conn, level, region.members)
    held = cs.id_rows(conn, set(current.values()))
    founder_ids = {row["founder_id"] for row in held.values()}
    ukey = cu.url_keys(conn, region.members | founder_ids)
    comps, handoff = _components(conn, level, region, ukey, current,
                                 {i: int(row["founder_id"]) for i, row in held.items()}, counts)
    counts.members += len(region.members)
    counts.components += len(comps)
    cid_of = {k: c for c, k in ukey.items()}
    founders = {i: ukey[row["founder_id"]] for i, row in held.items()}
    outside = {i for i, row in held.items() if row["founder_id"] not in region.members}
    if outside:
        raise DatabaseError(f"ID {min(outside)} is held inside a region that does not hold its founder; "
                            "the ID registry is inconsistent")
    issued = cs.issued_with_stems(conn, {derive_id(prefix, k) for k in ukey.values()})
    order = issued | {i: int(row["mint_order"]) for i, row in held.items()}
    state = IdState(assigned={ukey[c]: i for c, i in current.items()}, founders=founders, order=order)
    update = assign_ids(state, comps, prefix=prefix, handoff=handoff)
    if not update.events and not update.changes:
        return
    next_order = cs.max_mint_order(conn, level)
    minted, retired, events, refounded = [], {}, [], {}
    for e in update.events:
        if e.kind is EventKind.MINTED:
            next_order += 1
            minted.append(cs.NewId(e.id, cid_of[e.member], next_order))
            events.append(cs.EventRow(e.id, e.kind.value, None, cid_of[e.member], e.reason))
            if e.reason == "split":
                counts.split += 1
            else:
                counts.minted += 1
        elif e.kind is EventKind.MERGED_INTO:
            assert e.other is not None
            retired[e.id] = e.other
            events.append(cs.EventRow(e.id, e.kind.value, e.other, None, e.reason))
            counts.merged += 1
        elif e.kind is EventKind.FOUNDER_MOVED:
            refounded[e.id] = cid_of[e.member]
            events.append(cs.EventRow(e.id, e.kind.value, None, cid_of[e.member], e.reason))
            counts.founders_moved += 1
        else:
            events.append(cs.EventRow(e.id, e.kind.value, e.other, None, e.reason))
    moves = {cid_of[ch.member]: ch.new for ch in update.changes}
    counts.moved += sum(1 for ch in update.changes if ch.old is not None)
    cs.write_ids(conn, level, minted=minted, retired=retired, moves=moves, events=events, run_id=run_id,
                 now=now(), founders=refounded)


def cluster_seeds(engine: Engine, level: str, seeds: Iterable[int], thresholds: Thresholds, *,
                  run_id: int | None, progress: Progress = SILENT,
                  per_transaction: int = SEEDS_PER_TRANSACTION,
                  settings: Settings | None = None) -> tuple[ClusterCounts, set[int]]:
    """Cluster the regions of ``seeds`` at ``level``, one transaction per group of seeds; returns the
    counts and every member of the regions (story seeds, after the article pass). ``settings`` gives the
    ``sink_fan_in`` limit (default 50)."""
    ordered = sorted(set(seeds))
    counts = ClusterCounts(level, seeds=len(ordered))
    done: set[int] = set()
    with engine.connect() as conn:
        judge = SinkJudge.load(conn, settings)
    progress.start(f"clustering {'stories' if level == 'story' else level + 's'}", len(ordered))
    for i in range(0, len(ordered), per_transaction):
        group = [s for s in ordered[i:i + per_transaction] if s not in done]
        if group:
            with engine.begin() as conn:
                region = closure(conn, level, group, thresholds, judge)
                cluster_region(conn, level, region, run_id=run_id, counts=counts)
                counts.sink_links += region.sink_links
            done |= region.members
        progress.advance(len(ordered[i:i + per_transaction]))
    progress.finish()
    for line in counts.conflicts:
        log.warning("%s", line)
    return counts, done


@dataclass(frozen=True)
class Pending:
    """What the clustering step has to look at, claimed at the start (``store/pending.py``): new
    canonical URLs, links and decisions, including any committed late with smaller ids."""

    canonical: pq.Claim
    links: pq.Claim
    decisions: pq.Claim

    @property
    def empty(self) -> bool:
        return self.canonical.empty and self.links.empty and self.decisions.empty


def pending_ranges(conn: Connection) -> Pending:
    return Pending(pq.claim(conn, CANONICAL), pq.claim(conn, LINKS), pq.claim(conn, DECISIONS))


def count_pending_clustering(conn: Connection) -> int:
    p = pending_ranges(conn)
    return pq.count(conn, p.canonical) + pq.count(conn, p.links) + pq.count(conn, p.decisions)


def seeds_of(conn: Connection, pending: Pending) -> tuple[set[int], set[int]]:
    """(article seeds, extra story seeds) for what is pending."""
    article: set[int] = set()
    story: set[int] = set()
    if not pending.canonical.empty:
        article.update(lg.claimed_canonical_ids(conn, pending.canonical))
    if not pending.links.empty:
        for r in lg.links_touching(conn, [], within=pending.links):
            lvl = link_level(r.kind, r.src_outlet, r.dst_outlet)
            if lvl == "article":
                article.update((r.src_id, r.dst_id))
            elif lvl == "story":
                story.update((r.src_id, r.dst_id))
    if not pending.decisions.empty:
        for level, a_member, b_member in lg.claimed_decision_anchors(conn, pending.decisions):
            (article if level == "article" else story).update((a_member, b_member))
    return article, story


def advance_marks(conn: Connection, pending: Pending, *, run_id: int | None) -> None:
    """Record that what ``pending`` claimed is clustered (after the clustering committed)."""
    for claimed in (pending.canonical, pending.links, pending.decisions):
        pq.settle(conn, claimed, run_id=run_id)


__all__ = ["CANONICAL", "DECISIONS", "LINKS", "ClusterCounts", "Pending", "Region", "advance_marks",
           "closure", "cluster_region", "cluster_seeds", "count_pending_clustering",
           "joining", "link_level", "link_strength", "move_out", "pending_ranges",
           "seeds_of"]
