"""The request-forgery guard over the whole table of special-purpose addresses, the IPv6 forms that embed an
IPv4 address, the odd IPv4 spellings a URL parser accepts, names that resolve to loopback and a redirect
chain that turns private on its third hop. Every check is in process: no packet leaves the machine (names
are pinned with a static resolver, the loopback server is the only thing ever contacted).

Sources: the IANA IPv4 and IPv6 Special-Purpose Address Registries (RFC 6890 and its updates), in
tests/cases/special_purpose_addresses.tsv with the RFC of each block (written from memory of the
registries, as that file says); RFC 4291 §2.5.5 (IPv4-compatible and IPv4-mapped), RFC 3056 §2 (6to4),
RFC 6052 §2.2 (NAT64 /96), RFC 4380 §4 (Teredo: the client address inverted in the last 32 bits); the
WHATWG URL Standard's IPv4 parser (§3.5: decimal, hexadecimal and octal parts, fewer than four parts)
for the spellings, through our parser (ada-url implements that standard).
"""

from __future__ import annotations

import csv
import ipaddress
import re
from pathlib import Path

import pytest

from httpserver import LoopbackOnlyBackend, load_url_list, loopback_settings
from linkfold.canon import canonicalize
from linkfold.cli import main
from linkfold.follow import follow_links
from linkfold.web.guard import (
    AddressGuard,
    AddressRefused,
    StaticResolver,
    blocked_reason,
    literal_address,
)

CASES = Path(__file__).with_name("cases") / "special_purpose_addresses.tsv"


def _rows() -> list[dict[str, str]]:
    with CASES.open(encoding="utf-8") as fh:
        return list(csv.DictReader((line for line in fh if not line.startswith("#")), delimiter="\t"))


ROWS = _rows()


