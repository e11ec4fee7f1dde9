"""The request-forgery guard: decide, before any packet is sent, whether an address may be contacted.

A link in a dump is untrusted input. Without a guard, a short link that resolves (or redirects) to
``10.0.0.5`` or ``169.254.169.254`` would make the lab's server probe its own private network. So every
TCP connection the HTTP client opens goes through :class:`AddressGuard`: the name is resolved here (not
by the socket library later), every address of the answer is checked, and the connection is then made
to the checked address itself. Resolving once and connecting to what was checked is what defeats DNS
rebinding, where a second lookup of the same name would return a different, private address.

Blocked by default (``ipaddress`` flags, plus what they miss):

* loopback, private (RFC 1918, RFC 4193 unique local), link-local, multicast, reserved, unspecified;
* 0.0.0.0/8 ("this network", RFC 791) and 100.64.0.0/10 (shared address space, RFC 6598), which
  ``is_private`` does not flag;
* anything else that ``ipaddress`` does not call globally reachable (documentation ranges, benchmarking
  ranges …: the IANA special-purpose registries, RFC 6890);
* every other block of the IANA special-purpose registries, including those the registry marks globally
  reachable (protocol anycast addresses: no news site lives there), from a table of our own;
* IPv6 forms that carry an IPv4 address (IPv4-mapped ``::ffff:a.b.c.d``, IPv4-compatible ``::a.b.c.d``,
  6to4 ``2002::/16``, NAT64 ``64:ff9b::/96`` and Teredo): the embedded IPv4 address is checked as well,
  because a router or the kernel may deliver such a packet to it. The mapped, 6to4 and NAT64 forms of a
  public IPv4 address are allowed (that address is where they go; a DNS64 network answers NAT64 addresses
  for every IPv4-only site); the IPv4-compatible form and Teredo are refused whatever they carry.

A name whose answer holds *any* blocked address is refused as a whole, even if another address is
public: a mixed answer is exactly what a rebinding attacker serves, and there is no honest reason for a
news site to publish a private address.

``allow_networks`` (the setting of that name) lists networks that are allowed although they would be
blocked, e.g. ``127.0.0.0/8`` for the tests' loopback server or a lab proxy's network.
"""

from __future__ import annotations

import asyncio
import ipaddress
import socket
from collections.abc import Awaitable, Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass

from ..errors import ConfigError

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address
IPNetwork = ipaddress.IPv4Network | ipaddress.IPv6Network

#: ``resolver(host, port) -> addresses``: an async callable returning IP address strings.
Resolver = Callable[[str, int], Awaitable[list[str]]]

# Ranges that ``ipaddress``'s flags leave out although no public web server lives there.
_EXTRA_BLOCKED: tuple[tuple[IPNetwork, str], ...] = (
    (ipaddress.ip_network("0.0.0.0/8"), "this-network"),  # RFC 791 / RFC 6890
    (ipaddress.ip_network("100.64.0.0/10"), "shared"),  # RFC 6598 carrier-grade NAT
)
_NAT64 = ipaddress.ip_network("64:ff9b::/96")  # RFC 6052 well-known prefix
_MAPPED = ipaddress.ip_network("::ffff:0:0/96")  # RFC 4291 §2.5.5.2 IPv4-mapped
_SIX_TO_FOUR = ipaddress.ip_network("2002::/16")  # RFC 3056
_COMPATIBLE = ipaddress.ip_network("::/96")  # RFC 4291 §2.5.5.1 IPv4-compatible (deprecated)

# Forms whose packets go to the embedded IPv4 address: with a public one inside, they are that public
# address (a DNS64 network answers 64:ff9b::a.b.c.d for every IPv4-only site), so they are judged by it.
_JUDGED_BY_EMBEDDED = (_MAPPED, _NAT64, _SIX_TO_FOUR)

