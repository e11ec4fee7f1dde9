"""Hosts: registered domains from the Public Suffix List, and the host checks the parser leaves to us."""

from __future__ import annotations

import re
from functools import lru_cache

from publicsuffixlist import PublicSuffixList

from ._idna import xn_label_problem

# The list ships inside the package (offline); its version is PSL_VERSION. Private-section suffixes count:
# on a shared hosting suffix each customer's subdomain is its own registered domain, which is what an
# outlet is.
_PSL = PublicSuffixList()

_IPV4 = re.compile(r"^\d{1,3}(?:\.\d{1,3}){3}$")

MAX_HOST_LENGTH = 253  # RFC 1034 §3.1: 255 octets on the wire, 253 characters written without the root dot
MAX_LABEL_LENGTH = 63  # RFC 1034 §3.1


def is_ip_literal(host: str) -> bool:
    return host.startswith("[") or bool(_IPV4.match(host))


@lru_cache(maxsize=65536)
def registered_domain(host: str) -> str | None:
    """The registered domain of a host (the public suffix plus one label), or None.

    None for IP literals, for a host that is itself a public suffix, and for a single label. The host is
    taken as the canonicaliser writes it (ASCII, lower case); a trailing dot is ignored.
    """
    if not isinstance(host, str):
        return None
    host = host.strip().rstrip(".").lower()
    if not host or is_ip_literal(host) or "." not in host or host.startswith(".") or ".." in host:
        return None
    try:
        return _PSL.privatesuffix(host)
    except Exception:  # the list library on a host it cannot read: no registered domain, not a crash
        return None


def host_problem(host: str) -> str | None:
    """Why a (parsed, ASCII) host name cannot be an internet host, or None when it can.

    The host is given without the root label's dot (one trailing dot is the root; a second is an empty
    label, RFC 1034 §3.1).
    """
    if len(host) > MAX_HOST_LENGTH:
        return f"host is longer than {MAX_HOST_LENGTH} characters"
    labels = host.split(".")
    if any(not label for label in labels):
        return "host has an empty label"
    if any(len(label) > MAX_LABEL_LENGTH for label in labels):
        return f"host has a label longer than {MAX_LABEL_LENGTH} characters"
    if "xn--" in host:
        # UTS #46 §4 step 4: the parser passes ASCII labels through, so it never checks these.
        for label in labels:
            if label.startswith("xn--"):
                problem = xn_label_problem(label)
                if problem:
                    return problem
    return None
