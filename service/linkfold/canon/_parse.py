"""The one place that talks to the URL parser (ada, a WHATWG URL Standard implementation).

We call ada's C API through the cffi module the ``ada-url`` package ships, because one parse plus one
component read costs a fraction of what the attribute-per-call Python wrapper costs, and the parser runs
once per raw URL in every bulk stage. What WHATWG parsing already does for us (tests pin each): lower-case
scheme and host, IDNA (UTS #46) to ASCII, IPv4/IPv6 serialisation, default-port removal, dot-segment
removal, percent-encoding of spaces and non-ASCII, "/" for an empty path. What it does not do (ours):
upper-casing percent-encoding hex, decoding unreserved characters, the host's trailing dot, refusing
schemes other than http(s).
"""

from __future__ import annotations

import re
from typing import NamedTuple

from ada_url._ada_wrapper import ffi, lib

_OMITTED = 0xFFFFFFFF  # ada's "component absent" marker in url_components
HOST_NAME, HOST_IPV4, HOST_IPV6 = 0, 1, 2
_IPV4 = re.compile(r"^\d{1,3}\.\d{1,3}\.\d{1,3}\.\d{1,3}$")


class Parts(NamedTuple):
    """A parsed URL, sliced from the WHATWG serialisation (``href``)."""

    href: str
    scheme: str          # "http" / "https" / other, lower-case, without ":"
    userinfo: bool       # whether user or password is present
    host: str            # as serialised ("[::1]" for IPv6)
    port: str            # "" when default or absent
    path: str            # starts with "/" for http(s)
    query: str | None    # without "?"; None when absent
    fragment: str | None  # without "#"; None when absent
    host_type: int


# A strict subset of URLs that the WHATWG parser serialises unchanged: lower-case http(s), a lower-case
# ASCII host name (starting and ending with a letter or digit: plain_host checks the ends, once per host),
# a non-default port without leading zeros, a path, and query and fragment made only of
# characters no WHATWG percent-encode set touches. Such a URL is its own serialisation, so its components
# can be sliced without the parser (most URLs in a dump look like this). Everything else, and every
# doubtful case below (IDNA labels, hosts that could be IPv4, dot segments, default ports), goes to the
# parser. tests/test_canon_parser.py checks this shortcut against the parser on generated URLs.
_SIMPLE = re.compile(
    r"(https?)://([a-z0-9.\-]++)(?::([1-9][0-9]{0,4}))?"
    r"(/[A-Za-z0-9\-._~!$&()*+,;=:@/%|]*+)"
    r"(?:\?([A-Za-z0-9\-._~!$&()*+,;=:@/?%|]*+))?"
    r"(?:#([A-Za-z0-9\-._~!$&'()*+,;=:@/?%|]*+))?")
_NUMERIC_LAST_LABEL = re.compile(r"(?:^|\.)(?:[0-9]+|0x[0-9a-f]*)$")
_DEFAULT_PORT = {"http": "80", "https": "443"}


#: The shortcut's pattern, for callers that slice the groups themselves (the canonicaliser's fast lane);
#: a match is only a plain URL when :func:`plain_host` and :func:`plain_rest` also agree.
simple_match = _SIMPLE.fullmatch


def plain_host(host: str) -> bool:
    """Whether a host the pattern matched is serialised unchanged (no IDNA label, not IPv4-like, no dot or
    hyphen at either end)."""
    return (host[0] not in ".-" and host[-1] not in ".-" and "xn--" not in host
            and _NUMERIC_LAST_LABEL.search(host) is None)


def plain_rest(scheme: str, port: str | None, path: str) -> bool:
    """Whether the port and path the pattern matched are serialised unchanged (no default or
    out-of-range port, no dot segment, plain or percent-encoded)."""
    if "/." in path or ("%2" in path and ("%2e" in path or "%2E" in path)):
        return False
    return port is None or (port != _DEFAULT_PORT[scheme] and int(port) <= 65535)


