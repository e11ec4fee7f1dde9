"""Per-outlet counts: datasets, sightings, units, URLs, articles and stories, by the outlet each sighting
stands for.

A sighting counts for the outlet of its *final URL* (store/finals.py: after short links, redirects and
wrappers), with the outlet list in force applied (:class:`~linkfold.outlets.lists.OutletJoin`). A short
link not followed yet stands for nothing known and counts for no outlet; neither does a raw URL that
cannot be canonicalised. Both are counted in the summary. One set-based query on either backend.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..errors import NotFound
from ..progress import SILENT, Progress
from ..store import tables as t
from ..store.finals import SHORTENER, FinalsJoin
from .lists import OutletJoin, list_in_force, outlet_attributes, outlet_columns

#: The count columns of :func:`outlet_table`, in output order (after ``outlet`` and the attributes).
COUNT_COLUMNS = ("datasets", "sightings", "units", "urls", "articles", "stories")


@dataclass
class OutletTable:
    """Rows (one per outlet, most sightings first), the list's attribute columns, and what was not counted."""

    rows: list[dict[str, Any]]
    attributes: list[str]
    list_version: int | None
    summary: dict[str, int] = field(default_factory=dict)

    @property
    def columns(self) -> list[str]:
        return ["outlet", *self.attributes, *COUNT_COLUMNS, "listed"]


def dataset_ids(conn: Connection, names: Sequence[str] | None) -> list[int] | None:
    """Ids of the named datasets (None: every dataset); an unknown name is an error."""
    if not names:
        return None
    d = t.datasets
    found = {n: i for n, i in conn.execute(sa.select(d.c.name, d.c.id).where(d.c.name.in_(list(names))))}
    missing = [n for n in names if n not in found]
    if missing:
        raise NotFound(f"no dataset {missing[0]!r}", hint="linkfold datasets lists them")
    return [int(found[n]) for n in names]


def newest_ruleset() -> sa.ScalarSelect[Any]:
    return sa.select(sa.func.max(t.rulesets.c.id)).scalar_subquery()


def final_sightings(datasets: list[int] | None) -> sa.Subquery:
    """One row per sighting with a canonical URL: ``dataset_id``, ``unit``, ``cid`` (the URL as seen),
    ``fid`` (the final URL it stands for; NULL for a short link not resolved), ``short`` (1 when the URL
    as seen is on a shortener host of the newest ruleset) and ``led`` (1 when it led elsewhere)."""
    s, r, c = t.sightings, t.raw_urls, t.canonical_urls
    fj = FinalsJoin.of(c)
    shc = t.ruleset_hosts.alias("shc")
    base = (s.join(r, r.c.id == s.c.raw_url_id).join(c, c.c.id == r.c.canonical_id))
    base = fj.join(base).outerjoin(shc, sa.and_(shc.c.host == c.c.host, shc.c.role == SHORTENER,
                                                 shc.c.ruleset_id == newest_ruleset()))
    fid = sa.case((fj.sh.c.host.is_not(None), sa.null()), else_=sa.func.coalesce(c.c.final_id, c.c.id))
    q = sa.select(s.c.dataset_id, s.c.unit, c.c.id.label("cid"), fid.label("fid"),
                  sa.case((shc.c.host.is_not(None), 1), else_=0).label("short"),
                  sa.case((c.c.final_id.is_not(None), 1), else_=0).label("led")).select_from(base)
    if datasets is not None:
        q = q.where(s.c.file_id.in_(sa.select(t.dataset_files.c.id).where(t.dataset_files.c.dataset_id.in_(datasets))))
    return q.subquery("per")


