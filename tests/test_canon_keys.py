"""The url key, checked against the standards it is defined by (FIPS 180-4 SHA-256, RFC 4648 base32)."""

from __future__ import annotations

import base64
import hashlib

import pytest

from linkfold.canon import canonicalize, url_key

ALPHABET = "ABCDEFGHIJKLMNOPQRSTUVWXYZ234567"  # RFC 4648 §6, Table 3


def rfc4648_base32(data: bytes) -> str:
    """RFC 4648 §6 written out from the text, independent of the base64 module."""
    bits = "".join(f"{b:08b}" for b in data)
    bits += "0" * (-len(bits) % 5)
    out = "".join(ALPHABET[int(bits[i:i + 5], 2)] for i in range(0, len(bits), 5))
    return out + "=" * (-len(out) % 8)


@pytest.mark.parametrize(("data", "encoded"), [
    # RFC 4648 §10 test vectors for BASE32.
    (b"", ""), (b"f", "MY======"), (b"fo", "MZXQ===="), (b"foo", "MZXW6==="), (b"foob", "MZXW6YQ="),
    (b"fooba", "MZXW6YTB"), (b"foobar", "MZXW6YTBOI======"),
])
def test_base32_step_matches_rfc4648_vectors(data: bytes, encoded: str) -> None:
    assert rfc4648_base32(data) == encoded
    assert base64.b32encode(data).decode() == encoded


def test_sha256_step_matches_fips_180_example() -> None:
    # FIPS 180-2 Appendix B.1 ("abc"), the one-block SHA-256 example.
    assert hashlib.sha256(b"abc").hexdigest() == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad")


@pytest.mark.parametrize("url", [
    "https://daily.example/",
    "https://daily.example/2026/10/night-market-trial",
    "https://xn--bcher-kva.example/a?b=1",
    "https://daily.example/%C3%A9t%C3%A9",
])
def test_url_key_definition(url: str) -> None:
    expected = rfc4648_base32(hashlib.sha256(url.encode("utf-8")).digest()[:15]).lower()
    assert "=" not in expected and len(expected) == 24  # 120 bits are 24 characters: never padded
    assert url_key(url) == expected


def test_url_key_is_a_function_of_the_canonical_url_alone() -> None:
    a = canonicalize("http://www.daily.example/a/?utm_source=x")
    b = canonicalize("https://daily.example/a")
    assert a.url == b.url and a.url_key == b.url_key == url_key(a.url)


def test_url_key_alphabet() -> None:
    key = url_key("https://daily.example/a")
    assert set(key) <= set(ALPHABET.lower())


def test_fast_base32_matches_the_standard_library() -> None:
    # url_key uses a table-driven base32; it must equal base64.b32encode over many digests.
    for i in range(2000):
        url = f"https://daily.example/{i}"
        expected = base64.b32encode(hashlib.sha256(url.encode()).digest()[:15]).decode().lower()
        assert url_key(url) == expected
