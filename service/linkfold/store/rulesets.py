"""The ruleset registry: every ruleset ever used, by version number, so each canonical URL can say
which rules produced it and any version can be read back and applied again.

A version is the ``rulesets.id`` of a stored ruleset. Storing is idempotent by digest: the same rules
(under the same canonicaliser and Public Suffix List versions) always get the same version.
"""

from __future__ import annotations

import dataclasses
import logging
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon import CANON_VERSION, PSL_VERSION, Ruleset, default_rules, parse_rules
from ..errors import NotFound, RulesError
from .finals import store_ruleset_hosts
from .tables import rulesets

log = logging.getLogger("linkfold")


def store_ruleset(conn: Connection, ruleset: Ruleset, *, name: str | None = None) -> int:
    """Store ``ruleset`` unless a ruleset with its digest is stored; return its version either way."""
    found = conn.execute(sa.select(rulesets.c.id).where(rulesets.c.digest == ruleset.digest)).scalar()
    if found is not None:
        return int(found)
    row = {
        "name": (name or ruleset.name)[:200],
        "digest": ruleset.digest,
        "source": ruleset.source,
        "canon_version": CANON_VERSION,
        "psl_version": PSL_VERSION,
        "created_at": datetime.now(UTC),
    }
    try:
        # A savepoint, so that losing a race to another writer of the same digest leaves the caller's
        # transaction usable (PostgreSQL aborts the whole transaction on a failed statement otherwise).
        with conn.begin_nested():
            new_id = conn.execute(sa.insert(rulesets).values(**row).returning(rulesets.c.id)).scalar_one()
            store_ruleset_hosts(conn, int(new_id), ruleset.shortener_hosts)
    except sa.exc.IntegrityError:
        new_id = conn.execute(sa.select(rulesets.c.id).where(rulesets.c.digest == ruleset.digest)).scalar_one()
    else:
        log.info("stored ruleset %s as version %d (%s…)", row["name"], new_id, ruleset.digest[:12])
    return int(new_id)


def get_ruleset(conn: Connection, version: int) -> Ruleset:
    """The stored ruleset of ``version``, parsed again from its stored source."""
    row = conn.execute(sa.select(rulesets).where(rulesets.c.id == version)).mappings().first()
    if row is None:
        raise NotFound(f"no ruleset version {version}", hint="linkfold rules list shows the stored versions")
    return _from_row(row)


def latest_ruleset(conn: Connection) -> tuple[int, Ruleset]:
    """The newest stored ruleset and its version; stores the default ruleset as the first when none is."""
    row = conn.execute(sa.select(rulesets).order_by(rulesets.c.id.desc()).limit(1)).mappings().first()
    if row is None:
        ruleset = default_rules()
        return store_ruleset(conn, ruleset), ruleset
    return int(row["id"]), _from_row(row)


def current_ruleset(conn: Connection) -> Ruleset:
    """The newest stored ruleset, or the default one when none is stored; writes nothing (for readers)."""
    row = conn.execute(sa.select(rulesets).order_by(rulesets.c.id.desc()).limit(1)).mappings().first()
    return default_rules() if row is None else _from_row(row)


def list_rulesets(conn: Connection) -> list[dict[str, Any]]:
    """Every stored ruleset, oldest first, without its source (``get_ruleset`` reads that)."""
    rows = conn.execute(sa.select(rulesets.c.id, rulesets.c.name, rulesets.c.digest, rulesets.c.canon_version,
                                  rulesets.c.psl_version, rulesets.c.created_at)
                        .order_by(rulesets.c.id)).mappings().all()
    return [{"version": r["id"], "name": r["name"], "digest": r["digest"], "canon_version": r["canon_version"],
             "psl_version": r["psl_version"], "created_at": r["created_at"],
             "current": r["canon_version"] == CANON_VERSION and r["psl_version"] == PSL_VERSION}
            for r in rows]


def _from_row(row: Any) -> Ruleset:
    version = int(row["id"])
    try:
        ruleset = parse_rules(row["source"], source=f"ruleset version {version}")
    except RulesError as exc:
        # Only possible when a newer canonicaliser tightened validation; the stored text is unchanged.
        raise RulesError(f"stored ruleset no longer validates under this linkfold: {exc.reason}",
                         source=f"ruleset version {version}", line=exc.line) from None
    if ruleset.digest != row["digest"]:
        log.warning("ruleset version %d was stored under canonicaliser %s and suffix list %s; this linkfold "
                    "has %s and %s, so its canonical URLs may differ from the stored ones", version,
                    row["canon_version"], row["psl_version"], CANON_VERSION, PSL_VERSION)
    return dataclasses.replace(ruleset, name=row["name"])
