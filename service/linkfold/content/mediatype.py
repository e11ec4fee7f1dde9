"""Media types: reading a Content-Type header, and telling whether a body is an HTML page.

Readers and the extractor both need to know "is this HTML?" before they spend time on a body. The header
is trusted when it is present and says something definite; when it is missing (archives written by
hand, ``resource`` records) the first bytes are sniffed with the HTML patterns of the WHATWG MIME
Sniffing standard.
"""

from __future__ import annotations

from dataclasses import dataclass, field

# RFC 9110 §5.6.2: token characters (tchar).
_TCHAR = frozenset("!#$%&'*+-.^_`|~0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ")
_OWS = " \t"

HTML_TYPES = frozenset({"text/html", "application/xhtml+xml"})

# Types that say "this is not a page" clearly enough that no sniffing overrides them. application/octet-stream
# and the empty type mean "unknown" (WHATWG MIME Sniffing §7.1 sniffs those), so they are not here.
_UNKNOWN_TYPES = frozenset({"", "application/octet-stream", "unknown/unknown", "application/unknown", "*/*"})


@dataclass(frozen=True)
class MediaType:
    """A parsed Content-Type value: ``essence`` is ``type/subtype`` in lower case."""

    essence: str
    params: dict[str, str] = field(default_factory=dict)

    @property
    def charset(self) -> str | None:
        return self.params.get("charset")


def parse_content_type(value: str | None) -> MediaType | None:
    """Parse a Content-Type header value (RFC 9110 §8.3.1, parameters per §5.6.6).

    Returns ``None`` for a missing or syntactically hopeless value. Parameter names are lower-cased
    (they are case-insensitive, RFC 9110 §5.6.6); values keep their case, quoted strings are unquoted
    with backslash escapes removed (§5.6.4). A malformed parameter ends parsing without losing the ones
    before it, which is what lenient readers of real headers need.
    """
    if value is None:
        return None
    text = value.strip(_OWS + "\r\n")
    semi = text.find(";")
    essence = (text if semi < 0 else text[:semi]).strip(_OWS).lower()
    if essence.count("/") != 1 or not all(c in _TCHAR or c == "/" for c in essence):
        return None
    kind, sub = essence.split("/")
    if not kind or not sub:
        return None
    params: dict[str, str] = {}
    pos = len(text) if semi < 0 else semi
    while pos < len(text):
        # at a ";"
        pos += 1
        while pos < len(text) and text[pos] in _OWS + ";":
            pos += 1
        start = pos
        while pos < len(text) and text[pos] in _TCHAR:
            pos += 1
        name = text[start:pos].lower()
        if not name or pos >= len(text) or text[pos] != "=":
            break
        pos += 1
        if pos < len(text) and text[pos] == '"':
            pos += 1
            chars: list[str] = []
            closed = False
            while pos < len(text):
                c = text[pos]
                if c == "\\" and pos + 1 < len(text):
                    chars.append(text[pos + 1])
                    pos += 2
                    continue
                if c == '"':
                    closed = True
                    pos += 1
                    break
                chars.append(c)
                pos += 1
            if not closed:
                break
            val = "".join(chars)
        else:
            start = pos
            while pos < len(text) and text[pos] != ";":
                pos += 1
            val = text[start:pos].strip(_OWS)
            if not val or not all(c in _TCHAR for c in val):
                break
        # RFC 9110 §5.6.6 does not say which of two equal names wins; the first is what browsers use
        # (WHATWG MIME Sniffing §4.4 "parse a MIME type" keeps the first).
        params.setdefault(name, val)
        while pos < len(text) and text[pos] != ";":
            pos += 1
    return MediaType(essence=essence, params=params)


# WHATWG MIME Sniffing §7.1 ("rules for identifying an unknown MIME type"), the HTML rows: the pattern is
# matched ASCII-case-insensitively after leading whitespace and must be followed by a tag-terminating byte
# (space or ">"). Listed from the standard's table as remembered; each is checked in the tests.
_HTML_SNIFF_PATTERNS = (
    b"<!doctype html", b"<html", b"<head", b"<script", b"<iframe", b"<h1", b"<div", b"<font",
    b"<table", b"<a", b"<style", b"<title", b"<b", b"<body", b"<br", b"<p", b"<!--",
)
_SNIFF_WS = b"\t\n\x0c\r "
_TAG_TERMINATORS = b" >"


def looks_like_html(body: bytes) -> bool:
    """True when the first bytes of ``body`` match one of the standard's HTML sniffing patterns."""
    head = body[:1445]  # MIME Sniffing §7.1: the resource header is at most 1445 bytes
    if head.startswith(b"\xef\xbb\xbf"):
        head = head[3:]
    head = head.lstrip(_SNIFF_WS).lower()
    for pattern in _HTML_SNIFF_PATTERNS:
        if head.startswith(pattern) and len(head) > len(pattern) and head[len(pattern)] in _TAG_TERMINATORS:
            return True
    return False


def is_html(content_type: str | None, body: bytes) -> bool:
    """Whether a body with this Content-Type is an HTML page worth extracting.

    A definite type decides on its own (``text/html`` and XHTML yes, ``image/png`` or ``application/pdf``
    no); a missing, unparsable or "unknown" type falls back to sniffing the body.
    """
    media = parse_content_type(content_type)
    if media is None or media.essence in _UNKNOWN_TYPES:
        return looks_like_html(body)
    return media.essence in HTML_TYPES
