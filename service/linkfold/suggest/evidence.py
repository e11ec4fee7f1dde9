"""The stored evidence rule suggestions read: canonical URLs with what their pages held, follow outcomes by
host, texts shared across hosts, and sinks. Every query streams or groups in the database, so memory
stays flat however many URLs are stored (one registered domain's shapes at a time at most).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon import Ruleset
from ..canon.shapes import path_shape
from ..dedupe.sinks import End, SinkKind, fan_in, is_home_page, sink_kind
from ..store import evidence as ev
from ..store import tables as t
from ..store.finals import list_in_force
from .templates import Label

#: Reasons a stored page held no article (content/usable.py) that say the page is not one. A paywall or a
#: consent wall hides an article; a broken page says nothing: those URLs are left unlabelled.
NOT_ARTICLE_REASONS = ("not_html", "empty", "too_short", "video")
#: Reasons that say a page hid an article: such a host is never proposed as a never-article host.
HIDING_REASONS = ("paywall", "consent_wall")
_BATCH = 10_000


@dataclass(frozen=True, slots=True)
class UrlRow:
    url: str
    host: str
    domain: str
    label: Label
    text_hash: str | None  # the one usable text's hash; None when none, or when the URL had two different


def _retired() -> sa.Select:
    """Canonical URLs a re-canonicalisation moved every raw URL away from: old forms, not evidence now."""
    cc, r = t.canon_changes, t.raw_urls
    return (sa.select(cc.c.old_canonical_id).where(cc.c.old_canonical_id.is_not(None))
            .where(~sa.exists().where(r.c.canonical_id == cc.c.old_canonical_id)))


def label_of(url: str, usable: int | None, negative: int | None) -> Label:
    # A site's root is never an article, whatever text it yields (RFC 6596 §3, as in dedupe/sinks.py).
    if is_home_page(url):
        return Label.NEGATIVE
    if usable:
        return Label.POSITIVE
    if negative:
        return Label.NEGATIVE
    return Label.UNKNOWN


def stream_urls(conn: Connection, *, domains: list[str] | None = None) -> Iterator[UrlRow]:
    """Every current canonical URL with a registered domain, ordered by domain and host, labelled.

    One row per (URL, document) comes from the database, the documents of a URL together, and is folded
    here: a grouped subquery over all documents would be materialised whole (SQLite builds it, with an
    index, before the first row), which made memory grow with the registry."""
    c, d = t.canonical_urls, t.documents
    q = (sa.select(c.c.id, c.c.url, c.c.host, c.c.domain, d.c.state, d.c.reason, d.c.text_hash)
         .select_from(c.outerjoin(d, d.c.canonical_id == c.c.id))
         .where(c.c.domain.is_not(None), c.c.id.not_in(_retired()))
         .order_by(c.c.domain, c.c.host, c.c.id))
    if domains is not None:
        q = q.where(c.c.domain.in_(domains))
    current: list = []
    for row in conn.execution_options(yield_per=_BATCH).execute(q):
        if current and row.id != current[0].id:
            yield _folded(current)
            current = []
        current.append(row)
    if current:
        yield _folded(current)


def _folded(rows: list) -> UrlRow:
    """One URL's rows (one per stored document, or one without any) as a labelled URL."""
    first = rows[0]
    hashes = {r.text_hash for r in rows if r.state == "usable"}
    usable = bool(hashes) or any(r.state == "usable" for r in rows)
    negative = any(r.state is not None and r.state != "usable" and r.reason in NOT_ARTICLE_REASONS
                   for r in rows)
    label = label_of(first.url, usable, negative)
    text_hash = next(iter(hashes)) if len(hashes) == 1 and label is Label.POSITIVE else None
    return UrlRow(first.url, first.host, first.domain, label, text_hash)


def domains_of_outlet(conn: Connection, outlet: str) -> list[str]:
    """The registered domains whose URLs belong to ``outlet``: an outlet name (the site rules' or the
    outlet list's in force, as the coverage report names it), a host or a registered domain."""
    c, oe = t.canonical_urls, t.outlet_entries
    listed = sa.select(oe.c.match).where(oe.c.list_id == list_in_force(), oe.c.outlet == outlet)
    q = (sa.select(c.c.domain).where(c.c.domain.is_not(None))
         .where(sa.or_(c.c.outlet == outlet, c.c.host == outlet, c.c.domain == outlet,
                       c.c.host.in_(listed), c.c.domain.in_(listed))).distinct())
    return sorted(str(d) for d in conn.execute(q).scalars())


