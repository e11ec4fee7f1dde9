"""Planner statistics after bulk changes (PostgreSQL).

PostgreSQL plans a query from the statistics ``ANALYZE`` gathers. Autovacuum refreshes them on its own
schedule, so right after a stage has loaded or rewritten a large part of a table the planner still sees
the table as it was: a join over the ``sighting_links`` view right after a first load was reported at 28 s
with the stale statistics and 0.9 s after ``ANALYZE`` (issue 15). Every stage that changes a table's size a lot calls
:func:`refresh_statistics` at its end, so the next query (often the user's, a minute later) is planned on
what is there now.

The rule: a table is analysed when the rows changed since its last analysis — the larger of what the
stage says it wrote and ``pg_stat_user_tables.n_mod_since_analyze`` — are at least :data:`MIN_ROWS` and more
than :data:`FRACTION` of the rows the planner believes the table holds (``pg_class.reltuples``; a table
never analysed counts as empty). This is autovacuum's own rule (``autovacuum_analyze_threshold`` 50 plus
``autovacuum_analyze_scale_factor`` 0.1 of the table, PostgreSQL's defaults), applied at once instead of
at its next round, with a higher floor so that small stages do not pay for it. The stage's own count
matters because a backend's counters reach ``pg_stat_user_tables`` only some time after it commits.
On SQLite nothing is done: its planner works without gathered statistics, and the tables the stages
query are small or indexed for the purpose.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from . import tables as t
from .engine import is_postgres

log = logging.getLogger("linkfold")

#: Share of a table's rows that must have changed for :func:`refresh_statistics` to analyse it.
FRACTION = 0.1
#: Fewest changed rows for which a table is analysed at all.
MIN_ROWS = 1000

_CHANGES = sa.text("""
    SELECT c.relname, c.reltuples, COALESCE(s.n_mod_since_analyze, 0) AS n_mod
    FROM pg_class c
    JOIN pg_namespace n ON n.oid = c.relnamespace
    LEFT JOIN pg_stat_user_tables s ON s.relid = c.oid
    WHERE n.nspname = current_schema() AND c.relkind IN ('r', 'p') AND c.relname = ANY(:names)
""")


def tables_to_analyse(rows: Iterable[tuple[str, float, int]], changed: Mapping[str, int], *,
                      fraction: float = FRACTION, min_rows: int = MIN_ROWS) -> list[str]:
    """The rule above, on (table, reltuples, n_mod_since_analyze) rows: which tables to analyse."""
    out = []
    for name, reltuples, n_mod in rows:
        modified = max(int(n_mod or 0), int(changed.get(name, 0)))
        believed = max(float(reltuples or 0.0), 0.0)  # -1: never analysed (PostgreSQL 14+)
        if modified >= min_rows and modified > fraction * believed:
            out.append(name)
    return sorted(out)


def refresh_statistics(engine: Engine, tables: Iterable[str], *, changed: Mapping[str, int] | None = None,
                       fraction: float = FRACTION, min_rows: int = MIN_ROWS) -> list[str]:
    """``ANALYZE`` those of ``tables`` that changed a lot (see the module's rule); return their names.

    ``changed`` is what the caller knows it wrote, by table. Only tables of our schema are named; a failure
    here is logged and never fails the stage that called it, whose work is already committed.
    """
    if not is_postgres(engine):
        return []
    changed = dict(changed or {})
    names = sorted((set(tables) | set(changed)) & set(t.metadata.tables))
    if not names:
        return []
    try:
        with engine.begin() as conn:
            rows = [(r.relname, r.reltuples, r.n_mod) for r in conn.execute(_CHANGES, {"names": names})]
            chosen = tables_to_analyse(rows, changed, fraction=fraction, min_rows=min_rows)
            quote = conn.dialect.identifier_preparer.quote
            for name in chosen:
                conn.execute(sa.text(f"ANALYZE {quote(name)}"))
    except sa.exc.SQLAlchemyError as exc:
        log.warning("could not refresh planner statistics of %s: %s", ", ".join(names), exc)
        return []
    if chosen:
        log.debug("planner statistics refreshed: %s", ", ".join(chosen))
    return chosen


__all__ = ["FRACTION", "MIN_ROWS", "refresh_statistics", "tables_to_analyse"]
