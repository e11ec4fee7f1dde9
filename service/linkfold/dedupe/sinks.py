"""Sinks: redirect and declared-canonical targets that must never join their sources.

A redirect or a declared canonical says "this URL stands for that one". That holds for a short link and
its article, an AMP page and its original, an old URL form and the new one. It does not hold when the
target is not an article at all — a home page that withdrawn articles are redirected to, a subscribe or
consent page behind every ad click, a home page a site declares canonical on every page — nor when so
many different URLs lead to one target that it cannot be the same publication as each of them. Such a
target is a **sink**: the links into it are kept as evidence (with their kind), but clustering never uses
them, so its sources keep their own article and story IDs.

A URL on a host the rules file lists in ``never_article_hosts`` (ad servers, trackers, image and CDN
hosts) shares an ID with nothing: no link touching it joins, whatever its kind or direction.

Everything here is pure: the facts about each end come in as values, and the stage around it reads them
from the database (docs/dedupe.md §10, "Sinks").
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from enum import StrEnum

#: Link kinds that say one URL stands for another; only these have sinks.
POINTING_KINDS = frozenset({"redirect", "declared"})


class SinkKind(StrEnum):
    """Why a target is a sink (stored nowhere: recomputed from the evidence and the rules each time)."""

    NEVER_ARTICLE = "never_article_host"  # the target's host is in the rules file's never_article_hosts
    NOT_ARTICLE = "not_article"           # the site's article patterns do not match the target
    HOME_PAGE = "home_page"               # the root of a site: path "/", no query, no fragment
    FAN_IN = "fan_in"                     # more distinct sources than the sink_fan_in setting


@dataclass(frozen=True, slots=True)
class End:
    """What sink detection needs of one canonical URL."""

    url: str
    host: str
    is_article: bool | None
    never_article: bool = False  # its host is listed in never_article_hosts


def is_home_page(url: str) -> bool:
    """Whether a canonical URL is a site's root: path ``/`` with no query and no fragment.

    A home page is the typical wrong canonical (declared on every page of a site) and the usual place
    withdrawn articles are redirected to. RFC 6596 §3: the canonical target "MUST identify content that is
    either duplicative or a superset of the content at the context (referring) IRI" — a home page is
    neither for an article. A hashbang route (``/#!…``) or a query (``/?p=12``) can select an article, so
    those are not home pages by shape.
    """
    scheme_end = url.find("://")
    if scheme_end < 0:
        return False
    slash = url.find("/", scheme_end + 3)
    return slash >= 0 and url[slash:] == "/"


def _base(url: str) -> str:
    cut = len(url)
    for mark in ("?", "#"):
        at = url.find(mark)
        if 0 <= at < cut:
            cut = at
    return url[:cut]


def counts_toward_fan_in(source: End, target: End, *, shortener_hosts: frozenset[str]) -> bool:
    """Whether a source counts in its target's fan-in.

    Two kinds of source are many by nature and do not count:

    * a URL on a listed shortener host: a platform gives every post its own short link, so an article
      shared a thousand times has a thousand short links that all truly stand for it;
    * a URL that differs from its target only in the query: the target's own spelling with a parameter
      the rules do not drop yet (every page variant declaring its canonical, a per-share tag).
    """
    if source.host in shortener_hosts:
        return False
    return not (source.host == target.host and _base(source.url) == _base(target.url))


def fan_in(sources: Iterable[End], target: End, *, shortener_hosts: frozenset[str]) -> int:
    """Distinct sources of ``target`` that count (:func:`counts_toward_fan_in`); ``sources`` are distinct."""
    return sum(1 for s in sources if counts_toward_fan_in(s, target, shortener_hosts=shortener_hosts))


def sink_kind(target: End, fan_in_count: int, *, limit: int) -> SinkKind | None:
    """Why ``target`` is a sink, or None. ``limit`` is the ``sink_fan_in`` setting: a fan-in above it makes
    a sink. The target's nature comes first, most specific first, so a home page is reported as one whatever
    its fan-in and whatever the site's article patterns say of it."""
    if target.never_article:
        return SinkKind.NEVER_ARTICLE
    if is_home_page(target.url):
        return SinkKind.HOME_PAGE
    if target.is_article is False:
        return SinkKind.NOT_ARTICLE
    if fan_in_count > limit:
        return SinkKind.FAN_IN
    return None


def link_joins(kind: str, source: End, target: End, target_sink: SinkKind | None) -> bool:
    """Whether a link may join its two ends into one cluster (at whatever level it serves).

    * Nothing touching a never-article host joins.
    * A redirect or declared canonical joins unless its target is a sink. Its source may be a
      non-article by the site rules (an old URL form the patterns do not cover): it stands for its target.
    * A text link (``same_text``, ``similar_text``) joins as before: its evidence is the text itself, and
      verification already decided it (a variant with a query the article patterns do not allow is still
      the same text).
    """
    if source.never_article or target.never_article:
        return False
    if kind in POINTING_KINDS:
        return target_sink is None
    return True


__all__ = ["POINTING_KINDS", "End", "SinkKind", "counts_toward_fan_in", "fan_in", "is_home_page", "link_joins",
           "sink_kind"]