def _points(block: str) -> list[ipaddress.IPv4Address | ipaddress.IPv6Address]:
    net = ipaddress.ip_network(block)
    return [net.network_address, net.network_address + net.num_addresses // 2, net.broadcast_address]


def test_the_table_is_complete_and_sourced():
    assert len(ROWS) >= 50
    for row in ROWS:
        ipaddress.ip_network(row["block"])  # strict: the block is written as its network
        assert row["rfc"].startswith("RFC") and row["source"].startswith("IANA"), row
        assert row["registry_global"] in {"True", "False", "N/A"} and row["decision"] in {"refused", "embedded"}


@pytest.mark.parametrize("row", ROWS, ids=[r["block"] for r in ROWS])
def test_every_special_purpose_block_first_middle_and_last(row):
    guard = AddressGuard()
    for addr in _points(row["block"]):
        if row["decision"] == "refused":
            # Globally reachable or not, a special-purpose address is refused (guard.py says why).
            assert blocked_reason(addr) is not None, (row, str(addr))
            with pytest.raises(AddressRefused):
                guard.check("name.test", str(addr))
        else:
            inner = ipaddress.IPv4Address(int(addr) & 0xFFFFFFFF) if row["block"] != "2002::/16" \
                else ipaddress.IPv4Address((int(addr) >> 80) & 0xFFFFFFFF)  # RFC 3056 §2: bits 16-47
            assert (blocked_reason(addr) is None) == (blocked_reason(inner) is None), (row, str(addr), str(inner))


PRIVATE_V4 = ["10.0.0.5", "127.0.0.1", "169.254.169.254", "192.168.1.1", "172.16.0.1", "100.64.0.1", "0.0.0.0"]
PUBLIC_V4 = "45.83.12.7"  # outside every special-purpose block (as in tests/test_http_guard.py)


def _forms(v4: str) -> dict[str, str]:
    n = int(ipaddress.IPv4Address(v4))
    teredo_server = int(ipaddress.IPv4Address("45.83.12.8"))
    return {
        "IPv4-mapped (RFC 4291 §2.5.5.2)": str(ipaddress.IPv6Address((0xFFFF << 32) | n)),
        "IPv4-compatible (RFC 4291 §2.5.5.1)": str(ipaddress.IPv6Address(n)),
        "6to4 (RFC 3056 §2)": str(ipaddress.IPv6Address((0x2002 << 112) | (n << 80) | 1)),
        "NAT64 well-known prefix (RFC 6052 §2.2)": str(ipaddress.IPv6Address((0x64FF9B << 96) | n)),
        "NAT64 local-use prefix (RFC 8215)": str(ipaddress.IPv6Address((0x64FF9B0001 << 80) | n)),
        "Teredo (RFC 4380 §4)": str(ipaddress.IPv6Address((0x20010000 << 96) | (teredo_server << 64)
                                                          | (n ^ 0xFFFFFFFF))),
    }


@pytest.mark.parametrize("v4", PRIVATE_V4)
def test_ipv6_forms_embedding_a_private_ipv4_address_are_refused(v4):
    for form, address in _forms(v4).items():
        reason = blocked_reason(ipaddress.ip_address(address))
        assert reason is not None, (form, address)
        with pytest.raises(AddressRefused):
            AddressGuard().check("name.test", address)


def test_the_reason_names_the_embedded_address_kind():
    forms = _forms("127.0.0.1")
    for form in ("IPv4-mapped (RFC 4291 §2.5.5.2)", "IPv4-compatible (RFC 4291 §2.5.5.1)", "6to4 (RFC 3056 §2)",
                 "NAT64 well-known prefix (RFC 6052 §2.2)"):
        assert blocked_reason(ipaddress.ip_address(forms[form])).startswith("loopback (embedded in "), form
    assert blocked_reason(ipaddress.ip_address(_forms("10.0.0.5")["Teredo (RFC 4380 §4)"])).startswith("private")


def test_forms_of_a_public_ipv4_address_pass_where_they_lead_to_it():
    # Decided and documented in guard.py: mapped, 6to4 and NAT64 forms go to the embedded address (a DNS64
    # network answers NAT64 addresses for every IPv4-only site); the deprecated IPv4-compatible form, the
    # local-use NAT64 prefix and Teredo are refused whatever they carry.
    forms = _forms(PUBLIC_V4)
    allowed = {"IPv4-mapped (RFC 4291 §2.5.5.2)", "6to4 (RFC 3056 §2)", "NAT64 well-known prefix (RFC 6052 §2.2)"}
    for form, address in forms.items():
        assert (blocked_reason(ipaddress.ip_address(address)) is None) == (form in allowed), (form, address)


# The WHATWG URL Standard's IPv4 parser (§3.5) reads each of these hosts as the address beside it.
SPELLINGS = [
    ("http://2130706433/", "127.0.0.1"),  # one decimal number
    ("http://0x7f000001/", "127.0.0.1"),  # one hexadecimal number
    ("http://017700000001/", "127.0.0.1"),  # one octal number
    ("http://0177.0.0.1/", "127.0.0.1"),  # an octal part
    ("http://0x7f.0.0.1/", "127.0.0.1"),  # a hexadecimal part
    ("http://127.1/", "127.0.0.1"),  # two parts: the last fills three bytes
    ("http://127.0.1/", "127.0.0.1"),  # three parts: the last fills two bytes
    ("http://0x7f.1/", "127.0.0.1"),
    ("http://127.0.0.1./", "127.0.0.1"),  # a trailing dot
    ("http://%31%32%37.0.0.1/", "127.0.0.1"),  # percent-encoded digits are decoded before the IPv4 parser
    ("http://\uff11\uff12\uff17.\uff10.\uff10.\uff11/", "127.0.0.1"),  # fullwidth digits (UTS #46 mapping)
    ("http://0/", "0.0.0.0"),
    ("http://0300.0250.0.1/", "192.168.0.1"),
    ("http://3232235521/", "192.168.0.1"),
    ("http://0xa9fea9fe/latest/meta-data/", "169.254.169.254"),
    ("http://0xa.0.0.5/", "10.0.0.5"),
    ("http://[::ffff:127.0.0.1]/", "::ffff:7f00:1"),
    ("http://[0:0:0:0:0:ffff:7f00:1]/", "::ffff:7f00:1"),
    ("http://[::127.0.0.1]/", "::7f00:1"),
    ("http://[64:ff9b::10.0.0.5]/", "64:ff9b::a00:5"),
    ("http://[2002:a00:5::1]/", "2002:a00:5::1"),
]


@pytest.mark.parametrize(("url", "address"), SPELLINGS, ids=[u for u, _ in SPELLINGS])
def test_odd_spellings_go_through_our_parser_then_the_guard(url, address):
    canonical = canonicalize(url)
    literal = literal_address(canonical.host)
    assert literal == ipaddress.ip_address(address)
    with pytest.raises(AddressRefused):
        AddressGuard().check(canonical.host, str(literal))


# --- the follow stage, in process: pinned names, the loopback server, the allowance off or narrowed --------
def _follow(engine, db_url, names, allow, **kw):
    backend = LoopbackOnlyBackend()
    settings = loopback_settings(db_url, allow_networks=allow)
    summary = follow_links(engine, settings=settings, resolver=StaticResolver(names), backend=backend, all_urls=True,
                           **kw)
    return summary, backend


def test_names_that_resolve_to_loopback_are_refused(engine, db_url, tmp_path, server):
    names = {"sneaky.test": ["127.0.0.1"], "sneaky6.test": ["::1"], "mixed.test": ["45.83.12.7", "127.0.0.2"],
             "mapped.test": ["::ffff:127.0.0.1"], "nat64.test": ["64:ff9b::7f00:1"]}
    load_url_list(engine, tmp_path, "panel", [server.url("/final", host=h) for h in names])
    summary, backend = _follow(engine, db_url, names, ())
    assert summary.refused == {"refused": len(names)} and summary.resolved == 0
    assert dict(summary.refusals) == {"loopback": 5}  # the embedded ones by their embedded address's kind
    assert backend.connected == [] and server.seen == []


def test_a_redirect_chain_that_turns_private_on_its_third_hop_is_refused_there(engine, db_url, tmp_path, server):
    # Only the test server's own address is allowed: the first two hops reach it; the third names a host
    # that resolves elsewhere on loopback, then one on a private network.
    for third, address, why in (("c.test", "127.0.0.2", "loopback"), ("d.test", "10.0.0.5", "private")):
        names = {"a.test": ["127.0.0.1"], "b.test": ["127.0.0.1"], third: [address]}
        hop3 = server.url("/final", host=third)
        hop2 = server.url(f"/to?loc={hop3}", host="b.test")
        start = server.url(f"/to?loc={hop2}", host="a.test")
        server.seen.clear()
        load_url_list(engine, tmp_path, f"panel-{third}", [start])
        summary, backend = _follow(engine, db_url, names, ("127.0.0.1/32",))
        assert summary.refused == {"refused": 1} and dict(summary.refusals) == {why: 1}, summary.lines()
        assert [s.host.split(":")[0] for s in server.seen] == ["a.test", "b.test"]  # never the third
        assert summary.links == 2  # the two hops that were followed are kept as evidence
        assert backend.connected == [("127.0.0.1", server.port)] * len(backend.connected)


def test_every_form_is_refused_end_to_end_with_the_reason_shown(db_url, tmp_path, server, monkeypatch, capsys):
    # Loopback only, the loopback allowance off: the CLI (system resolver, but every host here is an IP
    # literal once parsed, so nothing is asked of it) refuses each form and says why.
    for name, value in {"LINKFOLD_DATABASE_URL": db_url, "LINKFOLD_CONTACT": "mailto:lab@university.example",
                        "LINKFOLD_ALLOW_NETWORKS": "", "LINKFOLD_HTTP_HOST_DELAY": "0",
                        "LINKFOLD_HTTP_RETRIES": "0", "LINKFOLD_HTTP_TIMEOUT": "2"}.items():
        monkeypatch.setenv(name, value)
    asked: list[str] = []

    async def no_resolver(host: str, port: int) -> list[str]:
        asked.append(host)
        raise AssertionError(f"the system resolver was asked about {host!r}")

    # Every host below is an address once our parser has read it: the resolver must never be asked.
    monkeypatch.setattr("linkfold.web.client.system_resolver", no_resolver)
    port = server.port
    hosts = ["127.0.0.1", "2130706433", "0x7f000001", "0177.0.0.1", "127.1", "0x7f.1", "127.0.1",
             "%31%32%37.0.0.1", "[::ffff:127.0.0.1]", "[::127.0.0.1]", "[64:ff9b::7f00:1]", "[2002:7f00:1::1]",
             "[::1]", "0"]
    path = tmp_path / "forms.txt"
    path.write_text("".join(f"http://{h}:{port}/final/{i}\n" for i, h in enumerate(hosts)), encoding="utf-8")
    assert main(["-q", "datasets", "load", str(path), "--dataset", "forms"]) == 0
    capsys.readouterr()
    assert main(["follow", "--all"]) == 0
    err = capsys.readouterr().err
    assert server.seen == [] and asked == []
    assert "refused:  14 (refused 14)" in err, err
    # One line a reason, with the count and what would allow it (linkfold.web.explain_refusal).
    assert re.search(r"^\s+13  a loopback address \(127\.0\.0\.0/8, ::1\): the request-forgery guard", err, re.M), err
    assert re.search(r"^\s+1  the unspecified address", err, re.M), err


def test_every_network_pythons_ipaddress_calls_private_is_refused():
    """Against a general-purpose reference: the standard library's ipaddress module keeps its own copy of
    the IANA special-purpose registries (the networks behind ``is_private``). Every such network is refused
    by the guard, first, middle and last address, except the blocks this table marks ``embedded`` (an
    IPv4-mapped form of a public address leads to that public address; guard.py). The module's copy is
    older than the registry on some IPv6 entries, so the check runs one way: ours may refuse more."""
    embedded = [ipaddress.ip_network(r["block"]) for r in ROWS if r["decision"] == "embedded"]
    private = [*ipaddress._IPv4Constants._private_networks, *ipaddress._IPv6Constants._private_networks]
    checked = 0
    for net in private:
        if any(net.version == e.version and net.subnet_of(e) for e in embedded):  # type: ignore[arg-type]
            continue
        for addr in _points(str(net)):
            assert blocked_reason(addr) is not None, (str(net), str(addr))
            checked += 1
    assert checked >= 3 * 20
