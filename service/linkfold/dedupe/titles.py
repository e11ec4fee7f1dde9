"""Title keys: candidate pairs for short texts, whose titles decide (docs/dedupe.md §4a, §6).

Band keys find pairs whose *texts* share shingles. A brief of 30 words rewritten by another outlet shares
almost none, so its copy never becomes a candidate although §6 says that for a short text the title
decides. Title keys close that gap: equal keys make a candidate pair, and verification then applies the
title-and-date rule as for any other candidate.

Keys (name ``lft1``): the title's words after §1's normalisation; a title of fewer than
:data:`MIN_TITLE_WORDS` words has no keys (and never decides, §6). One key for all the words, and, for
titles of more than ``MIN_TITLE_WORDS`` and at most :data:`MAX_DELETION_WORDS` words, one key for each
way of leaving one word out (the deletion neighbourhood): two titles that are equal, or differ by one
word added, dropped or replaced, share a key. A key is BLAKE2b (RFC 7693, ``digest_size=8``) of
``lft1`` and the words joined by single spaces, UTF-8, read little-endian as a *signed* 64-bit integer so
that it fits a BIGINT column on SQLite and PostgreSQL.
"""

from __future__ import annotations

import hashlib

from .shingle import normalise_words

TITLE_KEY_NAME = "lft1"
#: Titles shorter than this are not evidence: one to three words ("Weather", "Live updates", "Letters to
#: readers") repeat across outlets every day. A rule of thumb (common practice, no source).
MIN_TITLE_WORDS = 4
#: Longer titles get only the key of all their words: a one-word change in them is rarely the only one.
MAX_DELETION_WORDS = 20


def title_word_count(title: str | None) -> int:
    return len(normalise_words(title)) if title else 0


def _key(words: list[str]) -> int:
    data = (TITLE_KEY_NAME + " " + " ".join(words)).encode("utf-8")
    return int.from_bytes(hashlib.blake2b(data, digest_size=8).digest(), "little", signed=True)


def title_keys(title: str | None) -> list[int]:
    """The sorted distinct keys of ``title`` (empty for a missing title or one of too few words)."""
    words = normalise_words(title) if title else []
    if len(words) < MIN_TITLE_WORDS:
        return []
    keys = {_key(words)}
    if MIN_TITLE_WORDS < len(words) <= MAX_DELETION_WORDS:
        keys.update(_key(words[:i] + words[i + 1:]) for i in range(len(words)))
    return sorted(keys)


__all__ = ["MAX_DELETION_WORDS", "MIN_TITLE_WORDS", "TITLE_KEY_NAME", "title_keys", "title_word_count"]
