"""Text normalisation, word shingles and their hashes."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from linkfold.dedupe import (
    batch_shingle_hashes,
    exact_jaccard,
    normalise_words,
    shingle_hashes,
    shingles_from_bytes,
    shingles_to_bytes,
)
from linkfold.dedupe.shingle import WordHasher, shingle_hashes_from_word_hashes
from linkfold.errors import SignatureError

MASK = (1 << 64) - 1


def _fmix64_spec(h: int) -> int:
    # MurmurHash3 fmix64, written out from docs/dedupe.md with Python integers: an independent
    # implementation of the documented hash, not a call into the code under test.
    h ^= h >> 33
    h = (h * 0xFF51AFD7ED558CCD) & MASK
    h ^= h >> 33
    h = (h * 0xC4CEB9FE1A85EC53) & MASK
    return h ^ (h >> 33)


def _shingle_hash_spec(words: list[str], width: int) -> int:
    h = 0x9E3779B97F4A7C15
    for w in words:
        wh = int.from_bytes(hashlib.blake2b(w.encode("utf-8"), digest_size=8).digest(), "little")
        h = _fmix64_spec(h ^ wh)
    return h >> 32 if width == 32 else h


def test_unicode_normalisation() -> None:
    # UnicodeData.txt: U+FB01 LATIN SMALL LIGATURE FI has the compatibility decomposition "fi" (NFKC);
    # U+FF21 FULLWIDTH LATIN CAPITAL LETTER A → "A"; U+212B ANGSTROM SIGN → U+00C5 (canonical).
    assert normalise_words("\ufb01ne \uff21bc \u212b") == ["fine", "abc", "å"]
    # CaseFolding.txt: 00DF; F; 0073 0073 (full folding of ß is "ss").
    assert normalise_words("Straße STRASSE") == ["strasse", "strasse"]
    # UnicodeData.txt: U+0663 ARABIC-INDIC DIGIT THREE has decimal value 3.
    assert normalise_words("\u0663\u0660 30") == ["30", "30"]
    # A composed and a decomposed é are one word (NFC/NFKC canonical composition).
    assert normalise_words("caf\u00e9") == normalise_words("cafe\u0301") == ["café"]


def test_punctuation_and_spacing_split_words() -> None:
    # Our rule: only letters, marks and numbers make words (docs/dedupe.md).
    assert normalise_words("1,000 1.000 1\u00a0000") == ["1", "000"] * 3
    assert normalise_words("  The «quick» brown—fox;\tit's\n") == ["the", "quick", "brown", "fox", "it", "s"]
    assert normalise_words("...!?") == []
    # Combining marks stay inside their word (category M), e.g. Devanagari vowel signs.
    assert normalise_words("नमस्ते दुनिया") == ["नमस्ते", "दुनिया"]


def test_shingle_count_mmds_example_3_3() -> None:
    # Mining of Massive Datasets, Example 3.3 (from memory): the 2-shingles of "abcdabd" are
    # {ab, bc, cd, da, bd} — five distinct of six windows. The same holds for words.
    hashes = shingle_hashes("a b c d a b d", 2)
    assert len(hashes) == 5
    assert len(shingle_hashes_from_word_hashes(WordHasher().hash_words(list("abcdabd")), 2)) == 6


def test_jaccard_mmds_example_3_1() -> None:
    # Mining of Massive Datasets, Example 3.1 (from memory): 3 elements in common, 8 in the union → 3/8.
    a = np.array([1, 2, 3, 4, 5], dtype=np.uint32)
    b = np.array([3, 4, 5, 6, 7, 8], dtype=np.uint32)
    assert exact_jaccard(a, b) == 3 / 8
    assert exact_jaccard(a[:0], b[:0]) == 0.0


def test_hash_matches_documented_spec() -> None:
    words = ["alpha", "βeta", "gamma", "délta", "epsilon", "zeta"]
    for width in (32, 64):
        got = shingle_hashes_from_word_hashes(WordHasher().hash_words(words), 3, width)
        want = [_shingle_hash_spec(words[i:i + 3], width) for i in range(4)]
        assert [int(x) for x in got] == want
    # Regression pin of one value, computed by this implementation when HASH_NAME lfw1 was fixed;
    # it must never change while the name stays the same.
    assert int(shingle_hashes("One two three four five", 5)[0]) == _shingle_hash_spec(
        ["one", "two", "three", "four", "five"], 32)


def test_short_and_empty_texts() -> None:
    assert len(shingle_hashes("", 5)) == 0
    assert len(shingle_hashes("three short words", 5)) == 1
    assert shingle_hashes("Three short WORDS!", 5).tolist() == shingle_hashes("three short words", 5).tolist()
    # Order matters: a shingle is a sequence, not a bag.
    assert shingle_hashes("a b", 5).tolist() != shingle_hashes("b a", 5).tolist()


def test_word_hasher_cache_bound() -> None:
    hasher = WordHasher(max_words=3)
    values = [hasher(w) for w in ["a", "b", "c", "d", "e", "a"]]
    assert values[0] == values[-1] and len(hasher._index) <= 3
    big = [f"w{i}" for i in range(10)]
    np.testing.assert_array_equal(hasher.hash_words(big), WordHasher().hash_words(big))


word = st.sampled_from(["ka", "lo", "mi", "nu", "po", "ra", "Ka", "lo,", "mi."])
texts = st.lists(st.lists(word, max_size=12).map(" ".join), max_size=8)


@settings(max_examples=200, deadline=None)
@given(texts, st.integers(1, 6), st.sampled_from([32, 64]))
def test_batch_equals_one_at_a_time(batch: list[str], k: int, width: int) -> None:
    values, offsets = batch_shingle_hashes(batch, k, width=width)
    assert len(offsets) == len(batch) + 1
    for i, text in enumerate(batch):
        one = np.unique(values[offsets[i]:offsets[i + 1]])
        np.testing.assert_array_equal(one, shingle_hashes(text, k, width=width))


def test_shingle_set_bytes_round_trip() -> None:
    for width in (32, 64):
        hashes = shingle_hashes("one two three four five six seven", 3, width=width)
        data = shingles_to_bytes(hashes[::-1], width)
        assert len(data) == len(hashes) * width // 8
        np.testing.assert_array_equal(shingles_from_bytes(data, width), hashes)
    with pytest.raises(SignatureError, match="whole number"):
        shingles_from_bytes(b"\0" * 5)
    with pytest.raises(SignatureError, match="sorted"):
        shingles_from_bytes(np.array([5, 1], dtype="<u4").tobytes())
