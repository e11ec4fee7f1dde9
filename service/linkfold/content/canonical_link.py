"""What a page says about its own address: ``rel=canonical`` (RFC 6596), ``og:url``, ``rel=amphtml``.

Policy (docs/content.md has the long form):

* A canonical comes from ``<link rel="canonical" href>`` in the document's ``<head>`` or from an HTTP
  ``Link: <…>; rel="canonical"`` header (RFC 6596 §3 allows both). ``canonical`` is not a "body-ok" link
  type in HTML, so a canonical that ended up in ``<body>`` (markup that breaks the head early) is ignored
  and noted, as search engines do.
* Relative references are resolved by RFC 3986 §5.2 against the document's base URL: the first
  ``<base href>`` (HTML "frozen base URL"), itself resolved against the page URL, else the page URL.
  HTTP Link targets resolve against the page URL (RFC 8288 §3.1).
* RFC 6596 expects one canonical per page. Several that resolve to different URLs are contradictory:
  none is recorded, and a note says which were seen.
* Only absolute http(s) results count; ``javascript:``, ``data:`` and the like are dropped with a note.

Whether a declared canonical is trusted is the clustering stage's decision; :func:`declared_link` tells it
whether the target is the page itself, on the same outlet, or on another outlet (where syndication
partners routinely name the origin, so it is evidence, not proof).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from enum import StrEnum
from typing import Any

from ..canon import Ruleset, canonicalize, resolve_reference
from ..errors import InvalidURL
from .pages import check_page_url

log = logging.getLogger("linkfold")

_ASCII_WS = "\t\n\x0c\r "


@dataclass(frozen=True)
class DeclaredUrls:
    """The addresses a page declares for itself; each None when absent, unusable or contradictory."""

    canonical: str | None
    og_url: str | None
    amp_url: str | None
    is_amp: bool
    notes: tuple[str, ...] = ()


class Relation(StrEnum):
    """How a declared canonical relates to the page that declares it."""

    SELF = "self"                  # the same canonical URL: nothing to link
    SAME_OUTLET = "same_outlet"    # another URL of the same outlet (AMP, print, mobile…): a link
    CROSS_OUTLET = "cross_outlet"  # another outlet (syndication): recorded, not trusted blindly


@dataclass(frozen=True)
class DeclaredLink:
    """A page's declared canonical, canonicalised and placed relative to the page."""

    page_url: str
    page_key: str
    target_url: str
    target_key: str
    page_outlet: str | None
    target_outlet: str | None
    relation: Relation


def _rel_tokens(value: str | None) -> set[str]:
    # HTML: rel is a set of space-separated tokens, ASCII case-insensitive.
    return {t.lower() for t in (value or "").split()}


def _resolve(base: str, ref: str) -> tuple[str | None, str | None]:
    """(absolute http(s) URL, None) or (None, why not)."""
    ref = ref.strip(_ASCII_WS)
    if not ref:
        return None, "empty href"
    try:
        resolved = resolve_reference(base, ref)
    except InvalidURL as exc:
        return None, f"cannot resolve {ref[:120]!r}: {exc}"
    why = check_page_url(resolved)
    if why:
        return None, why
    return resolved, None


def document_base(tree: Any, page_url: str) -> str:
    """The base URL of a parsed document: its first ``<base href>`` resolved, else ``page_url``."""
    for base in tree.iter("base"):
        href = base.get("href")
        if href is None:
            continue
        # HTML §4.2.3: only the first base element with an href sets the document base URL.
        resolved, _ = _resolve(page_url, href)
        return resolved or page_url
    return page_url


def parse_link_header(value: str) -> list[tuple[str, set[str]]]:
    """The (target, rel tokens) pairs of an HTTP Link header (RFC 8288 §3), leniently.

    Links are separated by commas outside ``<…>`` and quoted strings; a link without ``<…>`` is skipped.
    """
    links: list[tuple[str, set[str]]] = []
    pos, n = 0, len(value)
    while pos < n:
        start = value.find("<", pos)
        if start < 0:
            break
        end = value.find(">", start)
        if end < 0:
            break
        target = value[start + 1:end]
        pos = end + 1
        rel: set[str] = set()
        # parameters up to the next comma outside quotes
        params_end = pos
        quoted = False
        while params_end < n:
            c = value[params_end]
            if c == '"':
                quoted = not quoted
            elif c == "," and not quoted:
                break
            params_end += 1
        for param in value[pos:params_end].split(";"):
            name, eq, val = param.partition("=")
            if eq and name.strip().lower() == "rel":
                rel |= _rel_tokens(val.strip().strip('"'))
        links.append((target, rel))
        pos = params_end + 1
    return links


