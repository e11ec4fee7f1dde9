"""Datasets side by side (``linkfold compare``): per-outlet and per-attribute shares, story overlap, top
stories. Sightings count as exposure counts them (``exposure.sighting_targets``: the URL a sighting stands
for; only articles unless ``all_urls``). Grouping is done by the database; the per-story pass streams
(corpus.seen_select, ordered by ID) through :class:`figures.Overlap`, so memory does not grow with the
number of stories.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..corpus import LEVELS, dataset_ids, representatives, seen_select
from ..errors import ConfigError, InputError
from ..exposure import DEFAULT_MIN_UNITS, sighting_targets
from ..network.query import plan_for_all_rows
from ..outlets import outlet_attributes, outlet_columns
from ..store import tables as t
from .figures import Overlap, share

#: The output formats of a comparison.
COMPARE_FORMATS = ("table", "jsonl")
#: Stories listed per dataset (the most seen, and those seen only there) unless asked for more or fewer.
DEFAULT_TOP = 10
NOT_LISTED = "(not listed)"


@dataclass
class Comparison:
    """A comparison's figures, in long form (one dict per dataset × outlet, and so on). ``as_dict`` is the
    API's JSON; ``lines_json`` the JSON lines (each with a ``section``); ``table`` the terminal's text."""

    datasets: list[dict[str, Any]]
    level: str
    min_units: int
    outlets: list[dict[str, Any]] = field(default_factory=list)
    attributes: list[dict[str, Any]] = field(default_factory=list)
    overlap: list[dict[str, Any]] = field(default_factory=list)
    top: list[dict[str, Any]] = field(default_factory=list)
    only: list[dict[str, Any]] = field(default_factory=list)
    suppressed: int = 0

    SECTIONS = ("datasets", "outlets", "attributes", "overlap", "top", "only")

    def as_dict(self) -> dict[str, Any]:
        return {"level": self.level, "min_units": self.min_units, "suppressed": self.suppressed,
                **{s: getattr(self, s) for s in self.SECTIONS}}

    def lines_json(self) -> Iterator[dict[str, Any]]:
        singular = {"datasets": "dataset", "outlets": "outlet", "attributes": "attribute", "overlap": "overlap",
                    "top": "top", "only": "only"}
        for section in self.SECTIONS:
            for row in getattr(self, section):
                yield {"section": singular[section], **row}

    def lines(self) -> list[str]:
        names = [d["dataset"] for d in self.datasets]
        out = [f"compared {', '.join(names)} by {self.level}: "
               + "; ".join(f"{d['dataset']} {d['sightings']:,} sightings, {d['stories']:,} {self.level} IDs"
                           for d in self.datasets)]
        if self.suppressed:
            out.append(f"note: {self.suppressed:,} unit counts below {self.min_units} suppressed")
        return out

    def table(self) -> str:
        from .text import comparison_table

        return comparison_table(self)


def _counted(dataset_ids_: Sequence[int], level: str, all_urls: bool) -> tuple[Any, Any, Any, list[Any]]:
    p = sighting_targets(dataset_ids=dataset_ids_, level=level)
    where = [p.where, p.target.is_not(None)]
    if not all_urls:
        where.append(p.is_article.is_(True))
    return p.source, p.target, p.unit, where


def _floored(units: int, min_units: int) -> int | None:
    return units if units >= min_units else None


def _outlet_rows(conn: Connection, ids: dict[int, str], totals: dict[int, dict[str, int]], *, all_urls: bool,
                 min_units: int, values: dict[str, str] | None = None) -> tuple[list[dict[str, Any]], int]:
    """Per dataset × outlet (or × the outlet's value in ``values``, outlets it lacks under
    :data:`NOT_LISTED`): sightings, units and their shares."""
    source, target, unit, where = _counted(list(ids), "outlet", all_urls)
    group: sa.ColumnElement[Any] = target
    if values is not None:
        cases = [(target == o, v) for o, v in sorted(values.items())]
        group = sa.case(*cases, else_=sa.literal(NOT_LISTED)) if cases else sa.literal(NOT_LISTED)
    ds = t.sightings.c.dataset_id
    q = (sa.select(ds, group.label("g"), sa.func.count(), sa.func.count(sa.distinct(unit)))
         .select_from(source).where(*where).group_by(ds, group))
    rows, suppressed = [], 0
    for dataset_id, g, n, u in conn.execute(q):
        tot = totals[int(dataset_id)]
        units = _floored(int(u), min_units) if tot["units"] else None
        if tot["units"] and units is None:
            suppressed += 1
        rows.append({"dataset": ids[int(dataset_id)], "value": g, "sightings": int(n),
                     "sightings_share": share(int(n), tot["sightings"]), "units": units,
                     "units_share": share(units, tot["units"])})
    order = {name: i for i, name in enumerate(ids.values())}
    rows.sort(key=lambda r: (-r["sightings"], str(r["value"]), order[r["dataset"]]))
    return rows, suppressed


def compare_datasets(engine: Engine, *, datasets: Sequence[str], level: str = "story", top: int = DEFAULT_TOP,
                     all_urls: bool = False, min_units: int = DEFAULT_MIN_UNITS) -> Comparison:
    """Compare ``datasets`` (at least two) side by side; see the module doc and docs/corpus.md."""
    if level not in LEVELS:
        raise ConfigError(f"unknown level {level!r}: use one of {', '.join(LEVELS)}")
    if min_units < 1 or top < 1:
        raise ConfigError("min_units and top must be at least 1")
    if len(dict.fromkeys(datasets)) < 2:
        # Bad input, not a setting: over HTTP a 400 (RFC 9110 §15.5.1), on the command line exit 6.
        raise InputError(f"compare needs at least two different datasets, not {', '.join(datasets) or 'none'}")
    with engine.connect() as conn:
        ids = dataset_ids(conn, datasets)
        plan_for_all_rows(conn)  # every sighting is grouped: hash joins (network.query says why)
        order = list(ids)
        # Totals per dataset, at outlet level (what has an outlet) and at the story level (the shares there).
        source, _target, unit, where = _counted(order, "outlet", all_urls)
        ds = t.sightings.c.dataset_id
        totals = {i: {"sightings": 0, "units": 0} for i in order}
        for dataset_id, n, u in conn.execute(sa.select(ds, sa.func.count(), sa.func.count(sa.distinct(unit)))
                                             .select_from(source).where(*where).group_by(ds)):
            totals[int(dataset_id)] = {"sightings": int(n), "units": int(u)}
        story_source, _st, _su, story_where = _counted(order, level, all_urls)
        story_totals = {i: 0 for i in order}
        for dataset_id, n in conn.execute(sa.select(ds, sa.func.count()).select_from(story_source)
                                          .where(*story_where).group_by(ds)):
            story_totals[int(dataset_id)] = int(n)

        outlets, suppressed = _outlet_rows(conn, ids, totals, all_urls=all_urls, min_units=min_units)
        attrs = outlet_attributes(conn)
        attribute_rows: list[dict[str, Any]] = []
        for column in outlet_columns(conn):
            values = {o: "" if a.get(column) is None else str(a.get(column)) for o, a in attrs.items()}
            rows, hidden = _outlet_rows(conn, ids, totals, all_urls=all_urls, min_units=min_units,
                                        values=values)
            suppressed += hidden
            attribute_rows.extend({"attribute": str(column), **r} for r in rows)

        overlap = Overlap([story_totals[i] for i in order], top=top)
        q = seen_select(dataset_ids=order, level=level, all_urls=all_urls)  # any order: the heaps break ties
        result = conn.execute(q.execution_options(yield_per=5000, stream_results=True)).mappings()
        for row in result:
            counts = [int(row[f"sightings_{i}"] or 0) for i in range(len(order))]
            units = [int(row[f"units_{i}"] or 0) for i in range(len(order))]
            overlap.add(str(row["cluster_id"]), counts, units)
        id_col = "story_id" if level == "story" else "article_id"
        tops: list[dict[str, Any]] = []
        onlies: list[dict[str, Any]] = []
        for pos, dataset_id in enumerate(order):
            for bucket, only in ((tops, False), (onlies, True)):
                for rank, (cid, n, u) in enumerate(overlap.top_of(pos, only=only), start=1):
                    units_shown = _floored(u, min_units) if totals[dataset_id]["units"] else None
                    if totals[dataset_id]["units"] and units_shown is None:
                        suppressed += 1
                    bucket.append({"dataset": ids[dataset_id], "rank": rank, id_col: cid, "sightings": n,
                                   "sightings_share": share(n, story_totals[dataset_id]), "units": units_shown})
        reps = representatives(conn, level, [r[id_col] for r in tops + onlies])
    for r in tops + onlies:
        r["title"] = (reps.get(r[id_col]) or {}).get("title")
    names = list(ids.values())
    summary = [{"dataset": ids[i], "sightings": story_totals[i], "outlet_sightings": totals[i]["sightings"],
                "units": totals[i]["units"] or None, "stories": overlap.stories[pos],
                "only_here": overlap.only[pos]} for pos, i in enumerate(order)]
    pairs = [{"a": names[p["a"]], "b": names[p["b"]], "stories_a": overlap.stories[p["a"]],
              "stories_b": overlap.stories[p["b"]], "both": p["both"], "either": p["either"],
              "jaccard": p["jaccard"], "weighted_jaccard": p["weighted_jaccard"]} for p in overlap.pairs()]
    return Comparison(summary, level, min_units,
                      outlets=[{"outlet": r.pop("value"), **r} for r in outlets],
                      attributes=attribute_rows and [{"attribute": r["attribute"], "value": r["value"],
                                                      **{k: v for k, v in r.items()
                                                         if k not in ("attribute", "value")}}
                                                     for r in attribute_rows],
                      overlap=pairs, top=tops, only=onlies, suppressed=suppressed)


__all__ = ["COMPARE_FORMATS", "DEFAULT_TOP", "NOT_LISTED", "Comparison", "compare_datasets"]
