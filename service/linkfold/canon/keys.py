"""The url key: a portable, deterministic key of a canonical URL.

Definition (also in docs/canonical-form.md and DESIGN.md "Stable IDs"): the SHA-256 digest of the
canonical URL encoded as UTF-8, truncated to its first 15 bytes (120 bits), written in RFC 4648 §6
base32 in lower case. 15 bytes are exactly 24 base32 characters, so there is never any padding. Any lab can
recompute it from the canonical URL alone, with any SHA-256 and base32 implementation.
"""

from __future__ import annotations

import base64
import hashlib

KEY_BYTES = 15
KEY_LENGTH = 24  # 15 bytes * 8 bits / 5 bits per base32 character


def url_key(canonical_url: str) -> str:
    """The url key of a canonical URL (24 lower-case base32 characters)."""
    digest = hashlib.sha256(canonical_url.encode("utf-8")).digest()
    return base64.b32encode(digest[:KEY_BYTES]).decode("ascii").lower()
