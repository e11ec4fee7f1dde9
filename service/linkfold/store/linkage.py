"""The linkage table of a dataset: one row per sighting, from the raw URL to its canonical URL, its IDs
and what it stands for (``linkfold export``)."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .clock import utc
from .datasets import dataset_files
from .finals import FINAL_COLUMNS, FinalsJoin

LINK_COLUMNS = ("dataset", "file", "line_no", "position", "row_key", "seen_at", "raw_url", "canonical_url",
                "url_key", "domain", "outlet", "article_id", "story_id", *FINAL_COLUMNS)


def iter_links(conn: Connection, dataset: dict[str, Any], *, yield_per: int = 10000) -> Iterator[tuple]:
    """The linkage table of one dataset, one tuple per sighting in ``LINK_COLUMNS`` order, file by file
    and in line order (each file's rows come off the unique (file, line, position) index in order)."""
    s, r, c = t.sightings, t.raw_urls, t.canonical_urls
    fj = FinalsJoin.of(c)
    am, sm = t.cluster_members.alias("am"), t.cluster_members.alias("sm")
    for file in dataset_files(conn, dataset["id"]):
        q = (sa.select(s.c.line_no, s.c.position, s.c.row_key, s.c.seen_at, r.c.raw, c.c.url, c.c.url_key,
                       c.c.domain, c.c.outlet, am.c.cluster_id, sm.c.cluster_id.label("story_id"),
                       *fj.columns())
             .select_from(fj.join(s.join(r, r.c.id == s.c.raw_url_id).outerjoin(c, c.c.id == r.c.canonical_id))
                          .outerjoin(am, sa.and_(am.c.canonical_id == c.c.id, am.c.level == "article"))
                          .outerjoin(sm, sa.and_(sm.c.canonical_id == c.c.id, sm.c.level == "story")))
             .where(s.c.file_id == file["id"])
             .order_by(s.c.line_no, s.c.position))
        result = conn.execute(q.execution_options(yield_per=yield_per))
        name, fname = dataset["name"], file["file_name"]
        for (line_no, position, row_key, seen_at, raw, url, key, domain, outlet, article_id, story_id,
             *finals) in result:
            # article_id and story_id stay empty until the dedupe stage assigns them; the final columns
            # until a short link is followed (store/finals.py).
            yield (name, fname, int(line_no), int(position), row_key, utc(seen_at), raw, url, key, domain,
                   outlet, article_id, story_id, *finals)


__all__ = ["LINK_COLUMNS", "iter_links"]
