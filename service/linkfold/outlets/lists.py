"""Stored outlet lists: loading a version, the list in force, outlet attributes, and the outlet of a URL.

A version is an ``outlet_lists`` row; the newest is in force. Loading is idempotent by content: the same
file bytes (with the same conflict choice) give the same version again, and nothing is written.

**Which outlet a URL belongs to** (docs/outlets.md): the list in force names it when one of its entries
matches the URL's host exactly, else its registered domain — the same order in which the rules file's
site sections are found; otherwise it is the outlet the canonicaliser gave (the site rule's ``outlet``,
else the registered domain). The list is applied when a query reads, by a join on
``outlet_entries (list_id, match)``, so loading a list rewrites no URL and a new list applies at once.
:class:`OutletJoin` is that join for any query over canonical URLs.
"""

from __future__ import annotations

import hashlib
import logging
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Literal

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..errors import InputError, OutletListError
from ..store import tables as t
from ..store.migrate import require_schema
from ..store.rulesets import current_ruleset
from .listfile import OutletEntry, OutletList, RuleConflict, parse_outlet_list, rule_conflicts

log = logging.getLogger("linkfold")

Prefer = Literal["list", "rules"]
#: Which side wins when the outlet list and the rules file name a domain's outlet differently.
PREFER_CHOICES: tuple[str, ...] = ("list", "rules")


@dataclass(frozen=True)
class LoadResult:
    """What :func:`load_outlet_list` did: ``created`` False when the content was stored already."""

    version: int
    created: bool
    in_force: int
    name: str
    entries: int
    outlets: int
    columns: tuple[str, ...]
    conflicts: tuple[RuleConflict, ...] = field(default=())
    prefer: str | None = None
    checked_only: bool = False


def list_in_force(conn: Connection) -> int | None:
    """The version of the outlet list in force (the newest), or None when none was loaded."""
    found = conn.execute(sa.select(sa.func.max(t.outlet_lists.c.id))).scalar()
    return None if found is None else int(found)


def _resolve(parsed: OutletList, conflicts: list[RuleConflict], prefer: Prefer | None,
             source: str) -> list[OutletEntry]:
    entries = list(parsed.entries)
    if not conflicts:
        return entries
    if prefer is None:
        problems = tuple((c.line_no, c.reason()) for c in conflicts)
        more = len(conflicts) - 1
        raise OutletListError(conflicts[0].reason(), source=source, line=conflicts[0].line_no, problems=problems,
                              hint=(f"and {more} more; " if more else "") + "nothing was stored; make the names agree, "
                                   "or say which wins with --prefer list|rules (docs/outlets.md)")
    if prefer == "list":
        return entries
    # The rules' name wins: the entry takes it for its own host; a site under a listed domain gets an
    # entry of its own, with the attributes of the line that named the domain.
    by_line = {e.line_no: i for i, e in enumerate(entries)}
    for c in conflicts:
        e = entries[by_line[c.line_no]]
        if c.under:
            entries.append(OutletEntry(c.rules_host, c.rules, dict(e.attributes), e.line_no, c.rules_host))
        else:
            entries[by_line[c.line_no]] = OutletEntry(e.match, c.rules, e.attributes, e.line_no, e.written)
    return entries


