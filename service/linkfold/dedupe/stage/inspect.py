"""Looking at what dedupe found: cluster lists, one cluster in detail, and the threshold view."""

from __future__ import annotations

from collections import Counter, defaultdict
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ...errors import InputError, NotFound
from ...settings import Settings
from ...store import canonicals as cu
from ...store import cluster_reports as cr
from ...store import clusters as cs
from ...store import decisions as ds
from ...store.clock import utc
from ...store.finals import finals_of
from ...store.linkgraph import links_touching
from .. import SignatureParams, render_curve, render_histogram
from ..curve import DEFAULT_POINTS
from ..sinks import POINTING_KINDS
from ..textdiff import differing_passages
from .regions import link_level
from .sinks import Sink, SinkJudge, describe_sinks

PAGE = 500


@dataclass
class ClusterRow:
    id: str
    level: str
    size: int
    outlets: int
    founder_url: str
    min_score: float | None
    max_score: float | None
    evidence: dict[str, int] = field(default_factory=dict)
    #: Sinks among the members or led to by their redirects and declared canonicals (links kept, not used).
    sinks: list[dict[str, Any]] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {"id": self.id, "level": self.level, "size": self.size, "outlets": self.outlets,
                "founder_url": self.founder_url, "min_score": self.min_score, "max_score": self.max_score,
                "evidence": self.evidence, "sinks": self.sinks}


def _sinks_near(conn: Connection, judge: SinkJudge, links: Sequence[Any], members: set[int]) -> dict[int, Sink]:
    """The sinks among ``members`` and the targets their redirect and declared links lead to."""
    near = set(members) | {r.dst_id for r in links if r.src_id in members and r.kind in POINTING_KINDS}
    return describe_sinks(conn, judge, near)


def _led_by(found: Mapping[int, Sink], links: Sequence[Any]) -> dict[int, set[int]]:
    """Sink id → the ids of the URLs whose redirect or declared links lead into it."""
    out: dict[int, set[int]] = defaultdict(set)
    for r in links:
        if r.dst_id in found and r.src_id != r.dst_id and r.kind in POINTING_KINDS:
            out[r.dst_id].add(r.src_id)
    return out


def _sink_rows(found: Mapping[int, Sink], led_by: Mapping[int, set[int]], members: set[int]) -> list[dict[str, Any]]:
    rows = []
    for cid, sink in sorted(found.items(), key=lambda kv: (-kv[1].fan_in, kv[1].url)):
        led = len(led_by.get(cid, set()) & members)
        if cid in members or led:
            rows.append({**sink.as_dict(), "member": cid in members, "members_leading_here": led})
    return rows


def _scores(links: Sequence[Any], members: set[int]) -> tuple[float | None, float | None, dict[str, int]]:
    scores: list[float] = []
    kinds: Counter[str] = Counter()
    for r in links:
        if r.src_id in members and r.dst_id in members and r.src_id != r.dst_id:
            kinds[r.kind] += 1
            if r.kind == "similar_text" and r.detail:
                scores.append(float(r.detail.get("strength", 0.0)))
    return (min(scores) if scores else None, max(scores) if scores else None, dict(sorted(kinds.items())))


def list_clusters(engine: Engine, *, level: str = "article", min_size: int = 2, outlet: str | None = None,
                  limit: int | None = None, settings: Settings | None = None) -> Iterator[ClusterRow]:
    """Clusters of ``level`` with at least ``min_size`` members (and, with ``outlet``, a member whose final
    outlet is that one: an outlet name or a domain, see :func:`linkfold.store.cluster_reports.cluster_heads`),
    largest first, with the number of final outlets, the range of similarity scores between their members
    and the sinks near them (``settings`` gives the ``sink_fan_in`` limit)."""
    if level not in cs.LEVELS:
        raise InputError(f"level must be article or story, not {level!r}")
    if min_size < 1:
        raise InputError(f"--min-size must be at least 1 (got {min_size})")
    with engine.connect() as conn:
        judge = SinkJudge.load(conn, settings)
        head = cr.cluster_heads(conn, level, min_size=min_size, outlet=outlet, limit=limit)
        for i in range(0, len(head), PAGE):
            page = head[i:i + PAGE]
            ids = [r.cluster_id for r in page]
            members = cs.members_of(conn, ids)
            by_id: dict[str, set[int]] = defaultdict(set)
            for m, cid in members.items():
                by_id[cid].add(m)
            links = links_touching(conn, sorted(members))
            founders = cr.founder_urls(conn, ids)
            sinks = _sinks_near(conn, judge, links, set(members))
            led_by = _led_by(sinks, links)
            for r in page:
                lo, hi, kinds = _scores(links, by_id[r.cluster_id])
                yield ClusterRow(r.cluster_id, level, int(r.size), int(r.outlets), founders[r.cluster_id], lo, hi,
                                 kinds, _sink_rows(sinks, led_by, by_id[r.cluster_id]) if sinks else [])


