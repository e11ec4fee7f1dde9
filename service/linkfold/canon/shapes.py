"""URL path shapes: a path with its variable parts generalised, so that the URLs of one page template count
together (``/video/8812/clip-of-the-day`` and ``/video/9120/another-clip-here`` are both
``/video/{n4}/{slug}``). Pure: no database.

A segment (between slashes) is generalised when it is, in this order:

* a date written ``YYYY-MM-DD`` or ``YYYYMMDD`` (a plausible calendar date) → ``{date}``;
* digits only → ``{nK}``, K its length (``2031`` → ``{n4}``): years, page numbers and IDs keep their size,
  which is what tells them apart in a template;
* a UUID (RFC 9562 §4, 8-4-4-4-12 hex digits) → ``{uuid}``;
* a hex string of 8 or more digits with at least one letter and one digit → ``{hex}``;
* a token of 12 or more letters and digits mixed → ``{id}``;
* three or more words joined by ``-`` or ``_`` → ``{slug}``, and a slug ending in a number keeps it as
  ``{slug}-{nK}`` (common practice for article paths);
* anything else stays as written (``news``, ``tag``, ``about-us``).

A file name's extension is kept (``photo-of-the-bridge.jpg`` → ``{slug}.jpg``). The query keeps its
parameter names, sorted, each with its value generalised like a segment (``?id=4411`` → ``?id={n4}``); the
fragment is dropped.
"""

from __future__ import annotations

import re
from datetime import date
from functools import lru_cache
from urllib.parse import parse_qsl, urlsplit

_DIGITS = re.compile(r"^\d+$")
_DASHED_DATE = re.compile(r"^(\d{4})-(\d{2})-(\d{2})$")
_UUID = re.compile(r"^[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}$", re.IGNORECASE)
_HEX = re.compile(r"^[0-9a-f]{8,}$", re.IGNORECASE)
_MIXED = re.compile(r"^[A-Za-z0-9]{12,}$")
_WORDS = re.compile(r"^[^\W_]+(?:[-_][^\W_]+){2,}$")
_SLUG_NUMBER = re.compile(r"^(.*[^\W\d_].*)[-_](\d+)$")
_EXTENSION = re.compile(r"^(.+)(\.[A-Za-z0-9]{1,5})$")


def _is_date(y: str, m: str, d: str) -> bool:
    try:
        return 1900 <= int(y) <= 2199 and date(int(y), int(m), int(d)) is not None
    except ValueError:
        return False


@lru_cache(maxsize=1 << 16)
def segment_shape(segment: str) -> str:
    """The shape of one path segment (or query value). Cached: fixed words (``news``, ``tag``) repeat in
    almost every URL of a site, and the report and rule suggestions shape every stored URL."""
    if not segment:
        return segment
    found = _DASHED_DATE.match(segment)
    if found and _is_date(*found.groups()):
        return "{date}"
    if _DIGITS.match(segment):
        if len(segment) == 8 and _is_date(segment[:4], segment[4:6], segment[6:]):
            return "{date}"
        return f"{{n{len(segment)}}}"
    if _UUID.match(segment):
        return "{uuid}"
    if _HEX.match(segment) and re.search(r"\d", segment) and re.search(r"[a-fA-F]", segment):
        return "{hex}"
    if _MIXED.match(segment) and re.search(r"\d", segment) and re.search(r"[A-Za-z]", segment):
        return "{id}"
    numbered = _SLUG_NUMBER.match(segment)
    if numbered and _WORDS.match(numbered.group(1)):
        return f"{{slug}}-{{n{len(numbered.group(2))}}}"
    if _WORDS.match(segment):
        return "{slug}"
    ext = _EXTENSION.match(segment)
    if ext:
        stem = segment_shape(ext.group(1))
        if stem != ext.group(1):
            return stem + ext.group(2)
    return segment


def path_shape(url: str) -> str:
    """The shape of a URL's path and query (see the module doc); ``/`` for a bare host."""
    parts = urlsplit(url)
    path = parts.path or "/"
    shape = "/".join(segment_shape(s) for s in path.split("/"))
    if parts.query:
        params = sorted({(name, segment_shape(value)) for name, value in parse_qsl(parts.query, keep_blank_values=True)})
        if params:
            shape += "?" + "&".join(f"{n}={v}" if v else n for n, v in params)
    return shape


__all__ = ["path_shape", "segment_shape"]
