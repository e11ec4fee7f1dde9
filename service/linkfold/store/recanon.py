"""The writes of re-canonicalisation: which raw URLs are pending under a ruleset, and moving them.

A raw URL is pending when it was canonicalised under another ruleset version than the newest (or under
none). Moving one writes its new canonical URL (canonical rows are never changed or deleted), points the
raw URL at it, and records the move in ``canon_changes`` (old → new, ruleset, run).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from . import tables as t
from .bulk import insert_new_rows

_IN_CHUNK = 500  # url keys per IN (…) list, well under SQLite's limit of bound parameters


def _pending_filter(version: int) -> sa.ColumnElement[bool]:
    return sa.or_(t.raw_urls.c.ruleset_id.is_(None), t.raw_urls.c.ruleset_id != version)


def newest_version(conn: Connection) -> int | None:
    """The newest stored ruleset version, or None before any is stored."""
    return conn.execute(sa.select(sa.func.max(t.rulesets.c.id))).scalar()


def count_recanon_pending(conn: Connection, version: int | None = None) -> int:
    """Raw URLs not canonicalised under ``version`` (default: the newest; 0 when none is stored)."""
    version = newest_version(conn) if version is None else version
    if version is None:
        return 0
    return int(conn.execute(sa.select(sa.func.count()).select_from(t.raw_urls)
                            .where(_pending_filter(version))).scalar_one())


@dataclass(frozen=True)
class PendingRaw:
    id: int
    raw: str
    canonical_id: int | None


def select_recanon_batch(conn: Connection, version: int, *, after_id: int, limit: int) -> list[PendingRaw]:
    """The next ``limit`` pending raw URLs after ``after_id``, in id order (a keyset cursor within a run:
    what it passes over stays pending by its version, so the next run finds it)."""
    r = t.raw_urls
    rows = conn.execute(sa.select(r.c.id, r.c.raw, r.c.canonical_id).where(_pending_filter(version))
                        .where(r.c.id > after_id).order_by(r.c.id).limit(limit)).all()
    return [PendingRaw(int(x.id), x.raw, x.canonical_id) for x in rows]


@dataclass(frozen=True)
class Recanonicalised:
    """One raw URL's outcome: its new canonical URL's row (``None`` when the canonicaliser refused it,
    with ``error`` its reason)."""

    raw_id: int
    old_canonical_id: int | None
    canonical: Mapping[str, Any] | None
    error: str | None = None


@dataclass
class MoveCounts:
    new_canonical: int = 0
    moved: int = 0
    unchanged: int = 0
    restated: int = 0  # stored canonical URLs whose is_article or outlet the new ruleset changed


def apply_recanon(conn: Connection, outcomes: Sequence[Recanonicalised], *, version: int, run_id: int | None,
                  at: datetime) -> MoveCounts:
    """Store a batch of outcomes under ``version``: new canonical rows, ``is_article`` and ``outlet`` of
    stored ones restated under the new rules, the raw URLs' pointers and errors, and a ``canon_changes``
    row for each raw URL whose canonical URL changed."""
    counts = MoveCounts()
    new_rows: dict[str, dict[str, Any]] = {}
    for o in outcomes:
        if o.canonical is not None:
            new_rows.setdefault(o.canonical["url_key"], {**o.canonical, "ruleset_id": version, "created_at": at})
    counts.new_canonical = insert_new_rows(conn, t.canonical_urls, list(new_rows.values()), ["url_key"])
    ids: dict[str, int] = {}
    restate: list[dict[str, Any]] = []
    keys = list(new_rows)
    c = t.canonical_urls
    for i in range(0, len(keys), _IN_CHUNK):
        chunk = keys[i:i + _IN_CHUNK]
        for key, cid, is_article, outlet in conn.execute(
                sa.select(c.c.url_key, c.c.id, c.c.is_article, c.c.outlet).where(c.c.url_key.in_(chunk))):
            ids[key] = cid
            # A row already stored keeps its form, but the new rules may say something else of it (a new
            # article pattern, a site's outlet name): verdicts follow the ruleset in force (issue 19).
            want = new_rows[key]
            if (is_article, outlet) != (want["is_article"], want["outlet"]):
                restate.append({"b_cid": cid, "b_is_article": want["is_article"], "b_outlet": want["outlet"]})
    if restate:
        conn.execute(c.update().where(c.c.id == sa.bindparam("b_cid"))
                     .values(is_article=sa.bindparam("b_is_article"), outlet=sa.bindparam("b_outlet")), restate)
    counts.restated = len(restate)
    updates, changes = [], []
    for o in outcomes:
        new_id = ids[o.canonical["url_key"]] if o.canonical is not None else None
        updates.append({"b_id": o.raw_id, "b_canonical_id": new_id, "b_error": o.error})
        if new_id != o.old_canonical_id:
            counts.moved += 1
            changes.append({"raw_url_id": o.raw_id, "old_canonical_id": o.old_canonical_id,
                            "new_canonical_id": new_id, "ruleset_id": version, "run_id": run_id, "changed_at": at})
        else:
            counts.unchanged += 1
    if updates:
        conn.execute(
            t.raw_urls.update().where(t.raw_urls.c.id == sa.bindparam("b_id"))
            .values(canonical_id=sa.bindparam("b_canonical_id"), reason=sa.bindparam("b_error"),
                    ruleset_id=version),
            updates)
    if changes:
        conn.execute(t.canon_changes.insert(), changes)
    return counts


__all__ = ["MoveCounts", "PendingRaw", "Recanonicalised", "apply_recanon", "count_recanon_pending",
           "newest_version", "select_recanon_batch"]