@dataclass
class HostCounts:
    host: str
    domain: str | None
    urls: int = 0
    followed: int = 0      # URLs whose follow resolved
    off_domain: int = 0    # of those, how many ended on another registered domain
    documents: int = 0     # URLs with a stored document
    usable: int = 0        # URLs with a usable text
    hidden: int = 0        # URLs whose page hid an article (paywall, consent wall)


def host_counts(conn: Connection, *, domains: list[str] | None = None) -> dict[str, HostCounts]:
    """Per host: stored URLs, follow outcomes (on or off the registered domain), documents and usable texts."""
    c, fr, d = t.canonical_urls, t.follow_results, t.documents
    where = [c.c.domain.in_(domains)] if domains is not None else []
    out: dict[str, HostCounts] = {}
    for host, domain, n in conn.execute(sa.select(c.c.host, c.c.domain, sa.func.count()).where(*where)
                                        .group_by(c.c.host, c.c.domain)):
        out.setdefault(host, HostCounts(host, domain)).urls += int(n)
    f = t.canonical_urls.alias("f")
    off = sa.and_(f.c.id.is_not(None), f.c.id != c.c.id, f.c.domain.is_distinct_from(c.c.domain))
    q = (sa.select(c.c.host, sa.func.count(), sa.func.sum(sa.case((off, 1), else_=0)))
         .select_from(fr.join(c, c.c.id == fr.c.canonical_id).outerjoin(f, f.c.id == fr.c.final_id))
         .where(fr.c.state == "resolved", *where).group_by(c.c.host))
    for host, n, n_off in conn.execute(q):
        if host in out:
            out[host].followed, out[host].off_domain = int(n), int(n_off or 0)
    usable = sa.case((d.c.state == "usable", d.c.canonical_id))
    hidden = sa.case((d.c.reason.in_(HIDING_REASONS), d.c.canonical_id))
    q = (sa.select(c.c.host, sa.func.count(sa.distinct(d.c.canonical_id)), sa.func.count(sa.distinct(usable)),
                   sa.func.count(sa.distinct(hidden)))
         .select_from(d.join(c, c.c.id == d.c.canonical_id)).where(*where).group_by(c.c.host))
    for host, n_docs, n_usable, n_hidden in conn.execute(q):
        if host in out:
            out[host].documents, out[host].usable, out[host].hidden = int(n_docs), int(n_usable), int(n_hidden)
    return out


def redirect_paths(conn: Connection, host: str) -> tuple[int, int, str | None]:
    """Of ``host``'s resolved follows that left the registered domain: how many kept the path, how many in
    all, and the host most of them led to."""
    c, fr = t.canonical_urls, t.follow_results
    f = t.canonical_urls.alias("f")
    q = (sa.select(c.c.url, f.c.url, f.c.host)
         .select_from(fr.join(c, c.c.id == fr.c.canonical_id).join(f, f.c.id == fr.c.final_id))
         .where(fr.c.state == "resolved", c.c.host == host, f.c.domain.is_distinct_from(c.c.domain)))
    same = total = 0
    targets: Counter[str] = Counter()
    for src, dst, dst_host in conn.execution_options(yield_per=_BATCH).execute(q):
        total += 1
        same += path_of(src) == path_of(dst)
        targets[dst_host] += 1
    return same, total, targets.most_common(1)[0][0] if targets else None


def domain_of(conn: Connection, host: str) -> str | None:
    c = t.canonical_urls
    return conn.execute(sa.select(c.c.domain).where(c.c.host == host).limit(1)).scalar()