def _simple(text: str) -> Parts | None:
    m = _SIMPLE.fullmatch(text)
    if m is None:
        return None
    scheme, host, port, path, query, fragment = m.groups()
    if not (plain_host(host) and plain_rest(scheme, port, path)):
        return None
    return Parts(text, scheme, False, host, port or "", path, query, fragment, HOST_NAME)


def parse(text: str) -> Parts | None:
    """Parse ``text`` as an absolute URL; None when the WHATWG parser refuses it."""
    simple = _simple(text)
    if simple is not None:
        return simple
    return parse_with_ada(text)


def parse_with_ada(text: str) -> Parts | None:
    """The WHATWG parser's reading of ``text`` (None when it refuses it)."""
    data = text.encode("utf-8", "surrogatepass")  # surrogates: refused by ada, not a crash here
    obj = lib.ada_parse(data, len(data))
    try:
        if not lib.ada_is_valid(obj):
            return None
        s = lib.ada_get_href(obj)
        raw = ffi.unpack(s.data, s.length)
        # The components struct (eight uint32_t offsets, ada_c.h) lives inside the parsed object: copy it
        # out in one call before freeing the object.
        (proto_end, username_end, host_start, host_end, port_num, path_start, search,
         hash_) = ffi.unpack(ffi.cast("uint32_t *", lib.ada_get_components(obj)), 8)
    finally:
        lib.ada_free(obj)
    href = raw.decode("utf-8", "surrogateescape")
    # Offsets are byte offsets into href; href is ASCII for special schemes (everything non-ASCII is
    # percent-encoded or punycoded), so they are also character offsets. Not-special schemes are
    # refused by the caller before the offsets are used.
    if len(href) != len(raw):
        return Parts(href, href[: proto_end - 1].lower(), False, "", "", "", None, None, HOST_NAME)
    path_end = search if search != _OMITTED else (hash_ if hash_ != _OMITTED else len(href))
    userinfo = username_end > proto_end + 2 or host_start > username_end
    if href[host_start:host_start + 1] == "@":
        host_start += 1
    port = str(port_num) if port_num != _OMITTED else ""
    query = href[search + 1:hash_ if hash_ != _OMITTED else len(href)] if search != _OMITTED else None
    fragment = href[hash_ + 1:] if hash_ != _OMITTED else None
    host = href[host_start:host_end]
    # The WHATWG host parser writes an IPv6 address in brackets, and treats any host whose last label is
    # a number as IPv4 (or refuses it), so the serialised host says its type without another C call.
    if host[:1] == "[":
        host_type = HOST_IPV6
    elif host[-1:].isdigit() and _IPV4.match(host):
        host_type = HOST_IPV4
    else:
        host_type = HOST_NAME
    return Parts(href, href[: proto_end - 1], userinfo, host, port, href[path_start:path_end], query,
                 fragment, host_type)


def whatwg_href(text: str) -> str | None:
    """``text`` serialised as the WHATWG URL parser reads it (what a browser would request), or None when it
    refuses it: hosts in odd IPv4 spellings (``2130706433``, ``0x7f.1``, ``%31%32%37.0.0.1``) come out as
    the dotted address they stand for, so the request-forgery guard sees the address a socket would use."""
    parts = parse(text)
    return parts.href if parts is not None else None


def ascii_host(text: str) -> str | None:
    """A host name as the WHATWG host parser writes it (lower case, IDNA to ASCII), or None."""
    if not text or any(ch in text for ch in "/?#@:[]\\ ") or any(ord(ch) < 0x21 for ch in text):
        return None
    parts = parse(f"http://{text}/")
    if parts is None or parts.path != "/" or parts.port or parts.host_type != HOST_NAME:
        return None
    if "xn--" in parts.host:
        from ._idna import xn_label_problem  # late: that module uses this one

        if any(label.startswith("xn--") and xn_label_problem(label) for label in parts.host.split(".")):
            return None  # the parser passes such a label through; UTS #46 does not (see _idna)
    return parts.host