def load_outlet_list(engine: Engine, path: Path | str, *, prefer: Prefer | None = None,
                     name: str | None = None, check_only: bool = False) -> LoadResult:
    """Check the outlet list file ``path`` and store it as a new version unless its content is stored.

    Every line is checked first (:func:`~linkfold.outlets.listfile.parse_outlet_list`), then the entries
    against the site outlet names of the ruleset in force: a disagreement refuses the load unless
    ``prefer`` says which name wins. A refused load writes nothing. ``check_only`` checks and writes nothing.
    """
    require_schema(engine)
    path = Path(path)
    source = str(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    with engine.begin() as conn:
        rules = current_ruleset(conn)
        parsed = parse_outlet_list(data, source=source, rules=rules)
        conflicts = rule_conflicts(parsed.entries, rules)
        entries = _resolve(parsed, conflicts, prefer, source)
        digest = parsed.sha256
        if conflicts and prefer is not None:
            # The same bytes read with the other choice are another list.
            digest = hashlib.sha256(data + b"\x00prefer=" + prefer.encode()).hexdigest()
        outlets = len({e.outlet for e in entries})
        base = LoadResult(version=0, created=False, in_force=0, name=(name or path.name)[:200], entries=len(entries),
                          outlets=outlets, columns=parsed.columns, conflicts=tuple(conflicts),
                          prefer=prefer if conflicts else None)
        ol = t.outlet_lists
        found = conn.execute(sa.select(ol.c.id).where(ol.c.sha256 == digest)).scalar()
        in_force = list_in_force(conn)
        if found is not None:
            return replace(base, version=int(found), in_force=int(in_force or found))
        if check_only:
            return replace(base, in_force=in_force or 0, checked_only=True)
        try:
            with conn.begin_nested():
                version = int(conn.execute(sa.insert(ol).values(
                    name=base.name, sha256=digest, columns=list(parsed.columns),
                    created_at=datetime.now(UTC)).returning(ol.c.id)).scalar_one())
                conn.execute(sa.insert(t.outlet_entries), [
                    {"list_id": version, "match": e.match, "outlet": e.outlet, "attributes": e.attributes,
                     "line_no": e.line_no} for e in entries])
        except sa.exc.IntegrityError:
            # Another writer stored the same content a moment ago: that version is this one.
            version = int(conn.execute(sa.select(ol.c.id).where(ol.c.sha256 == digest)).scalar_one())
            return replace(base, version=version, in_force=list_in_force(conn) or version)
        log.info("stored outlet list %s as version %d (%d entries)", base.name, version, len(entries))
        return replace(base, version=version, created=True, in_force=version)


def outlet_attributes(conn: Connection, version: int | None = None) -> dict[str, dict[str, Any]]:
    """Outlet name -> its attributes under the outlet list in force (or ``version``); empty without a list.

    Every outlet of the list has every attribute column of its file (None where the file leaves it empty);
    the lines of a group of domains agree, which the load checked.
    """
    if version is None:
        version = list_in_force(conn)
        if version is None:
            return {}
    oe = t.outlet_entries
    columns = conn.execute(sa.select(t.outlet_lists.c.columns).where(t.outlet_lists.c.id == version)).scalar()
    out: dict[str, dict[str, Any]] = {}
    for outlet, attrs in conn.execute(sa.select(oe.c.outlet, oe.c.attributes).where(oe.c.list_id == version)
                                      .order_by(oe.c.line_no)):
        have = out.setdefault(outlet, dict.fromkeys(columns or ()))
        for key, value in (attrs or {}).items():
            if have.get(key) is None:
                have[key] = value
    return out


def outlet_columns(conn: Connection, version: int | None = None) -> list[str]:
    """The attribute columns of the list in force (or ``version``), in file order."""
    if version is None:
        version = list_in_force(conn)
        if version is None:
            return []
    return list(conn.execute(sa.select(t.outlet_lists.c.columns).where(t.outlet_lists.c.id == version)).scalar() or [])


def outlet_matches(conn: Connection, version: int | None = None) -> dict[str, list[str]]:
    """Outlet name -> the domains and hosts the list in force (or ``version``) gives it, in file order."""
    if version is None:
        version = list_in_force(conn)
        if version is None:
            return {}
    oe = t.outlet_entries
    out: dict[str, list[str]] = {}
    for outlet, match in conn.execute(sa.select(oe.c.outlet, oe.c.match).where(oe.c.list_id == version)
                                      .order_by(oe.c.line_no, oe.c.id)):
        out.setdefault(outlet, []).append(match)
    return out


def list_outlet_lists(conn: Connection) -> list[dict[str, Any]]:
    """Every stored outlet list version, oldest first, with its entry and outlet counts."""
    ol, oe = t.outlet_lists, t.outlet_entries
    counts = (sa.select(oe.c.list_id, sa.func.count().label("entries"),
                        sa.func.count(sa.distinct(oe.c.outlet)).label("outlets"))
              .group_by(oe.c.list_id).subquery())
    rows = conn.execute(sa.select(ol.c.id, ol.c.name, ol.c.sha256, ol.c.columns, ol.c.created_at,
                                  counts.c.entries, counts.c.outlets)
                        .outerjoin(counts, counts.c.list_id == ol.c.id).order_by(ol.c.id)).mappings().all()
    newest = rows[-1]["id"] if rows else None
    return [{"version": r["id"], "name": r["name"], "sha256": r["sha256"], "columns": list(r["columns"] or []),
             "entries": int(r["entries"] or 0), "outlets": int(r["outlets"] or 0), "created_at": r["created_at"],
             "in_force": r["id"] == newest} for r in rows]


def current_conflicts(conn: Connection) -> list[RuleConflict]:
    """Disagreements between the list in force and the ruleset in force now (a newer ruleset may rename a
    site after the list was loaded). The list's names apply to its entries either way."""
    version = list_in_force(conn)
    if version is None:
        return []
    oe = t.outlet_entries
    entries = tuple(OutletEntry(m, o, {}, ln, m) for m, o, ln in conn.execute(
        sa.select(oe.c.match, oe.c.outlet, oe.c.line_no).where(oe.c.list_id == version).order_by(oe.c.line_no)))
    return rule_conflicts(entries, current_ruleset(conn))


@dataclass(frozen=True)
class OutletJoin:
    """The outlet of canonical URL ``u`` (a table or alias) under outlet list ``version``: two outer joins on
    ``outlet_entries``' unique key (host, then registered domain), at most one row each."""

    u: Any
    version: int | None
    by_host: Any = None
    by_domain: Any = None

    @classmethod
    def of(cls, u: Any, version: int | None) -> OutletJoin:
        return cls(u, version, t.outlet_entries.alias("oe_host"), t.outlet_entries.alias("oe_domain"))

    def join(self, base: Any) -> Any:
        """``base`` (a FROM clause holding ``u``) with the entry joins (none without a list)."""
        if self.version is None:
            return base
        h, d = self.by_host, self.by_domain
        return (base.outerjoin(h, sa.and_(h.c.list_id == self.version, h.c.match == self.u.c.host))
                .outerjoin(d, sa.and_(d.c.list_id == self.version, d.c.match == self.u.c.domain)))

    def outlet(self) -> sa.ColumnElement[Any]:
        """The outlet: the list's by host, else by registered domain, else the canonicaliser's."""
        if self.version is None:
            return self.u.c.outlet
        return sa.func.coalesce(self.by_host.c.outlet, self.by_domain.c.outlet, self.u.c.outlet)

    def listed(self) -> sa.ColumnElement[Any]:
        """True when the list in force names the URL's host or registered domain."""
        if self.version is None:
            return sa.false()
        return sa.or_(self.by_host.c.id.is_not(None), self.by_domain.c.id.is_not(None))


def outlet_for_hosts(conn: Connection, hosts: Mapping[str, tuple[str | None, str | None]]) -> dict[str, str | None]:
    """Outlet of each host given as host -> (registered domain, the canonicaliser's outlet), under the list in
    force; for callers that hold a few hosts in memory rather than rows of ``canonical_urls``."""
    version = list_in_force(conn)
    if version is None:
        return {h: o for h, (_d, o) in hosts.items()}
    oe = t.outlet_entries
    keys = {h for h in hosts} | {d for d, _o in hosts.values() if d}
    found: dict[str, str] = {}
    keys_sorted = sorted(keys)
    for i in range(0, len(keys_sorted), 500):
        found.update((m, o) for m, o in conn.execute(sa.select(oe.c.match, oe.c.outlet).where(
            oe.c.list_id == version, oe.c.match.in_(keys_sorted[i:i + 500]))))
    return {h: found.get(h) or (found.get(d) if d else None) or o for h, (d, o) in hosts.items()}


__all__ = [
    "PREFER_CHOICES",
    "LoadResult",
    "OutletJoin",
    "current_conflicts",
    "list_in_force",
    "list_outlet_lists",
    "load_outlet_list",
    "outlet_attributes",
    "outlet_columns",
    "outlet_for_hosts",
    "outlet_matches",
]