def _one(found: list[str], what: str, notes: list[str]) -> str | None:
    distinct = list(dict.fromkeys(found))
    if len(distinct) > 1:
        notes.append(f"conflicting {what} ({len(distinct)}): " + " | ".join(u[:200] for u in distinct))
        return None
    return distinct[0] if distinct else None


def read_declared_urls(tree: Any, page_url: str, headers: dict[str, str] | None = None) -> DeclaredUrls:
    """The canonical, og:url and AMP URLs a parsed page (an lxml HTML tree) declares."""
    notes: list[str] = []
    base = document_base(tree, page_url)
    head = tree.find("head")
    canonicals: list[str] = []
    amps: list[str] = []

    link_header = (headers or {}).get("link")
    if link_header:
        for target, rels in parse_link_header(link_header):
            if "canonical" in rels:
                url, why = _resolve(page_url, target)
                if url:
                    canonicals.append(url)
                else:
                    notes.append(f"canonical in Link header dropped: {why}")

    for link in tree.iter("link"):
        rels = _rel_tokens(link.get("rel"))
        if not rels & {"canonical", "amphtml"}:
            continue
        in_head = head is not None and any(anc is head for anc in link.iterancestors())
        href = link.get("href")
        if "canonical" in rels:
            if not in_head:
                notes.append("canonical link outside <head> ignored")
                continue
            if href is None:
                notes.append("canonical link without href ignored")
                continue
            url, why = _resolve(base, href)
            if url:
                canonicals.append(url)
            else:
                notes.append(f"canonical link dropped: {why}")
        if "amphtml" in rels and in_head and href is not None:
            url, why = _resolve(base, href)
            if url:
                amps.append(url)
            else:
                notes.append(f"amphtml link dropped: {why}")

    og_urls: list[str] = []
    for meta in tree.iter("meta"):
        key = (meta.get("property") or meta.get("name") or "").strip().lower()
        if key != "og:url":
            continue
        content = meta.get("content")
        if content is None:
            continue
        url, why = _resolve(base, content)
        if url:
            og_urls.append(url)
        else:
            notes.append(f"og:url dropped: {why}")

    # AMP HTML: the document root carries the ⚡ attribute or its ASCII spelling "amp".
    root = tree.getroottree().getroot()
    is_amp = root.tag == "html" and any(name in ("⚡", "amp") for name in root.attrib)

    return DeclaredUrls(
        canonical=_one(canonicals, "canonical links", notes),
        og_url=_one(og_urls, "og:url values", notes),
        amp_url=_one(amps, "amphtml links", notes),
        is_amp=is_amp,
        notes=tuple(notes),
    )


def declared_link(page_url: str, declared: str | None, rules: Ruleset | None = None) -> DeclaredLink | None:
    """Place a declared canonical relative to its page under ``rules`` (default: the built-in ruleset).

    None when nothing was declared. Raises :class:`~linkfold.errors.InvalidURL` when either URL cannot
    be canonicalised (both were checked as absolute http(s) URLs on the way in, so that is rare).
    """
    if declared is None:
        return None
    page = canonicalize(page_url, rules)
    target = canonicalize(declared, rules)
    if page.url_key == target.url_key:
        relation = Relation.SELF
    elif page.outlet is not None and page.outlet == target.outlet:
        relation = Relation.SAME_OUTLET
    elif page.outlet is None and target.outlet is None and page.host == target.host:
        relation = Relation.SAME_OUTLET  # hosts without a registered domain (IP literals): same host only
    else:
        relation = Relation.CROSS_OUTLET
    return DeclaredLink(page_url=page.url, page_key=page.url_key, target_url=target.url,
                        target_key=target.url_key, page_outlet=page.outlet, target_outlet=target.outlet,
                        relation=relation)
