"""Exposure as set-based SQL: one row per unit × outlet (article, story) (× period), grouped in the database.

What a sighting counts for is the URL it stands for (store/finals.py): a short link counts for the outlet
and article it leads to, not for the shortener, and one not followed yet counts for nothing. Unless
``all_urls``, only sightings whose final URL is an article by the site rules count. Sightings without a
unit, and those with nothing to count for at the level asked (no final outlet; no article or story ID yet;
with a period, no time) are left out; :func:`coverage_select` counts each reason in one more pass.

Periods are truncated in the database: PostgreSQL ``date_trunc`` on the UTC time, SQLite date functions on
the stored UTC text; weeks start on Monday (ISO 8601), and a period is named by its first day
(``YYYY-MM-DD``).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa

from ..store import tables as t
from ..store.finals import FinalsJoin

#: What exposure counts a unit's sightings by.
LEVELS = ("outlet", "article", "story")
#: The calendar periods exposure can be split by (UTC; weeks start on Monday, ISO 8601).
PERIODS = ("day", "week", "month")
#: The column that names what a unit was exposed to, per level.
TARGET_COLUMN = {"outlet": "outlet", "article": "article_id", "story": "story_id"}
_UTC = sa.DateTime(timezone=True)


@dataclass(frozen=True)
class _Parts:
    """The FROM clause of a sighting with what it stands for, and the expressions the queries use."""

    source: Any
    unit: sa.ColumnElement[Any]
    target: sa.ColumnElement[Any]
    is_article: sa.ColumnElement[Any]
    seen_at: sa.ColumnElement[Any]
    where: sa.ColumnElement[bool]


def _parts(*, dataset_ids: Sequence[int], level: str) -> _Parts:
    if level not in LEVELS:
        raise ValueError(f"unknown exposure level {level!r}: one of {', '.join(LEVELS)}")
    s, r, c, f = t.sightings, t.raw_urls, t.canonical_urls, t.dataset_files
    fj = FinalsJoin.of(c)
    # Outer: a raw URL that could not be canonicalised is still a sighting, counted as left out.
    source = fj.join(s.join(r, r.c.id == s.c.raw_url_id).outerjoin(c, c.c.id == r.c.canonical_id))
    if level == "outlet":
        target = fj.column("outlet")
    else:
        # The ID of the URL the sighting stands for (a short link: of the article it leads to); none while
        # that is a shortener's URL (FinalsJoin's rule).
        final_id = sa.case((fj.sh.c.host.is_not(None), sa.null()), else_=sa.func.coalesce(c.c.final_id, c.c.id))
        m = t.cluster_members.alias("m")
        source = source.outerjoin(m, sa.and_(m.c.canonical_id == final_id, m.c.level == level))
        target = m.c.cluster_id
    # sightings has no index on dataset_id; file_id leads its unique key (tables.sightings_in_dataset).
    where = s.c.file_id.in_(sa.select(f.c.id).where(f.c.dataset_id.in_(list(dataset_ids))))
    return _Parts(source, s.c.unit, target, fj.column("is_article"), s.c.seen_at, where)


def sighting_targets(*, dataset_ids: Sequence[int], level: str) -> _Parts:
    """What each sighting of ``dataset_ids`` counts for at ``level``, as exposure counts it: the FROM
    clause (sightings with their URL and what it stands for), the unit, the target (outlet, article or
    story ID; NULL when there is none yet), whether the final URL is an article, the time and the WHERE
    clause of the datasets. The corpus and the comparison of datasets count sightings the same way."""
    return _parts(dataset_ids=dataset_ids, level=level)


def period_of(seen_at: sa.ColumnElement[Any], by: str, dialect: str) -> sa.ColumnElement[str]:
    """The first day (``YYYY-MM-DD``, UTC) of the day, ISO week or month ``seen_at`` falls in."""
    if by not in PERIODS:
        raise ValueError(f"unknown period {by!r}: one of {', '.join(PERIODS)}")
    if dialect == "postgresql":
        return sa.func.to_char(sa.func.date_trunc(by, sa.func.timezone("UTC", seen_at)), "YYYY-MM-DD")
    # SQLite stores UTC times as text ("YYYY-MM-DD HH:MM:SS.ffffff"), which its date functions read.
    if by == "day":
        return sa.func.date(seen_at)
    if by == "week":
        return sa.func.date(seen_at, "-6 days", "weekday 1")  # back to the Monday on or before
    return sa.func.strftime("%Y-%m-01", seen_at)


def exposure_select(dialect: str, *, dataset_ids: Sequence[int], level: str = "outlet", by: str | None = None,
                    all_urls: bool = False, with_dataset: bool | None = None) -> sa.Select[Any]:
    """The exposure table as one grouped SELECT, ordered by its keys.

    Columns: ``dataset_id`` (when ``with_dataset``, by default when several datasets are given), ``unit``,
    the level's target column (``outlet``, ``article_id`` or ``story_id``), ``period`` (with ``by``),
    ``sightings``, ``first_seen``, ``last_seen``. Other analyses (the co-exposure network, the bipartite
    unit–outlet table) build on it as a subquery.
    """
    p = _parts(dataset_ids=dataset_ids, level=level)
    if with_dataset is None:
        with_dataset = len(set(dataset_ids)) > 1
    keys: list[sa.ColumnElement[Any]] = []
    if with_dataset:
        keys.append(t.sightings.c.dataset_id.label("dataset_id"))
    keys.append(p.unit.label("unit"))
    keys.append(p.target.label(TARGET_COLUMN[level]))
    conditions = [p.where, p.unit.is_not(None), p.target.is_not(None)]
    if not all_urls:
        conditions.append(p.is_article.is_(True))
    if by is not None:
        keys.append(period_of(p.seen_at, by, dialect).label("period"))
        conditions.append(p.seen_at.is_not(None))
    q = (sa.select(*keys, sa.func.count().label("sightings"),
                   sa.type_coerce(sa.func.min(p.seen_at), _UTC).label("first_seen"),
                   sa.type_coerce(sa.func.max(p.seen_at), _UTC).label("last_seen"))
         .select_from(p.source).where(*conditions))
    # Group and order by position: the expressions are long, and PostgreSQL sorts once for both.
    positions: list[sa.ColumnElement[Any]] = [sa.literal_column(str(i + 1)) for i in range(len(keys))]
    return q.group_by(*positions).order_by(*positions)


#: What :func:`coverage_select` counts, in order: every sighting of the datasets, then the reasons a
#: sighting is left out (each counted once, in this order of precedence), then those counted.
COVERAGE_FIELDS = ("sightings", "no_unit", "not_article", "no_target", "no_time", "counted")


def coverage_select(dialect: str, *, dataset_ids: Sequence[int], level: str = "outlet", by: str | None = None,
                    all_urls: bool = False) -> sa.Select[Any]:
    """One row: the :data:`COVERAGE_FIELDS` counts for the same arguments as :func:`exposure_select`."""
    p = _parts(dataset_ids=dataset_ids, level=level)
    no_unit = p.unit.is_(None)
    not_article = sa.false() if all_urls else sa.not_(p.is_article.is_(True))
    no_target = p.target.is_(None)
    no_time = p.seen_at.is_(None) if by is not None else sa.false()

    def count_when(*whens: tuple[Any, int]) -> sa.ColumnElement[Any]:
        return sa.func.coalesce(sa.func.sum(sa.case(*whens, else_=0)), 0)

    reason = sa.case((no_unit, 1), (not_article, 2), (no_target, 3), (no_time, 4), else_=5)
    r = sa.select(reason.label("reason")).select_from(p.source).where(p.where).subquery()
    return sa.select(sa.func.count().label("sightings"),
                     *[count_when((r.c.reason == i, 1)).label(name)
                       for i, name in enumerate(COVERAGE_FIELDS[1:], start=1)])


__all__ = ["COVERAGE_FIELDS", "LEVELS", "PERIODS", "TARGET_COLUMN", "coverage_select", "exposure_select",
           "period_of", "sighting_targets"]
