"""Text normalisation, hashing and word counts, shared by extracted and loaded documents.

Two documents have the same ``text_hash`` exactly when their normalised texts are equal, so the
normalisation decides what "the same text" means for exact-duplicate detection. It is deliberately small
and documented in docs/content.md; any change to it must bump ``CONTENT_VERSION``.
"""

from __future__ import annotations

import hashlib
import re
import unicodedata

# Bump when normalisation, the usable-text rules or the extraction options change what a page yields: it
# is part of every document's extractor_version, so re-extraction can find what is out of date.
CONTENT_VERSION = "1"

# Invisible characters that differ between copies of one text without changing it: soft hyphen (U+00AD),
# zero-width space, joiners and word joiner (U+200B–U+200D, U+2060), and the BOM / zero-width no-break
# space (U+FEFF).
_INVISIBLE = dict.fromkeys(map(ord, "\u00ad\u200b\u200c\u200d\u2060\ufeff"))
_SPACES = re.compile(r"[^\S\n]+")  # any Unicode whitespace except the newline


_SURROGATE = re.compile("[\ud800-\udfff]")


def normalise_text(text: str) -> str:
    """Invisible characters removed, NFC, whitespace runs inside a line to one space, lines stripped,
    line breaks unified and empty lines dropped: one paragraph a line.
    """
    # Invisible characters go first: one between a letter and its combining mark would otherwise keep
    # the pair from composing.
    text = text.translate(_INVISIBLE)
    # A lone surrogate (JSON allows "\ud800" escapes) cannot be encoded as UTF-8, so it could be neither
    # hashed nor stored: it becomes U+FFFD, as a decoder does with a broken byte sequence.
    text = _SURROGATE.sub("\ufffd", text)
    text = unicodedata.normalize("NFC", text)
    # str.splitlines knows every Unicode line boundary (CR LF, U+2028, U+2029, NEL …).
    lines = (_SPACES.sub(" ", line).strip() for line in text.splitlines())
    return "\n".join(line for line in lines if line)


def text_hash(normalised: str) -> str:
    """Lower-case hex SHA-256 (FIPS 180-4) of the UTF-8 bytes of an already normalised text."""
    return hashlib.sha256(normalised.encode("utf-8")).hexdigest()


def count_words(text: str) -> int:
    """Whitespace-separated tokens: a plain rule that is the same in every lab and every language with
    spaces between words (it undercounts scripts written without them)."""
    return len(text.split())
