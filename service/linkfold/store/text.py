"""Text as the database holds it: what both the loaders and the content stages store.

PostgreSQL ``text`` holds neither NUL nor lone surrogates (a JSON string may escape both, RFC 8259 §7), and
a lone surrogate cannot even be encoded as UTF-8 for hashing; both become U+FFFD, on both backends, so a
URL or a text stored from any stage has one form and one hash.
"""

from __future__ import annotations

import hashlib
import re

_UNSTORABLE = re.compile("[\x00\ud800-\udfff]")


def storable(text: str) -> str:
    """``text`` with what PostgreSQL text cannot hold (NUL, lone surrogates) replaced by U+FFFD."""
    # ASCII without NUL is the common case on the hot path of a load: no regular expression for it.
    return _UNSTORABLE.sub("\ufffd", text) if not text.isascii() or "\x00" in text else text


def raw_hash(text: str) -> str:
    """A raw URL's identity as ``raw_urls.raw_hash`` defines it: SHA-256 (hex) of the stored text in UTF-8."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


__all__ = ["raw_hash", "storable"]
