"""The co-exposure network as set-based SQL, on both backends.

Three statements over one grouped set, the distinct unit × outlet pairs of the datasets (with the unit's
sightings at the outlet), computed once into a temporary table: the outlets with their audiences (units, sightings), the number of units with
any pair, and the edges — the pairs self-joined on the unit, grouped by the outlet pair and kept when at
least ``min_units`` units share it. The database does the joins and the grouping; what comes back is one
row per outlet and per kept outlet pair, so memory does not grow with the number of sightings.

What a sighting counts for is the outlet of the URL it stands for (``store.finals.FinalsJoin``: after short
links and redirects, with the outlet list in force), as in exposure tables; unless ``all_urls``, only
sightings whose final URL is an article by the site rules count.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..store import tables as t
from ..store.finals import FinalsJoin


def pairs_select(*, dataset_ids: Sequence[int], all_urls: bool = False) -> sa.Select[Any]:
    """One row per unit × outlet that the datasets link, with ``sightings``: the bipartite unit–outlet
    table. Sightings without a unit or without a final outlet (a short link not yet followed) are left out."""
    s, r, c, f = t.sightings, t.raw_urls, t.canonical_urls, t.dataset_files
    fj = FinalsJoin.of(c)
    source = fj.join(s.join(r, r.c.id == s.c.raw_url_id).join(c, c.c.id == r.c.canonical_id))
    outlet = fj.column("outlet")
    # sightings has no index on dataset_id; file_id leads its unique key (tables.sightings_in_dataset).
    conditions = [s.c.file_id.in_(sa.select(f.c.id).where(f.c.dataset_id.in_(list(dataset_ids)))),
                  s.c.unit.is_not(None), outlet.is_not(None)]
    if not all_urls:
        conditions.append(fj.column("is_article").is_(True))
    # Group by position: the outlet expression is long.
    return (sa.select(s.c.unit.label("unit"), outlet.label("outlet"), sa.func.count().label("sightings"))
            .select_from(source).where(*conditions)
            .group_by(sa.literal_column("1"), sa.literal_column("2")))


def plan_for_all_rows(conn: Connection) -> None:
    """On PostgreSQL, no nested loops for the rest of this transaction. Grouping every sighting of a
    dataset, the planner expected a few thousand groups where there were hundreds of thousands and joined
    raw and canonical URLs with two index lookups per sighting; hash joins took half the time
    (bench/network_bench.py, 1M sightings: 8.2–8.5 s against 4.3–6.3 s)."""
    if conn.dialect.name == "postgresql":
        conn.exec_driver_sql("SET LOCAL enable_nestloop = off")


@contextmanager
def materialised(conn: Connection, pairs: sa.Select[Any]) -> Iterator[Any]:
    """The pairs computed once into a temporary table for the statements that read them (a CTE named in
    three statements would be computed three times); dropped afterwards. The table is the connection's own:
    nothing another session sees, nothing written to the registry."""
    name = f"lf_pairs_{uuid.uuid4().hex[:12]}"
    # Only integers and truth values are bound (dataset ids), so rendering them inline is safe.
    body = pairs.compile(dialect=conn.dialect, compile_kwargs={"literal_binds": True})
    plan_for_all_rows(conn)
    conn.exec_driver_sql(f"CREATE TEMPORARY TABLE {name} AS {body}".replace("%", "%%")
                         if conn.dialect.name == "postgresql" else f"CREATE TEMPORARY TABLE {name} AS {body}")
    try:
        if conn.dialect.name == "postgresql":
            conn.exec_driver_sql(f"ANALYZE {name}")  # the planner knows nothing of a fresh temporary table
        yield sa.table(name, sa.column("unit"), sa.column("outlet"), sa.column("sightings"))
    finally:
        conn.exec_driver_sql(f"DROP TABLE IF EXISTS {name}")


def nodes_select(p: Any) -> sa.Select[Any]:
    """Per outlet of the pairs ``p`` (a table or subquery of unit, outlet, sightings): ``units`` (its
    audience) and ``sightings``."""
    return (sa.select(p.c.outlet, sa.func.count().label("units"), sa.func.sum(p.c.sightings).label("sightings"))
            .group_by(p.c.outlet))


def units_select(p: Any) -> sa.Select[Any]:
    """How many distinct units have any pair: N of the lift."""
    return sa.select(sa.func.count(sa.distinct(p.c.unit)))


def edges_select(p: Any, *, min_units: int) -> sa.Select[Any]:
    """Per outlet pair (``outlet_a`` < ``outlet_b`` in the database's order): ``units`` exposed to both,
    kept when at least ``min_units``."""
    a, b = p.alias("a"), p.alias("b")
    units = sa.func.count()
    return (sa.select(a.c.outlet.label("outlet_a"), b.c.outlet.label("outlet_b"), units.label("units"))
            .select_from(a.join(b, sa.and_(a.c.unit == b.c.unit, a.c.outlet < b.c.outlet)))
            .group_by(a.c.outlet, b.c.outlet).having(units >= min_units))


#: Buckets of sightings per unit at an outlet, for the exposure distribution: (lowest, highest or None).
SIGHTING_BUCKETS: tuple[tuple[int, int | None], ...] = ((1, 1), (2, 2), (3, 4), (5, 9), (10, 19), (20, 49),
                                                        (50, None))


def distribution_select(pairs: sa.Select[Any]) -> sa.Select[Any]:
    """Per outlet and bucket of :data:`SIGHTING_BUCKETS` (its index): how many units had that many
    sightings at the outlet."""
    p = pairs.subquery("pairs")
    bucket = sa.case(*[(p.c.sightings <= hi, i) for i, (_lo, hi) in enumerate(SIGHTING_BUCKETS) if hi is not None],
                     else_=len(SIGHTING_BUCKETS) - 1)
    return (sa.select(p.c.outlet, bucket.label("bucket"), sa.func.count().label("units"))
            .group_by(sa.literal_column("1"), sa.literal_column("2")))


__all__ = ["SIGHTING_BUCKETS", "distribution_select", "edges_select", "materialised", "nodes_select",
           "pairs_select", "plan_for_all_rows", "units_select"]