# Every block of the IANA IPv4 and IPv6 Special-Purpose Address Registries (RFC 6890 and its updates) is
# refused, whether or not the registry calls it globally reachable: no news site is served from a
# protocol's anycast address (PCP, TURN, AS112, AMT, DNS-SD) or an ORCHID or drone-ID tag, so an answer
# naming one is a misconfiguration or an attack. The ``ipaddress`` flags cover most of these, but depend
# on the Python release (3.11.7 calls 192.0.0.128, 3fff::1 and the AS112 blocks global); this table does
# not. tests/cases/special_purpose_addresses.tsv lists every entry with its RFC.
_SPECIAL_PURPOSE: tuple[tuple[IPNetwork, str], ...] = tuple((ipaddress.ip_network(net), name) for net, name in (
    ("192.0.0.0/24", "IETF protocol assignments, RFC 6890"),
    ("192.31.196.0/24", "AS112-v4, RFC 7535"),
    ("192.52.193.0/24", "AMT, RFC 7450"),
    ("192.88.99.0/24", "6to4 relay anycast (deprecated), RFC 7526"),
    ("192.175.48.0/24", "AS112 direct delegation, RFC 7534"),
    ("198.18.0.0/15", "benchmarking, RFC 2544"),
    ("240.0.0.0/4", "reserved, RFC 1112"),
    ("64:ff9b:1::/48", "IPv4-IPv6 translation for local use, RFC 8215"),
    ("100::/64", "discard-only, RFC 6666"),
    ("100:0:0:1::/64", "dummy prefix, RFC 9780"),
    ("2001::/23", "IETF protocol assignments, RFC 2928"),
    ("2001:db8::/32", "documentation, RFC 3849"),
    ("2620:4f:8000::/48", "AS112 direct delegation, RFC 7534"),
    ("3fff::/20", "documentation, RFC 9637"),
    ("5f00::/16", "SRv6 SIDs, RFC 9602"),
))


class AddressRefused(Exception):
    """The guard refused to connect; raised before any socket is opened.

    ``reason`` is for people (``private (embedded in ::ffff:10.0.0.5)``); ``kind`` is its stable key
    (``private``, ``loopback``, ``link-local`` …, ``not_an_address``), stored with the outcome.
    """

    def __init__(self, host: str, address: str, reason: str) -> None:
        super().__init__(f"{host} -> {address} is {reason}; refused by the request-forgery guard "
                         "(setting allow_networks)")
        self.host = host
        self.address = address
        self.reason = reason
        kind = reason.split(" (", 1)[0]
        self.kind = kind if " " not in kind else "not_an_address"


class ResolveFailed(Exception):
    """The name has no usable address (NXDOMAIN, no A/AAAA record, resolver failure)."""

    def __init__(self, host: str, detail: str) -> None:
        super().__init__(f"cannot resolve {host}: {detail}")
        self.host = host
        self.detail = detail


def parse_networks(values: Iterable[str]) -> tuple[IPNetwork, ...]:
    """The ``allow_networks`` setting as networks; a bad entry is a :class:`ConfigError` naming it."""
    networks = []
    for value in values:
        try:
            networks.append(ipaddress.ip_network(value.strip(), strict=False))
        except ValueError as exc:
            raise ConfigError(f"allow_networks: {value!r} is not a CIDR network ({exc})",
                              hint="e.g. LINKFOLD_ALLOW_NETWORKS=127.0.0.0/8,::1/128") from None
    return tuple(networks)


def _embedded_ipv4(addr: IPAddress) -> ipaddress.IPv4Address | None:
    if not isinstance(addr, ipaddress.IPv6Address):
        return None
    if addr.ipv4_mapped is not None:
        return addr.ipv4_mapped
    if addr.sixtofour is not None:
        return addr.sixtofour
    if addr.teredo is not None:
        return addr.teredo[1]  # (server, client): the client is where packets end up
    if addr in _NAT64 or (addr in _COMPATIBLE and int(addr) > 1):  # ::ffff… done above; :: and ::1 are not
        return ipaddress.IPv4Address(int(addr) & 0xFFFFFFFF)
    return None


