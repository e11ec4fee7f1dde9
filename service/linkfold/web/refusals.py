"""What each refusal reason means for the person who reads a summary or a report.

A refusal is a URL we chose not to ask; its reason key comes from the request-forgery guard (the kind of
address, :attr:`.guard.AddressRefused.kind`), from robots.txt (``robots_file``, ``robots_unavailable``)
or from the rules file (``never_follow_hosts``). Both stages and the follow report print these lines.
"""

from __future__ import annotations

from .failures import NEVER_FOLLOW_REASON

#: Kinds of address the request-forgery guard refuses (``guard.blocked_reason``), for people.
_GUARD_KINDS = {
    "loopback": "a loopback address (127.0.0.0/8, ::1)",
    "private": "a private address (RFC 1918, RFC 4193)",
    "link-local": "a link-local address (169.254.0.0/16, fe80::/10)",
    "multicast": "a multicast address",
    "unspecified": "the unspecified address (0.0.0.0, ::)",
    "reserved": "a reserved address",
    "this-network": "a 'this network' address (0.0.0.0/8, RFC 791)",
    "shared": "a shared address (100.64.0.0/10, RFC 6598)",
    "not-global": "an address that is not globally reachable (IANA special-purpose registries)",
    "special-purpose": "an address of an IANA special-purpose block (RFC 6890), globally reachable or not",
    "IPv4-compatible": "an IPv4-compatible IPv6 address (::a.b.c.d, deprecated by RFC 4291)",
    "not_an_address": "not a network address",
}
ALLOW_HINT = ("the request-forgery guard refuses it; to allow a network, set allow_networks "
              "(LINKFOLD_ALLOW_NETWORKS=CIDR, e.g. 10.20.0.0/16), then linkfold follow --retry-refused")


def explain_refusal(reason: str | None) -> str:
    """One line for people: why URLs with this refusal reason were not asked, and what would change it."""
    if reason in _GUARD_KINDS:
        return f"{_GUARD_KINDS[reason]}: {ALLOW_HINT}"
    if reason == NEVER_FOLLOW_REASON:
        return ("the rules file lists the host in never_follow_hosts, so nothing was sent: take it off the "
                "list (linkfold rules load), then linkfold follow --retry-refused")
    if reason == "robots_file":
        return ("robots.txt disallows linkfold there: no setting overrides a site's robots.txt; ask the "
                "site, or import expanded links (linkfold redirects load)")
    if reason == "robots_unavailable":
        return ("robots.txt could not be read (a server error or no answer), which RFC 9309 §2.3.1.4 makes "
                "a complete disallow: linkfold follow --retry-refused when the site answers again")
    if reason is None:
        return "refused before reasons were recorded: linkfold follow --retry-refused records one"
    return f"refused ({reason}): linkfold follow --retry-refused after the cause is fixed"


def refusal_class(reason: str | None) -> str:
    """The failure class a refusal reason belongs to (``robots``, ``never_follow`` or ``refused``)."""
    if reason is not None and reason.startswith("robots"):
        return "robots"
    return "never_follow" if reason == NEVER_FOLLOW_REASON else "refused"


__all__ = ["ALLOW_HINT", "explain_refusal", "refusal_class"]
