"""The corpus as one SELECT: a row per story (or article) seen in the chosen datasets, with its
representative document and its counts per dataset, ordered by ID so that it can stream.

Three parts, joined on the cluster ID:

* ``seen`` (a CTE): the sightings of the datasets grouped by the ID of the URL each stands for, counted
  as exposure counts them (``exposure.sighting_targets``: a short link counts for the article it leads
  to; only final URLs that are articles unless ``all_urls``), with one group of columns per dataset by
  conditional aggregation (the datasets are few and known before the query);
* ``rep``: the representative document of each cluster seen: among the *current* documents (newest
  usable, docs/content.md) of its members that pass the language and length filters, the earliest
  published; undated after dated ones; ties go to the member with the smallest url key (the rule that
  picks a cluster's founder), then the smaller document id. A window function ranks them;
* ``grp``: the members of each cluster seen: their count, their articles (story level) and their final
  outlets as a JSON array.

Clusters seen without a document passing the filters come out with NULL text (the caller counts them and
leaves them out), so one pass answers both.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import sqlalchemy as sa

from ..exposure import sighting_targets
from ..store import tables as t
from ..store.finals import FinalsJoin

#: The levels a corpus deduplicates at: one text per story, or per article.
LEVELS = ("story", "article")
ID_COLUMN = {"story": "story_id", "article": "article_id"}
_UTC = sa.DateTime(timezone=True)


def _json_outlets(dialect: str, column: sa.ColumnElement[Any]) -> sa.ColumnElement[Any]:
    # One JSON array of the distinct outlets (NULLs dropped in Python): both engines have an aggregate;
    # psycopg hands json back parsed, SQLite as text (records.py reads either).
    if dialect == "postgresql":
        return sa.func.json_agg(sa.distinct(column))
    return sa.func.json_group_array(sa.distinct(column))


def seen_select(*, dataset_ids: Sequence[int], level: str, all_urls: bool = False) -> sa.Select[Any]:
    """Per cluster of ``level`` seen in the datasets: ``cluster_id``; ``sightings``, ``units`` (distinct),
    ``first_seen``, ``last_seen`` over all of them; then ``sightings_i``, ``units_i``, ``first_i``,
    ``last_i`` for the i-th of ``dataset_ids``.

    Grouped twice: first per cluster × dataset × unit (one hash aggregate over the sightings), then per
    cluster, where a dataset's distinct units are its rows with a unit. Counting distinct values straight
    from the sightings made PostgreSQL sort each group once per distinct count, a third slower."""
    if level not in LEVELS:
        raise ValueError(f"unknown corpus level {level!r}: one of {', '.join(LEVELS)}")
    p = sighting_targets(dataset_ids=dataset_ids, level=level)
    ds = t.sightings.c.dataset_id
    conditions = [p.where, p.target.is_not(None)]
    if not all_urls:
        conditions.append(p.is_article.is_(True))
    per_unit = (sa.select(p.target.label("cluster_id"), ds.label("dataset_id"), p.unit.label("unit"),
                          sa.func.count().label("n"), sa.func.min(p.seen_at).label("lo"),
                          sa.func.max(p.seen_at).label("hi"))
                .select_from(p.source).where(*conditions).group_by(p.target, ds, p.unit).subquery("per_unit"))
    u = per_unit.c
    cols: list[sa.ColumnElement[Any]] = [
        u.cluster_id.label("cluster_id"), sa.func.sum(u.n).label("sightings"),
        sa.func.count(sa.distinct(u.unit)).label("units"),
        sa.type_coerce(sa.func.min(u.lo), _UTC).label("first_seen"),
        sa.type_coerce(sa.func.max(u.hi), _UTC).label("last_seen"),
    ]
    for i, dataset_id in enumerate(dataset_ids):
        mine = u.dataset_id == dataset_id
        cols += [
            sa.func.coalesce(sa.func.sum(sa.case((mine, u.n), else_=0)), 0).label(f"sightings_{i}"),
            sa.func.count(sa.case((sa.and_(mine, u.unit.is_not(None)), 1), else_=sa.null())).label(f"units_{i}"),
            sa.type_coerce(sa.func.min(sa.case((mine, u.lo), else_=sa.null())), _UTC).label(f"first_{i}"),
            sa.type_coerce(sa.func.max(sa.case((mine, u.hi), else_=sa.null())), _UTC).label(f"last_{i}"),
        ]
    return sa.select(*cols).group_by(u.cluster_id)


def _language_matches(column: sa.ColumnElement[Any], language: str) -> sa.ColumnElement[bool]:
    # BCP 47: "en" asks for "en", "en-GB", "en-US" …; a tag with a region asks for that tag only.
    tag = language.strip().lower()
    low = sa.func.lower(column)
    return sa.or_(low == tag, low.like(tag + "-%")) if "-" not in tag else low == tag


def corpus_select(dialect: str, *, dataset_ids: Sequence[int], level: str = "story", all_urls: bool = False,
                  language: str | None = None, min_words: int = 0) -> sa.Select[Any]:
    """The corpus, one row per cluster seen, ordered by ``cluster_id``: the columns of :func:`seen_select`,
    then ``members``, ``articles`` (story level; NULL at article level), ``outlets`` (JSON text), and the
    representative's ``document_id``, ``url``, ``title``, ``text``, ``published``, ``language``,
    ``words`` (all NULL when no current document passes the filters)."""
    seen = seen_select(dataset_ids=dataset_ids, level=level, all_urls=all_urls).cte("seen")
    m, c, d = t.cluster_members.alias("m"), t.canonical_urls.alias("mc"), t.documents
    # The current document of a URL: its newest usable one (docs/content.md).
    current = (sa.select(d.c.canonical_id, sa.func.max(d.c.id).label("document_id"))
               .where(d.c.state == "usable").group_by(d.c.canonical_id).subquery("cur"))
    cd = t.documents.alias("cd")
    filters: list[sa.ColumnElement[bool]] = [m.c.level == level]
    if language:
        filters.append(_language_matches(cd.c.language, language))
    if min_words > 0:
        filters.append(cd.c.word_count >= min_words)
    rank = sa.func.row_number().over(
        partition_by=m.c.cluster_id,
        order_by=[sa.case((cd.c.published.is_(None), 1), else_=0), cd.c.published, c.c.url_key, cd.c.id])
    ranked = (sa.select(m.c.cluster_id, cd.c.id.label("document_id"), rank.label("rk"))
              .select_from(m.join(seen, seen.c.cluster_id == m.c.cluster_id)
                           .join(current, current.c.canonical_id == m.c.canonical_id)
                           .join(cd, cd.c.id == current.c.document_id)
                           .join(c, c.c.id == m.c.canonical_id))
              .where(*filters).subquery("ranked"))
    rep = sa.select(ranked.c.cluster_id, ranked.c.document_id).where(ranked.c.rk == 1).subquery("rep")

    # The members of each cluster seen, with their final outlets (as every per-outlet count of the tool).
    gm, gc = t.cluster_members.alias("gm"), t.canonical_urls.alias("gc")
    fj = FinalsJoin.of(gc)
    base = gm.join(seen, seen.c.cluster_id == gm.c.cluster_id).join(gc, gc.c.id == gm.c.canonical_id)
    articles: sa.ColumnElement[Any] = sa.null()
    if level == "story":
        am = t.cluster_members.alias("am")
        base = base.outerjoin(am, sa.and_(am.c.canonical_id == gm.c.canonical_id, am.c.level == "article"))
        articles = sa.func.count(sa.distinct(am.c.cluster_id))
    grp = (sa.select(gm.c.cluster_id, sa.func.count().label("members"), articles.label("articles"),
                     _json_outlets(dialect, fj.column("outlet")).label("outlets"))
           .select_from(fj.join(base)).where(gm.c.level == level).group_by(gm.c.cluster_id).subquery("grp"))

    rd, rc = t.documents.alias("rd"), t.canonical_urls.alias("rc")
    return (sa.select(*seen.c, grp.c.members, grp.c.articles, grp.c.outlets,
                      rd.c.id.label("document_id"), rc.c.url.label("url"), rd.c.title, rd.c.text,
                      rd.c.published, rd.c.language, rd.c.word_count.label("words"))
            .select_from(seen.join(grp, grp.c.cluster_id == seen.c.cluster_id)
                         .outerjoin(rep, rep.c.cluster_id == seen.c.cluster_id)
                         .outerjoin(rd, rd.c.id == rep.c.document_id)
                         .outerjoin(rc, rc.c.id == rd.c.canonical_id))
            .order_by(seen.c.cluster_id))





def representatives(conn: Any, level: str, cluster_ids: Sequence[str]) -> dict[str, dict[str, Any]]:
    """The representative document's ``title`` and ``url`` of a few IDs, by the rule of
    :func:`corpus_select` (without filters): the earliest-published current document, ties to the
    smallest url key, then the smaller document id."""
    wanted = sorted(set(cluster_ids))
    if not wanted:
        return {}
    m, c, d = t.cluster_members, t.canonical_urls, t.documents
    current = (sa.select(d.c.canonical_id, sa.func.max(d.c.id).label("document_id"))
               .where(d.c.state == "usable").group_by(d.c.canonical_id).subquery("cur"))
    best: dict[str, tuple[Any, ...]] = {}
    out: dict[str, dict[str, Any]] = {}
    for i in range(0, len(wanted), 500):
        q = (sa.select(m.c.cluster_id, d.c.title, d.c.published, c.c.url_key, d.c.id, c.c.url)
             .select_from(m.join(current, current.c.canonical_id == m.c.canonical_id)
                          .join(d, d.c.id == current.c.document_id).join(c, c.c.id == m.c.canonical_id))
             .where(m.c.level == level, m.c.cluster_id.in_(wanted[i:i + 500])))
        for cid, title, published, url_key, doc_id, url in conn.execute(q):
            key = (published is None, published or 0, url_key, doc_id)
            if cid not in best or key < best[cid]:
                best[cid] = key
                out[cid] = {"title": title, "url": url}
    return out
__all__ = ["ID_COLUMN", "LEVELS", "corpus_select", "representatives", "seen_select"]
