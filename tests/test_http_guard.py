"""The request-forgery guard on its own: which addresses are refused, and that refusal needs no packet."""

from __future__ import annotations

import asyncio
import ipaddress
import re

import pytest

from linkfold.errors import ConfigError
from linkfold.web.guard import (
    AddressGuard,
    AddressRefused,
    ResolveFailed,
    StaticResolver,
    blocked_reason,
    literal_address,
    parse_networks,
)

# Each address with the registry that reserves it. Python's ipaddress module is the reference library
# for the flags; the ranges it does not flag are listed separately below.
BLOCKED = [
    ("127.0.0.1", "RFC 1122 §3.2.1.3 loopback"),
    ("127.255.255.254", "RFC 1122 §3.2.1.3 loopback (whole /8)"),
    ("::1", "RFC 4291 §2.5.3 loopback"),
    ("10.0.0.5", "RFC 1918 §3 private"),
    ("172.16.0.1", "RFC 1918 §3 private"),
    ("172.31.255.255", "RFC 1918 §3 private (end of 172.16/12)"),
    ("192.168.1.1", "RFC 1918 §3 private"),
    ("169.254.169.254", "RFC 3927 link-local (cloud metadata endpoints live here)"),
    ("fe80::1", "RFC 4291 §2.5.6 link-local"),
    ("fc00::1", "RFC 4193 unique local"),
    ("fd12:3456::1", "RFC 4193 unique local"),
    ("224.0.0.1", "RFC 5771 multicast"),
    ("ff02::1", "RFC 4291 §2.7 multicast"),
    ("0.0.0.0", "RFC 1122 unspecified"),
    ("::", "RFC 4291 §2.5.2 unspecified"),
    ("0.1.2.3", "RFC 791 / RFC 6890 'this network' 0.0.0.0/8"),
    ("100.64.0.1", "RFC 6598 shared address space"),
    ("100.127.255.254", "RFC 6598 shared address space (end of /10)"),
    ("192.0.2.10", "RFC 5737 documentation TEST-NET-1"),
    ("198.51.100.7", "RFC 5737 documentation TEST-NET-2"),
    ("203.0.113.9", "RFC 5737 documentation TEST-NET-3"),
    ("198.18.0.1", "RFC 2544 benchmarking"),
    ("240.0.0.1", "RFC 1112 reserved class E"),
    ("255.255.255.255", "RFC 919 limited broadcast"),
    ("2001:db8::1", "RFC 3849 documentation"),
    ("::ffff:10.0.0.1", "RFC 4291 §2.5.5.2 IPv4-mapped, embedding RFC 1918"),
    ("::ffff:127.0.0.1", "RFC 4291 §2.5.5.2 IPv4-mapped, embedding loopback"),
    ("2002:a00:1::1", "RFC 3056 6to4, embedding 10.0.0.1"),
    ("2002:7f00:1::1", "RFC 3056 6to4, embedding 127.0.0.1"),
    ("64:ff9b::a00:1", "RFC 6052 NAT64 well-known prefix, embedding 10.0.0.1"),
]

# Arbitrary globally routable unicast addresses (outside every IANA special-purpose block, RFC 6890),
# picked for no one in particular. They are only ever *checked* here, never contacted.
PUBLIC = [
    ("45.83.12.7", "IANA unicast, outside special-purpose blocks"),
    ("81.2.69.160", "IANA unicast, outside special-purpose blocks"),
    ("2a0e:8f02:21c0::17", "IANA global unicast 2000::/3"),
    ("2002:2d53:c07::1", "RFC 3056 6to4 embedding 45.83.12.7"),
]


@pytest.mark.parametrize(("address", "source"), BLOCKED)
def test_blocked_by_default(address, source):
    assert blocked_reason(ipaddress.ip_address(address)) is not None, source
    with pytest.raises(AddressRefused) as info:
        AddressGuard().check("name.test", address)
    assert info.value.address == address


@pytest.mark.parametrize(("address", "source"), PUBLIC)
def test_public_addresses_pass(address, source):
    assert blocked_reason(ipaddress.ip_address(address)) is None, source
    assert str(AddressGuard().check("name.test", address)) == str(ipaddress.ip_address(address))


def test_embedded_address_is_named_in_the_reason():
    reason = blocked_reason(ipaddress.ip_address("::ffff:192.168.0.1"))
    assert "private" in reason and "::ffff:c0a8:1" in reason


def test_allowed_networks_open_only_themselves():
    guard = AddressGuard(parse_networks(["127.0.0.0/8", "10.1.0.0/16"]))
    assert str(guard.check("lab.test", "127.0.0.1")) == "127.0.0.1"
    assert str(guard.check("lab.test", "10.1.2.3")) == "10.1.2.3"
    with pytest.raises(AddressRefused):
        guard.check("lab.test", "10.2.0.1")
    with pytest.raises(AddressRefused):
        guard.check("lab.test", "::1")  # an IPv4 allowance does not open IPv6 loopback


def test_one_blocked_address_refuses_the_whole_name():
    # A mixed answer (public + private) is the rebinding pattern: refuse even the public one.
    with pytest.raises(AddressRefused) as info:
        AddressGuard().check_all("mixed.test", ["45.83.12.7", "10.0.0.5"])
    assert info.value.address == "10.0.0.5"


def test_empty_answer_is_a_resolution_failure():
    with pytest.raises(ResolveFailed):
        AddressGuard().check_all("empty.test", [])


def test_bad_network_setting_is_a_config_error():
    with pytest.raises(ConfigError, match=re.escape("'10.0.0.0/33'")):
        parse_networks(["10.0.0.0/33"])


@pytest.mark.parametrize(("host", "expected"), [
    ("127.0.0.1", "127.0.0.1"), ("[::1]", "::1"), ("::1", "::1"),
    ("short.test", None), ("1.2.3", None),  # not a dotted quad: a name, resolved and then checked
])
def test_literal_addresses(host, expected):
    found = literal_address(host)
    assert (str(found) if found else None) == expected


def test_static_resolver_never_falls_back_to_dns():
    resolver = StaticResolver({"private.test": ["10.0.0.5"]})
    assert asyncio.run(resolver("PRIVATE.test.", 80)) == ["10.0.0.5"]  # RFC 4343: names are case-blind
    with pytest.raises(ResolveFailed):
        asyncio.run(resolver("unknown.test", 80))
    assert resolver.asked == ["private.test", "unknown.test"]
