"""``lookup``: what the registry knows about URLs or url keys, one answer per input, streaming.

Other projects script against this answer; its fields and their meaning are a promise (docs/ingest.md):

=============  ======================================================================================
input          the input as given
canonical_url  the canonical URL (null when the input is neither a known key nor a URL we can parse)
url_key        its url key
domain         registered domain of the canonical URL
outlet         outlet (a lab-defined group of domains, or the domain)
seen           true when the registry holds this canonical URL (or, for an unparsable input, this
               exact raw text); false for a URL never loaded, which is canonicalised on the fly
sightings      sightings of the canonical URL across all datasets (through every raw URL mapped to it)
datasets       how many datasets hold those sightings
matched_by     ``url_key`` (the input was a key), ``raw_url`` (this exact text was loaded before; its
               stored canonical URL is the answer), ``canonical_url`` (canonicalised now, then found or not)
final_url      the canonical URL this one stands for after short links, redirects and wrappers: itself
               when nothing leads elsewhere; null for a short link not yet followed (or whose follow
               failed), never the shortener's own URL (docs/ingest.md, "What a link stands for")
final_domain   the final URL's registered domain, likewise
final_outlet   the final URL's outlet, likewise
final_is_article  whether the final URL is an article by the site rules (null when unknown)
article_id     the article ID, once the dedupe stage assigns them (null until then); for an ID given as
               input, the live ID it stands for today
story_id       the story ID, likewise
reason         null, or the canonicaliser's reason code when the input cannot be canonicalised
               (``unknown_id`` for an input shaped like an article or story ID that was never issued)
id_history     for an ID given as input (``matched_by`` ``article_id`` / ``story_id``): the events from
               that ID to the live one (minted, merged_into, split_from, founder_moved, with run and reason); else null
cluster        for an ID given as input: the live cluster it stands for — ``id``, ``level``, ``size``,
               ``founder_url``, ``title``, ``outlets`` (final outlets), ``members`` (``url``, ``url_key``,
               ``outlet``, ``final_url``, ``final_outlet``, ``founder``; at most 1,000, founder first) and
               ``members_truncated``; else null
=============  ======================================================================================

``canonical`` and ``error``, the old names of ``canonical_url`` and ``reason``, are still given (last)
for one release: :data:`OLD_FIELDS` (docs/vocabulary.md).

For an ID given as input, ``canonical_url``, ``url_key``, ``domain`` and ``outlet`` stay null (an ID is not
one URL): what the ID stands for is in ``cluster``.

:func:`locate` finds one reference the same way for the commands that act on what it names (a decision,
``documents show``). Lookup only reads: it lives with storage so that every stage may use it.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..canon import Canonicaliser, Ruleset, default_rules
from ..errors import InputError, InvalidURL, NotFound
from . import clusters, finals
from . import tables as t
from .finals import FINAL_COLUMNS
from .migrate import require_schema
from .rulesets import latest_ruleset
from .text import raw_hash, storable

# RFC 4648 §6 base32 alphabet in lower case, 24 characters: the shape of every url key (canon.keys).
URL_KEY_RE = re.compile(r"[a-z2-7]{24}")
_CHUNK = 500  # inputs per round, and ids per IN (…) list: under SQLite's default of 999 parameters
LOOKUP_FIELDS = ("input", "canonical_url", "url_key", "domain", "outlet", "seen", "sightings", "datasets",
                 "matched_by", "article_id", "story_id", "reason", "id_history", *FINAL_COLUMNS, "cluster")
#: Old field name -> its new name; each answer still carries the old one too, for one release.
OLD_FIELDS = {"canonical": "canonical_url", "error": "reason"}


def is_url_key(text: str) -> bool:
    return URL_KEY_RE.fullmatch(text) is not None


def _current_rules(conn: Connection) -> Ruleset:
    # A read must not write: with no stored ruleset yet, use the default without storing it.
    if conn.execute(sa.select(t.rulesets.c.id).limit(1)).first() is None:
        return default_rules()
    return latest_ruleset(conn)[1]


def _answer(text: str) -> dict[str, Any]:
    return dict.fromkeys(LOOKUP_FIELDS) | {"input": text, "seen": False, "sightings": 0, "datasets": 0}


def lookup(engine: Engine, items: Iterable[str], *, rules: Ruleset | None = None,
           cache_size: int = 65536) -> Iterator[dict[str, Any]]:
    """One answer (a dict with :data:`LOOKUP_FIELDS`) per input, in input order, ``_CHUNK`` at a time."""
    require_schema(engine)
    with engine.connect() as conn:
        canon = Canonicaliser(rules if rules is not None else _current_rules(conn), cache_size=cache_size)
        conn.rollback()
        chunk: list[str] = []
        for item in items:
            chunk.append(item)
            if len(chunk) >= _CHUNK:
                yield from _with_old_names(_lookup_chunk(conn, canon, chunk))
                conn.rollback()  # no long-lived snapshot while the caller reads slowly
                chunk = []
        if chunk:
            yield from _with_old_names(_lookup_chunk(conn, canon, chunk))


def _with_old_names(answers: list[dict[str, Any]]) -> list[dict[str, Any]]:
    for answer in answers:
        for old, new in OLD_FIELDS.items():
            answer[old] = answer[new]
    return answers


def _lookup_chunk(conn: Connection, canon: Canonicaliser, items: list[str]) -> list[dict[str, Any]]:
    answers = [_answer(text) for text in items]
    id_inputs = [i for i, text in enumerate(items) if clusters.is_cluster_id(text.strip())]
    keyed = [i for i, text in enumerate(items) if is_url_key(text.strip().lower())]
    keyed_set = set(keyed) | set(id_inputs)
    urls = [i for i in range(len(items)) if i not in keyed_set]
    hashes = {i: raw_hash(storable(items[i])) for i in urls}
    known_raw = raws_by_hash(conn, list(hashes.values()))

    wanted_keys: dict[int, str] = {}
    for i in keyed:
        wanted_keys[i] = items[i].strip().lower()
        answers[i]["matched_by"] = "url_key"
    raw_only: dict[int, str] = {}
    shorteners = canon.rules.shortener_hosts
    unseen: dict[int, tuple[str, str | None]] = {}
    for i in urls:
        stored = known_raw.get(hashes[i])
        if stored is not None and stored["url_key"] is not None:
            wanted_keys[i] = stored["url_key"]
            answers[i]["matched_by"] = "raw_url"
            continue
        try:
            c = canon(items[i])
        except InvalidURL as exc:
            answers[i]["reason"] = exc.reason
            if stored is not None:
                # Loaded before, kept as an unparsable raw URL: seen, with its sightings.
                answers[i].update(seen=True, matched_by="raw_url")
                raw_only[i] = hashes[i]
            continue
        wanted_keys[i] = c.url_key
        answers[i].update(canonical_url=c.url, url_key=c.url_key, domain=c.domain, outlet=c.outlet,
                          matched_by="canonical_url")
        # Not in the registry (the answers of those that are come below): a URL nobody followed stands for
        # itself, unless it is a short link.
        if c.host not in shorteners:
            answers[i].update(final_url=c.url, final_domain=c.domain, final_outlet=c.outlet,
                              final_is_article=c.is_article)
            unseen[i] = (c.host, c.domain)
    # The outlet list in force names outlets by host, then registered domain (docs/outlets.md).
    listed = finals.listed_outlets(conn, [k for pair in unseen.values() for k in pair if k]) if unseen else {}
    for i, (host, domain) in unseen.items():
        named = listed.get(host) or (listed.get(domain) if domain else None)
        if named:
            answers[i]["final_outlet"] = named

    found = canonicals_by_key(conn, list(wanted_keys.values()))
    counts = sighting_counts(conn, [row["id"] for row in found.values()])
    assigned = clusters.current_ids(conn, [row["id"] for row in found.values()])
    final = finals.finals_of(conn, [row["id"] for row in found.values()])
    for i, key in wanted_keys.items():
        row = found.get(key)
        if row is None:
            continue
        n, nd = counts.get(row["id"], (0, 0))
        article_id, story_id = assigned.get(row["id"], (None, None))
        answers[i].update(canonical_url=row["url"], url_key=key, domain=row["domain"], outlet=row["outlet"],
                          seen=True, sightings=n, datasets=nd, article_id=article_id, story_id=story_id,
                          **final[row["id"]])
    live: dict[int, str] = {}
    for i in id_inputs:
        current = _answer_id(conn, answers[i], items[i].strip())
        if current is not None:
            live[i] = current
    if live:
        summaries = clusters.cluster_summaries(conn, live.values())
        for i, current in live.items():
            answers[i]["cluster"] = summaries.get(current)
    if raw_only:
        raw_counts = raw_sighting_counts(conn, list(raw_only.values()))
        for i, h in raw_only.items():
            answers[i]["sightings"], answers[i]["datasets"] = raw_counts.get(h, (0, 0))
    return answers


def _answer_id(conn: Connection, answer: dict[str, Any], text: str) -> str | None:
    """An article or story ID as input: the live ID it resolves to (returned) and the events on the way."""
    found = clusters.resolve(conn, text)
    if found is None:
        answer["reason"] = "unknown_id"
        return None
    answer.update(seen=True, matched_by=f"{found.level}_id", id_history=[
        {"id": e["cluster_id"], "event": e["event"], "other_id": e["other_id"], "reason": e["reason"],
         "run_id": e["run_id"], "at": e["at"]} for e in found.events])
    answer[f"{found.level}_id"] = found.current
    return found.current


# --- one reference, for the commands that act on what it names ----------------------------------------
@dataclass(frozen=True)
class Located:
    """What one reference names, found the way :func:`lookup` finds it: a stored canonical URL (for an ID,
    the founder of the live cluster it stands for)."""

    ref: str
    canonical_id: int
    url: str
    outlet: str | None
    matched_by: str          # as in a lookup answer: url_key, raw_url, canonical_url, article_id, story_id
    cluster: str | None      # the live ID an ID reference resolved to
    level: str | None        # the level of an ID reference; None for a URL or key


def locate(engine: Engine, conn: Connection, ref: str) -> Located:
    """The stored canonical URL that ``ref`` names: a URL as loaded, any spelling that canonicalises to a
    stored one under the ruleset in force, a url key, or an article or story ID (any ID ever issued).
    Raises :class:`InputError` for an empty or unreadable reference, :class:`NotFound` for one the
    registry does not hold."""
    text = ref.strip()
    if not text:
        raise InputError("an empty reference: give a URL, a url key or an article/story ID")
    c = t.canonical_urls
    if clusters.is_cluster_id(text):
        res = clusters.resolve(conn, text)
        if res is None:
            raise NotFound(f"{text}: no such article or story ID was ever issued")
        founder_id = int(clusters.id_rows(conn, [res.current])[res.current]["founder_id"])
        founder = conn.execute(sa.select(c.c.url, c.c.outlet).where(c.c.id == founder_id)).one()
        return Located(text, founder_id, founder.url, founder.outlet, f"{res.level}_id", res.current, res.level)
    answer = next(iter(lookup(engine, [text])))
    if answer["reason"] and not answer["url_key"]:
        raise InputError(f"{text}: not a URL, url key or ID the registry can read ({answer['reason']})")
    if not answer["seen"] or not answer["url_key"]:
        raise NotFound(f"{text}: not in the registry (canonical form {answer['canonical_url']!r}); load it first")
    found = conn.execute(sa.select(c.c.id, c.c.url, c.c.outlet).where(c.c.url_key == answer["url_key"])).first()
    if found is None:
        raise NotFound(f"{text}: not in the registry")
    return Located(text, int(found.id), found.url, found.outlet, answer["matched_by"], None, None)


# --- the queries behind it --------------------------------------------------------------------------------
def _chunks(items: Sequence[str]) -> Iterator[Sequence[str]]:
    for i in range(0, len(items), _CHUNK):
        yield items[i:i + _CHUNK]


def ids_by_hash(conn: Connection, hashes: Iterable[str]) -> dict[str, int]:
    """Raw hash -> raw URL id for the stored ones among ``hashes``."""
    r = t.raw_urls
    out: dict[str, int] = {}
    for part in _chunks(sorted(hashes)):
        out.update(conn.execute(sa.select(r.c.raw_hash, r.c.id).where(r.c.raw_hash.in_(part))).all())
    return out


def canonicals_by_key(conn: Connection, keys: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Known canonical URLs by url key (id, url key, URL, host, domain, outlet); unknown keys are absent."""
    c = t.canonical_urls
    out: dict[str, dict[str, Any]] = {}
    for part in _chunks(list(dict.fromkeys(keys))):
        for row in conn.execute(sa.select(c.c.id, c.c.url_key, c.c.url, c.c.host, c.c.domain, c.c.outlet)
                                .where(c.c.url_key.in_(part))).mappings():
            out[row["url_key"]] = dict(row)
    return out