def blocked_reason(addr: IPAddress) -> str | None:
    """Why ``addr`` must not be contacted by default, or ``None`` when it is a public address."""
    inner = _embedded_ipv4(addr)
    if inner is not None:
        why = blocked_reason(inner)
        if why is not None:
            return f"{why} (embedded in {addr})"
        if any(addr in net for net in _JUDGED_BY_EMBEDDED):
            return None
        if addr in _COMPATIBLE:
            return f"IPv4-compatible (deprecated, RFC 4291 §2.5.5.1; embeds {inner})"
    # Order matters only for the message: the most specific name first.
    for flag in ("is_loopback", "is_link_local", "is_multicast", "is_unspecified", "is_private",
                 "is_reserved"):
        if getattr(addr, flag):
            return flag[3:].replace("_", "-")
    for network, name in _EXTRA_BLOCKED:
        if addr.version == network.version and addr in network:
            return name
    for network, name in _SPECIAL_PURPOSE:
        if addr.version == network.version and addr in network:
            return f"special-purpose ({name})"
    if inner is None and not addr.is_global:
        return "not-global"
    return None


@dataclass(frozen=True)
class AddressGuard:
    """Checks addresses against the default block list and the allowed networks."""

    allow: tuple[IPNetwork, ...] = ()

    @classmethod
    def from_settings(cls, allow_networks: Sequence[str]) -> AddressGuard:
        return cls(parse_networks(allow_networks))

    def is_allowed_network(self, addr: IPAddress) -> bool:
        return any(addr.version == net.version and addr in net for net in self.allow)

    def check(self, host: str, address: str) -> IPAddress:
        """The parsed address when it may be contacted; :class:`AddressRefused` otherwise."""
        try:
            addr = ipaddress.ip_address(address.split("%", 1)[0])  # drop an IPv6 zone id
        except ValueError:
            raise AddressRefused(host, address, "not an IP address") from None
        if self.is_allowed_network(addr):
            return addr
        reason = blocked_reason(addr)
        if reason is not None:
            raise AddressRefused(host, address, reason)
        return addr

    def check_all(self, host: str, addresses: Sequence[str]) -> list[IPAddress]:
        """Every address checked; the first blocked one refuses the whole name (see module doc)."""
        if not addresses:
            raise ResolveFailed(host, "no addresses")
        return [self.check(host, a) for a in addresses]


def literal_address(host: str) -> IPAddress | None:
    """The address when ``host`` is an IP literal (``[::1]`` brackets allowed), else ``None``."""
    text = host[1:-1] if host.startswith("[") and host.endswith("]") else host
    try:
        return ipaddress.ip_address(text)
    except ValueError:
        return None


async def system_resolver(host: str, port: int) -> list[str]:
    """Production resolver: the operating system's ``getaddrinfo``, TCP addresses, in its order."""
    loop = asyncio.get_running_loop()
    try:
        infos = await loop.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except socket.gaierror as exc:
        raise ResolveFailed(host, exc.strerror or str(exc)) from None
    except UnicodeError as exc:  # a label the IDNA codec cannot encode
        raise ResolveFailed(host, f"not a valid host name ({exc})") from None
    seen: list[str] = []
    for _family, _type, _proto, _name, sockaddr in infos:
        ip = str(sockaddr[0])
        if ip not in seen:
            seen.append(ip)
    return seen


class StaticResolver:
    """A resolver from a fixed mapping ``name -> [addresses]``; unknown names fail like NXDOMAIN.

    The tests use it so that ``private.test`` "resolves" to ``10.0.0.5`` without any DNS traffic; a lab
    can use it to pin names it trusts. It never falls back to real DNS.
    """

    def __init__(self, mapping: Mapping[str, Sequence[str]]) -> None:
        self.mapping = {name.lower().rstrip("."): list(addrs) for name, addrs in mapping.items()}
        self.asked: list[str] = []

    async def __call__(self, host: str, port: int) -> list[str]:
        name = host.lower().rstrip(".")
        self.asked.append(name)
        if name not in self.mapping:
            raise ResolveFailed(host, "name not known (static resolver)")
        return list(self.mapping[name])


__all__ = [
    "AddressGuard",
    "AddressRefused",
    "ResolveFailed",
    "Resolver",
    "StaticResolver",
    "blocked_reason",
    "literal_address",
    "parse_networks",
    "system_resolver",
]
