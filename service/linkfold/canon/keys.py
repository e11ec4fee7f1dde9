"""The url key: a portable, deterministic key of a canonical URL.

Definition (also in docs/canonical-form.md and DESIGN.md "Stable IDs"): the SHA-256 digest of the
canonical URL encoded as UTF-8, truncated to its first 15 bytes (120 bits), written in RFC 4648 §6
base32 in lower case. 15 bytes are exactly 24 base32 characters, so there is never any padding. Any lab can
recompute it from the canonical URL alone, with any SHA-256 and base32 implementation.
"""

from __future__ import annotations

import hashlib

KEY_BYTES = 15
KEY_LENGTH = 24  # 15 bytes * 8 bits / 5 bits per base32 character


_ALPHABET = "abcdefghijklmnopqrstuvwxyz234567"  # RFC 4648 §6, Table 3, in lower case
# Three base32 characters for every 15-bit value: eight look-ups per key instead of the standard
# library's bit-by-bit loop (the key is computed for every URL of every bulk stage). Same output as
# base64.b32encode(...).lower(), which a test checks.
_TRIPLES = tuple(_ALPHABET[v >> 10] + _ALPHABET[(v >> 5) & 31] + _ALPHABET[v & 31] for v in range(1 << 15))


def url_key(canonical_url: str) -> str:
    """The url key of a canonical URL (24 lower-case base32 characters)."""
    n = int.from_bytes(hashlib.sha256(canonical_url.encode("utf-8")).digest()[:KEY_BYTES], "big")
    t = _TRIPLES
    return "".join((t[n >> 105], t[(n >> 90) & 0x7FFF], t[(n >> 75) & 0x7FFF], t[(n >> 60) & 0x7FFF],
                    t[(n >> 45) & 0x7FFF], t[(n >> 30) & 0x7FFF], t[(n >> 15) & 0x7FFF], t[n & 0x7FFF]))