def raws_by_hash(conn: Connection, hashes: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Known raw URLs by hash, with the canonical URL each is mapped to (if any)."""
    r, c = t.raw_urls, t.canonical_urls
    out: dict[str, dict[str, Any]] = {}
    for part in _chunks(list(dict.fromkeys(hashes))):
        q = (sa.select(r.c.raw_hash, r.c.reason, c.c.id, c.c.url_key, c.c.url, c.c.host, c.c.domain,
                       c.c.outlet)
             .select_from(r.outerjoin(c, c.c.id == r.c.canonical_id)).where(r.c.raw_hash.in_(part)))
        for row in conn.execute(q).mappings():
            out[row["raw_hash"]] = dict(row)
    return out


def sighting_counts(conn: Connection, canonical_ids: Sequence[int]) -> dict[int, tuple[int, int]]:
    """(sightings, datasets) per canonical URL id, over every raw URL that maps to it."""
    r, s = t.raw_urls, t.sightings
    out: dict[int, tuple[int, int]] = {}
    ids = list(dict.fromkeys(canonical_ids))
    for i in range(0, len(ids), _CHUNK):
        part = ids[i:i + _CHUNK]
        q = (sa.select(r.c.canonical_id, sa.func.count(s.c.id), sa.func.count(sa.distinct(s.c.dataset_id)))
             .select_from(r.join(s, s.c.raw_url_id == r.c.id))
             .where(r.c.canonical_id.in_(part)).group_by(r.c.canonical_id))
        for cid, n, nd in conn.execute(q):
            out[int(cid)] = (int(n), int(nd))
    return out


def raw_sighting_counts(conn: Connection, hashes: Sequence[str]) -> dict[str, tuple[int, int]]:
    """(sightings, datasets) per raw URL hash: for raw URLs with no canonical URL (unparsable ones)."""
    r, s = t.raw_urls, t.sightings
    out: dict[str, tuple[int, int]] = {}
    for part in _chunks(list(dict.fromkeys(hashes))):
        q = (sa.select(r.c.raw_hash, sa.func.count(s.c.id), sa.func.count(sa.distinct(s.c.dataset_id)))
             .select_from(r.join(s, s.c.raw_url_id == r.c.id))
             .where(r.c.raw_hash.in_(part)).group_by(r.c.raw_hash))
        for h, n, nd in conn.execute(q):
            out[h] = (int(n), int(nd))
    return out


__all__ = ["LOOKUP_FIELDS", "OLD_FIELDS", "URL_KEY_RE", "Located", "canonicals_by_key", "ids_by_hash", "is_url_key",
           "locate", "lookup", "raw_sighting_counts", "raws_by_hash", "sighting_counts"]