def shared_texts(conn: Connection, *, domains: list[str] | None = None) -> Iterator[list[tuple[str, str]]]:
    """Groups of (host, path and query) that hold one usable text on more than one host, one group per
    text, streamed: the evidence for host aliases (same text at the same path) and syndication (not)."""
    c, d = t.canonical_urls, t.documents
    base = (sa.select(d.c.text_hash, c.c.host, c.c.url).select_from(d.join(c, c.c.id == d.c.canonical_id))
            .where(d.c.state == "usable", d.c.text_hash.is_not(None), c.c.id.not_in(_retired())))
    if domains is not None:
        base = base.where(c.c.domain.in_(domains))
    shared = (sa.select(d.c.text_hash).select_from(d.join(c, c.c.id == d.c.canonical_id))
              .where(d.c.state == "usable", d.c.text_hash.is_not(None))
              .group_by(d.c.text_hash).having(sa.func.count(sa.distinct(c.c.host)) > 1))
    q = base.where(d.c.text_hash.in_(shared)).order_by(d.c.text_hash, c.c.host)
    group: list[tuple[str, str]] = []
    last = None
    for text_hash, host, url in conn.execution_options(yield_per=_BATCH).execute(q):
        if text_hash != last and group:
            yield group
            group = []
        last = text_hash
        group.append((host, path_of(url)))
    if group:
        yield group


def shown_url(host: str, url: str) -> str:
    """A URL for people as its host and path shape (canon/shapes.py), its query as parameter names only:
    values can be anything a person's browsing put there."""
    path, _, query = path_shape(url).partition("?")
    names = [part.split("=", 1)[0] for part in query.split("&")] if query else []
    return host + path + ("?" + "&".join(names) if names else "")


def path_of(url: str) -> str:
    """The path and query of a canonical URL (which has no fragment but a hashbang)."""
    rest = url.split("://", 1)[-1]
    slash = rest.find("/")
    return rest[slash:] if slash >= 0 else "/"


def same_path_texts(conn: Connection, host_a: str, host_b: str) -> tuple[int, int]:
    """(paths on both hosts with the same usable text, with different usable texts)."""
    c, d = t.canonical_urls, t.documents
    texts: dict[str, dict[str, set[str]]] = {host_a: {}, host_b: {}}
    q = (sa.select(c.c.host, c.c.url, d.c.text_hash).select_from(d.join(c, c.c.id == d.c.canonical_id))
         .where(d.c.state == "usable", d.c.text_hash.is_not(None), c.c.host.in_((host_a, host_b))))
    for host, url, text_hash in conn.execution_options(yield_per=_BATCH).execute(q):
        texts[host].setdefault(path_of(url), set()).add(text_hash)
    same = differ = 0
    for path, hashes in texts[host_a].items():
        other = texts[host_b].get(path)
        if other is not None:
            if hashes & other:
                same += 1
            else:
                differ += 1
    return same, differ


@dataclass(frozen=True)
class SinkRow:
    url: str
    host: str
    kind: SinkKind
    fan_in: int
    sources: int


def sinks(conn: Connection, rules: Ruleset, *, limit: int) -> list[SinkRow]:
    """The redirect and declared-canonical sinks, by the pure rule of dedupe/sinks.py over the same stored
    evidence the dedupe stage reads (store/evidence.py), with ``limit`` the ``sink_fan_in`` setting."""
    targets = ev.pointed_targets(conn, min_sources=limit)
    facts = ev.url_facts(conn, targets)
    sources = ev.pointing_sources(conn, targets) if targets else {}
    out = []
    for cid, f in facts.items():
        target = End(f.url, f.host, f.is_article, rules.never_article(f.host))
        srcs = [End(s.url, s.host, s.is_article, rules.never_article(s.host)) for s in sources.get(cid, ())]
        n = fan_in(srcs, target, shortener_hosts=rules.shortener_hosts)
        kind = sink_kind(target, n, limit=limit)
        if kind is not None:
            out.append(SinkRow(f.url, f.host, kind, n, len(srcs)))
    return sorted(out, key=lambda s: (-s.fan_in, -s.sources, s.url))


__all__ = ["HIDING_REASONS", "NOT_ARTICLE_REASONS", "HostCounts", "SinkRow", "UrlRow", "domain_of",
           "domains_of_outlet", "host_counts", "label_of", "path_of", "redirect_paths", "same_path_texts",
           "shared_texts", "shown_url", "sinks", "stream_urls"]
