"""Structured metadata a page declares about itself: JSON-LD (schema.org), meta tags, its language.

Extraction uses this for what trafilatura does not report: where a publication date came from, whether
schema.org marks the article as not free (``isAccessibleForFree``), whether the page is a video, and the
declared language (trafilatura's own language guess needs an optional package we do not install).
"""

from __future__ import annotations

import json
import logging
import re
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from ..inputs import BadTime, is_bare_date, parse_time

log = logging.getLogger("linkfold")

# schema.org types whose datePublished is the article's (CreativeWork subtypes used for news pages).
_ARTICLE_TYPES = frozenset({
    "article", "newsarticle", "reportagenewsarticle", "analysisnewsarticle", "opinionnewsarticle",
    "backgroundnewsarticle", "reviewnewsarticle", "askpublicnewsarticle", "blogposting", "liveblogposting",
    "report", "socialmediaposting", "scholarlyarticle", "techarticle", "satiricalarticle",
})
_PAGE_TYPES = frozenset({"webpage", "itempage"})
_VIDEO_TYPES = frozenset({"videoobject"})

# Meta tags that declare a publication time, best first: the Open Graph protocol's article namespace,
# then Dublin Core terms (DCMI "issued"), then the plain name="date" that is common practice without a
# standard behind it.
DATE_META = ("article:published_time", "dcterms.issued", "dc.date.issued", "dc.date", "date")

_LANG_TAG = re.compile(r"^([A-Za-z]{2,3})(?:[-_][A-Za-z0-9]{1,8})*$")


@dataclass(frozen=True)
class DateCandidate:
    """A declared publication time. ``source`` is ``json-ld``, ``meta`` or ``microdata``."""

    value: datetime
    date_only: bool
    source: str
    raw: str


@dataclass(frozen=True)
class PageMeta:
    """What a page's markup declares, read once per page."""

    json_ld: tuple[dict[str, Any], ...]
    meta: dict[str, str]
    title: str | None
    og_type: str | None
    language: str | None
    dates: tuple[DateCandidate, ...]
    not_free: bool
    video: bool
    notes: tuple[str, ...]


def _types(obj: dict[str, Any]) -> set[str]:
    value = obj.get("@type")
    values = value if isinstance(value, list) else [value]
    # "https://schema.org/NewsArticle" and "NewsArticle" are the same type
    return {str(v).rsplit("/", 1)[-1].lower() for v in values if isinstance(v, str)}


def _flatten(data: Any) -> list[dict[str, Any]]:
    """Top-level JSON-LD nodes: a list, an object, and the members of any ``@graph``."""
    out: list[dict[str, Any]] = []
    stack = [data]
    while stack:
        item = stack.pop(0)
        if isinstance(item, list):
            stack[0:0] = item
        elif isinstance(item, dict):
            graph = item.get("@graph")
            if isinstance(graph, list):
                stack[0:0] = graph
            if "@type" in item:
                out.append(item)
    return out


def read_json_ld(tree: Any, notes: list[str]) -> list[dict[str, Any]]:
    nodes: list[dict[str, Any]] = []
    for script in tree.iter("script"):
        kind = (script.get("type") or "").split(";")[0].strip().lower()
        if kind != "application/ld+json":
            continue
        text = script.text or ""
        if not text.strip():
            continue
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            notes.append(f"JSON-LD block ignored: {exc.msg} at line {exc.lineno}")
            continue
        nodes.extend(_flatten(data))
    return nodes


def _false(value: Any) -> bool:
    # schema.org Boolean: JSON false, or the text "False" (schema.org's own spelling) in either case.
    return value is False or (isinstance(value, str) and value.strip().lower() in ("false", "https://schema.org/false"))


def primary_language(tag: Any) -> str | None:
    """The primary language subtag (RFC 5646 §2.2.1) of a BCP 47 tag or POSIX locale, lower-cased."""
    if isinstance(tag, dict):
        tag = tag.get("alternateName") or tag.get("name")
    if not isinstance(tag, str):
        return None
    m = _LANG_TAG.match(tag.strip().split(",")[0].strip())
    return m.group(1).lower() if m else None


def read_page_meta(tree: Any, headers: dict[str, str] | None = None) -> PageMeta:
    """Read a parsed page's JSON-LD, meta tags, declared dates and language."""
    notes: list[str] = []
    nodes = read_json_ld(tree, notes)
    articles = [n for n in nodes if _types(n) & _ARTICLE_TYPES]
    pages = [n for n in nodes if _types(n) & _PAGE_TYPES]

    meta: dict[str, str] = {}
    for el in tree.iter("meta"):
        key = (el.get("property") or el.get("name") or el.get("http-equiv") or el.get("itemprop") or "")
        key = key.strip().lower()
        content = el.get("content")
        if key and content is not None and key not in meta:
            meta[key] = content.strip()

    dates: list[DateCandidate] = []

    def add(raw: Any, source: str) -> None:
        if not isinstance(raw, str) or not raw.strip():
            return
        try:
            # The one time rule of every input (linkfold.inputs.times); a bare date says the day only.
            value, date_only = parse_time(raw), is_bare_date(raw)
        except BadTime:
            notes.append(f"unreadable {source} date {raw[:60]!r}")
            return
        dates.append(DateCandidate(value, date_only, source, raw.strip()))

    for node in articles + pages:
        add(node.get("datePublished"), "json-ld")
    for name in DATE_META:
        if name in meta:
            add(meta[name], "meta")
    for el in tree.xpath("//*[@itemprop='datePublished']"):
        add(el.get("datetime") or el.get("content"), "microdata")

    not_free = any(_false(n.get("isAccessibleForFree")) for n in articles + pages)
    og_type = meta.get("og:type")
    video = bool(og_type and og_type.lower().startswith("video")) or (
        not articles and any(_types(n) & _VIDEO_TYPES for n in nodes))

    # HTML §3.2.6.2 ("the lang and xml:lang attributes"; section number from memory): the root's lang,
    # else the Content-Language pragma, else the HTTP header; then what the page's metadata says.
    root = tree.getroottree().getroot()
    language = None
    for candidate in (root.get("lang"), root.get("{http://www.w3.org/XML/1998/namespace}lang"),
                      root.get("xml:lang"), meta.get("content-language"),
                      (headers or {}).get("content-language"),
                      *(n.get("inLanguage") for n in articles), meta.get("og:locale")):
        language = primary_language(candidate)
        if language:
            break

    title_el = tree.find(".//title")
    title = title_el.text_content().strip() if title_el is not None else None
    return PageMeta(json_ld=tuple(nodes), meta=meta, title=title or None, og_type=og_type,
                    language=language, dates=tuple(dates), not_free=not_free, video=video,
                    notes=tuple(notes))
