"""Keyed pseudonyms of units (the person or account a sighting belongs to).

A unit ID is never stored: the registry keeps ``HMAC-SHA256(key, id)`` (RFC 2104 with SHA-256, as
RFC 4231 tests it) under the lab's secret ``pseudonym_key``, written as text:

    ``hs256:`` + the full 32-byte MAC in lower-case RFC 4648 base32 without ``=`` padding (52 characters)

The prefix names the scheme, so a later scheme can sit beside this one without being mistaken for it.
The ID is the unit field's text with surrounding white space removed, encoded as UTF-8; a JSON number is
its JSON text (``123``, ``1.5``), as row keys are. The same key gives the same pseudonym in any lab tool
that computes the same HMAC, which is how survey answers are joined (``linkfold pseudonymise``).

The key's *fingerprint* (an HMAC of a fixed label under the key, never the key) is stored in the registry
when units are first loaded, so that a load under another key is refused rather than silently giving the
same people new pseudonyms (store/pseudonym_keys.py).

Pure: no database, no network; reading the key file is the only I/O.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
from pathlib import Path
from typing import Any

from .errors import ConfigError
from .settings import Settings

SCHEME = "hs256"
PREFIX = SCHEME + ":"
#: RFC 2104 §3: "keys shorter than L bytes are strongly discouraged" (L = 32 for SHA-256).
MIN_KEY_BYTES = 32
FINGERPRINT_LABEL = b"linkfold pseudonym key fingerprint v1"
#: Pseudonyms kept per load; panels repeat units heavily, and an HMAC costs about a microsecond.
DEFAULT_CACHE = 1 << 16


def hmac_sha256(key: bytes, message: bytes) -> bytes:
    """HMAC-SHA256 (RFC 2104; test vectors in RFC 4231 §4)."""
    return hmac.new(key, message, hashlib.sha256).digest()


def encode_mac(mac: bytes) -> str:
    """``hs256:`` + lower-case RFC 4648 §6 base32 of ``mac``, without padding."""
    if len(mac) == 32:
        return PREFIX + _b32_of_32(mac)
    return PREFIX + base64.b32encode(mac).decode("ascii").rstrip("=").lower()


# RFC 4648 §6 base32 of a 32-byte MAC in one step: 256 bits and 4 zero bits (the last group's padding
# bits) are 26 groups of 10 bits, each two characters. The standard library's encoder goes 5 bytes at a
# time and pads, then we strip and lower: three times slower, and a load pays it once per distinct unit.
_ALPHABET = "abcdefghijklmnopqrstuvwxyz234567"
_PAIRS = [a + b for a in _ALPHABET for b in _ALPHABET]
_SHIFTS = tuple(range(250, -1, -10))


def _b32_of_32(mac: bytes) -> str:
    n = int.from_bytes(mac, "big") << 4
    pairs = _PAIRS
    return "".join([pairs[(n >> s) & 1023] for s in _SHIFTS])


def unit_text(value: Any) -> str | None:
    """The text a unit value is pseudonymised from, or None when the field holds no unit (missing, null,
    blank). A JSON number is its JSON text; anything else that is not text raises ``ValueError``."""
    if value is None:
        return None
    if isinstance(value, str):
        text = value.strip()
        return text or None
    if isinstance(value, bool | int | float):
        return json.dumps(value)
    raise ValueError(f"a JSON {type(value).__name__}, not a text or number")


class Pseudonymiser:
    """Unit ID text -> pseudonym under one key, with a bounded cache (the older half goes when full)."""

    def __init__(self, key: bytes, *, cache_size: int = DEFAULT_CACHE) -> None:
        if not key:
            raise ConfigError("the pseudonym key is empty")
        self._key = key
        self._cache: dict[str, str] = {}
        self._cache_size = max(cache_size, 16)
        self.fingerprint = fingerprint(key)

    def __repr__(self) -> str:  # never show the key
        return f"Pseudonymiser(fingerprint={self.fingerprint!r})"

    def __call__(self, text: str) -> str:
        cache = self._cache
        got = cache.get(text)
        if got is None:
            got = PREFIX + _b32_of_32(hmac.digest(self._key, text.encode("utf-8", "surrogatepass"), "sha256"))
            if len(cache) >= self._cache_size:
                keep = list(cache.items())[len(cache) // 2:]
                cache.clear()
                cache.update(keep)
            cache[text] = got
        return got


def fingerprint(key: bytes) -> str:
    """What the registry stores to recognise a key: an HMAC of a fixed label under it (20 bytes shown),
    from which the key cannot be recovered."""
    return "kf1:" + base64.b32encode(hmac_sha256(key, FINGERPRINT_LABEL)[:20]).decode("ascii").lower()


def key_from_settings(settings: Settings) -> bytes | None:
    """The lab's key from the settings ``pseudonym_key`` (text, UTF-8) or ``pseudonym_key_file`` (the file's
    bytes, one trailing line end removed); None when neither is set. Both set, an unreadable file or a key
    shorter than 32 bytes is a ``ConfigError`` that names the setting (never the key)."""
    text = settings.pseudonym_key or ""
    path = settings.pseudonym_key_file or ""
    if text and path:
        raise ConfigError("both pseudonym_key and pseudonym_key_file are set; give one of them")
    if text:
        key, source = text.encode("utf-8"), "pseudonym_key (LINKFOLD_PSEUDONYM_KEY)"
    elif path:
        source = f"pseudonym_key_file ({path})"
        try:
            key = Path(path).expanduser().read_bytes()
        except OSError as exc:
            raise ConfigError(f"{source} cannot be read: {exc.strerror or exc}") from None
        if key.endswith(b"\r\n"):
            key = key[:-2]
        elif key.endswith(b"\n"):
            key = key[:-1]
    else:
        return None
    if len(key) < MIN_KEY_BYTES:
        raise ConfigError(f"the key in {source} is {len(key)} bytes long; it needs at least {MIN_KEY_BYTES} "
                          "(RFC 2104 §3)", hint="make one with: python3 -c 'import secrets; "
                                                "print(secrets.token_hex(32))'")
    return key


def require_key(settings: Settings) -> bytes:
    """:func:`key_from_settings`, refusing when there is none."""
    key = key_from_settings(settings)
    if key is None:
        raise ConfigError("units are pseudonymised under the lab's secret key, and none is set",
                          hint="set pseudonym_key (LINKFOLD_PSEUDONYM_KEY) or pseudonym_key_file "
                               "(LINKFOLD_PSEUDONYM_KEY_FILE); see docs/exposure.md")
    return key


__all__ = ["MIN_KEY_BYTES", "PREFIX", "SCHEME", "Pseudonymiser", "encode_mac", "fingerprint", "hmac_sha256",
           "key_from_settings", "require_key", "unit_text"]