def sighting_summary(conn: Connection, datasets: list[int] | None) -> dict[str, int]:
    """Sightings in scope: all, unparsable (no canonical URL), and short links that stand for nothing yet."""
    s, r = t.sightings, t.raw_urls
    scope = sa.true() if datasets is None else s.c.file_id.in_(
        sa.select(t.dataset_files.c.id).where(t.dataset_files.c.dataset_id.in_(datasets)))
    total, unparsable = conn.execute(
        sa.select(sa.func.count(), sa.func.count(sa.case((r.c.canonical_id.is_(None), 1))))
        .select_from(s.join(r, r.c.id == s.c.raw_url_id)).where(scope)).one()
    per = final_sightings(datasets)
    pending = conn.execute(sa.select(sa.func.count()).select_from(per).where(per.c.fid.is_(None))).scalar_one()
    return {"sightings": int(total), "unparsable": int(unparsable or 0), "short_links_unresolved": int(pending)}


def outlet_table(conn: Connection, *, datasets: Sequence[str] | None = None, listed_only: bool = False,
                 progress: Progress = SILENT) -> OutletTable:
    """Every outlet with sightings (in ``datasets``, default all) or named by the list in force, with its
    attributes and counts. ``units`` is None for an outlet none of whose sightings carries a unit."""
    ids = dataset_ids(conn, datasets)
    version = list_in_force(conn)
    progress.start("counting sightings per outlet")
    per = final_sightings(ids)
    u = t.canonical_urls.alias("u")
    oj = OutletJoin.of(u, version)
    am, sm = t.cluster_members.alias("am"), t.cluster_members.alias("sm")
    frm = oj.join(per.join(u, u.c.id == per.c.fid))
    frm = (frm.outerjoin(am, sa.and_(am.c.canonical_id == u.c.id, am.c.level == "article"))
           .outerjoin(sm, sa.and_(sm.c.canonical_id == u.c.id, sm.c.level == "story")))
    outlet = oj.outlet()
    q = (sa.select(outlet.label("outlet"),
                   sa.func.count(sa.distinct(per.c.dataset_id)).label("datasets"),
                   sa.func.count().label("sightings"),
                   sa.func.count(per.c.unit).label("with_unit"),
                   sa.func.count(sa.distinct(per.c.unit)).label("units"),
                   sa.func.count(sa.distinct(u.c.id)).label("urls"),
                   sa.func.count(sa.distinct(am.c.cluster_id)).label("articles"),
                   sa.func.count(sa.distinct(sm.c.cluster_id)).label("stories"))
         .select_from(frm).group_by(outlet))
    counted: dict[str | None, dict[str, Any]] = {}
    for got in conn.execute(q).mappings():
        counted[got["outlet"]] = {
            "datasets": int(got["datasets"]), "sightings": int(got["sightings"]),
            "units": int(got["units"]) if got["with_unit"] else None, "urls": int(got["urls"]),
            "articles": int(got["articles"]), "stories": int(got["stories"])}
        progress.advance()
    progress.finish()
    attrs = outlet_attributes(conn, version) if version is not None else {}
    columns = outlet_columns(conn, version) if version is not None else []
    summary = sighting_summary(conn, ids)
    no_outlet = counted.pop(None, None)
    summary["no_outlet"] = no_outlet["sightings"] if no_outlet else 0
    zero: dict[str, Any] = {"datasets": 0, "sightings": 0, "units": None, "urls": 0, "articles": 0, "stories": 0}
    names = set(attrs) | (set() if listed_only else {n for n in counted if n is not None})
    rows = []
    for name in names:
        row: dict[str, Any] = {"outlet": name}
        row.update(attrs.get(name) or dict.fromkeys(columns))
        row.update(counted.get(name) or zero)
        row["listed"] = name in attrs
        rows.append(row)
    rows.sort(key=lambda r: (-r["sightings"], str(r["outlet"])))
    summary["outlets"] = len(rows)
    summary["counted"] = sum(r["sightings"] for r in rows) if not listed_only else sum(
        v["sightings"] for n, v in counted.items() if n in attrs)
    return OutletTable(rows, columns, version, summary)


__all__ = ["COUNT_COLUMNS", "OutletTable", "dataset_ids", "final_sightings", "outlet_table", "sighting_summary"]