@dataclass
class ClusterDetail:
    asked: str
    id: str
    level: str
    path: list[str]
    events: list[dict[str, Any]]
    members: list[dict[str, Any]]
    links: list[dict[str, Any]]
    decisions: list[dict[str, Any]]
    differences: list[dict[str, Any]]
    #: Sinks among the members or led to by them: the links into them are kept as evidence, never used.
    sinks: list[dict[str, Any]] = field(default_factory=list)


def resolve_cluster_id(engine: Engine, cluster_id: str) -> cs.Resolution:
    """Where an article or story ID ever issued points now (merges and splits followed); ``NotFound`` for
    an ID never issued."""
    with engine.connect() as conn:
        res = cs.resolve(conn, cluster_id.strip())
    if res is None:
        raise NotFound(f"{cluster_id}: no such article or story ID was ever issued")
    return res


def show_cluster(engine: Engine, cluster_id: str, *, max_compared: int = 10,
                 settings: Settings | None = None) -> ClusterDetail:
    """Members, the links between them with their evidence, the decisions on them, the sinks near them
    (with their fan-in), and, for up to ``max_compared`` members, the passages where their text differs
    from the founder's."""
    res = resolve_cluster_id(engine, cluster_id)
    with engine.connect() as conn:
        row = cs.id_rows(conn, [res.current])[res.current]
        members = cs.members_of(conn, [res.current])
        ids = sorted(members)
        urls = cu.url_rows(conn, ids)
        finals = finals_of(conn, ids)
        other_level = "article" if res.level == "story" else "story"
        other = cs.assignments(conn, other_level, ids)
        docs = cr.current_documents(conn, ids)
        member_set = set(ids)
        touching = links_touching(conn, ids)
        links = [r for r in touching if r.src_id in member_set and r.dst_id in member_set]
        decisions = ds.decisions_touching(conn, res.level, ids)
        near = _sinks_near(conn, SinkJudge.load(conn, settings), touching, member_set)
        sinks = _sink_rows(near, _led_by(near, touching), member_set)
    founder = int(row["founder_id"])
    member_rows = []
    for m in sorted(ids, key=lambda x: (x != founder, urls[x].url)):
        doc = docs.get(m)
        member_rows.append({"url": urls[m].url, "url_key": urls[m].url_key, "outlet": urls[m].outlet,
                            "final_url": finals[m]["final_url"], "final_outlet": finals[m]["final_outlet"],
                            "founder": m == founder, f"{other_level}_id": other.get(m),
                            "title": doc.title if doc else None, "words": doc.word_count if doc else None})
    link_rows = [{"kind": r.kind, "from": urls[r.src_id].url, "to": urls[r.dst_id].url,
                  "level": link_level(r.kind, r.src_outlet, r.dst_outlet), "detail": r.detail} for r in links]
    decision_rows = [{"id": d["id"], "verdict": d["verdict"], "a": d["a_ref"], "b": d["b_ref"],
                      "note": d["note"], "decided_by": d["decided_by"], "decided_at": utc(d["decided_at"])}
                     for d in decisions]
    differences: list[dict[str, Any]] = []
    base = docs.get(founder)
    if base is None:
        base = next((docs[m] for m in sorted(docs, key=lambda x: urls[x].url)), None)
    if base is not None:
        for m in sorted(docs, key=lambda x: urls[x].url):
            if docs[m].id == base.id or len(differences) >= max_compared:
                continue
            differences.append({"url": urls[m].url, "against": urls[int(base.canonical_id)].url,
                                "passages": differing_passages(base.text or "", docs[m].text or "")})
    return ClusterDetail(cluster_id, res.current, res.level, res.path, res.events, member_rows, link_rows,
                         decision_rows, differences, sinks)


def similarity_values(engine: Engine) -> dict[str, list[float]]:
    """The text similarities of every stored ``similar_text`` link, by the level it serves."""
    out: dict[str, list[float]] = {"article": [], "story": []}
    with engine.connect() as conn:
        for detail, a, b in cr.similarity_details(conn):
            detail = detail or {}
            score = detail.get("exact_jaccard")
            if score is None:
                score = detail.get("est_jaccard")
            level = link_level("similar_text", a, b)
            if score is not None and level:
                out[level].append(float(score))
    return out


def thresholds_report(engine: Engine, *, settings: Settings) -> str:
    """The LSH S-curve for the current settings and the histograms of verified similarities."""
    params = SignatureParams.from_settings(settings)
    marks = {"story threshold": float(settings.story_threshold),
             "article threshold": float(settings.article_threshold)}
    points = sorted(set(DEFAULT_POINTS) | {round(v, 4) for v in marks.values()})
    parts = [f"settings: {params.band_token}; article ≥ {marks['article threshold']}, "
             f"story ≥ {marks['story threshold']}",
             render_curve(params.bands, params.rows, points, marks=marks)]
    values = similarity_values(engine)
    parts.append(render_histogram(values["article"], title="verified same-outlet similarities (articles)"))
    parts.append(render_histogram(values["story"], title="verified cross-outlet similarities (stories)"))
    return "\n\n".join(parts)


__all__ = ["ClusterDetail", "ClusterRow", "differing_passages", "list_clusters", "resolve_cluster_id",
           "show_cluster", "similarity_values", "thresholds_report"]
