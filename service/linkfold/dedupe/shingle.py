"""Text → words → word shingles → integer shingle hashes.

The whole chain is specified in docs/dedupe.md precisely enough for another lab to recompute the same
hash values; ``HASH_NAME`` names this exact chain and is stored beside every signature, so any change
to normalisation, word hashing or shingle combination must come with a new name.

Why words are hashed once and shingles are combined arithmetically instead of hashing each shingle's
text: a corpus repeats the same few hundred thousand words millions of times, so one BLAKE2b call per
distinct word (cached) plus a vectorised numpy mix per shingle is several times cheaper than one hash
call per shingle, and the result is still a fixed, documented function of the words.
"""

from __future__ import annotations

import hashlib
import unicodedata
from collections.abc import Iterable, Sequence
from itertools import chain

import numpy as np

from ..errors import SignatureError

# Names the normalisation + word hash + shingle combination below (version 1).
HASH_NAME = "lfw1"

# MurmurHash3 fmix64 constants (public domain reference implementation); the same finaliser is the
# pre-mix of datasketch's affine64 scheme, which is convenient but not required.
_M1 = np.uint64(0xFF51AFD7ED558CCD)
_M2 = np.uint64(0xC4CEB9FE1A85EC53)
_S33 = np.uint64(33)
# Start value of the shingle chain: the 64-bit golden-ratio constant, a conventional non-zero seed.
CHAIN_START = np.uint64(0x9E3779B97F4A7C15)


def fmix64_inplace(h: np.ndarray) -> np.ndarray:
    """MurmurHash3's 64-bit finaliser, element-wise, overwriting ``h`` (uint64; wraps modulo 2^64).

    In place because these arrays are large and the temporaries of the plain expression would cost
    more than the arithmetic.
    """
    h ^= h >> _S33
    h *= _M1
    h ^= h >> _S33
    h *= _M2
    h ^= h >> _S33
    return h


def fmix64(h: np.ndarray) -> np.ndarray:
    """MurmurHash3's 64-bit finaliser on a copy of ``h``."""
    return fmix64_inplace(np.array(h, dtype=np.uint64))


class _Separators(dict):
    """``str.translate`` table built lazily: one entry per code point actually met.

    Letters (L*), marks (M*) and numbers (N*) are word characters; every other category (punctuation,
    symbols, separators, controls, unassigned) becomes a space. Decimal digits of any script map to
    ASCII so ``٣`` and ``3`` are the same word. Building the full table up front would mean walking
    1.1 million code points at import for a few hundred that occur.
    """

    def __missing__(self, cp: int) -> str | int:
        ch = chr(cp)
        cat = unicodedata.category(ch)
        if cat == "Nd":
            value: str | int = str(unicodedata.decimal(ch))
        elif cat[0] in "LMN":
            value = cp
        else:
            value = " "
        self[cp] = value
        return value


_TABLE = _Separators()


def normalise_words(text: str) -> list[str]:
    """The words of ``text`` after normalisation (NFKC, full case folding, NFKC again).

    NFKC folds compatibility forms (ligatures, full-width letters, superscripts) that differ between
    outlets' typesetting but not in content; ``casefold`` is Unicode full case folding (``ß`` → ``ss``);
    the second NFKC puts back into composed form what case folding may have decomposed. Punctuation
    splits words, so ``1,000`` and ``1.000`` and ``1 000`` all give the words ``1 000``.
    """
    if text.isascii():
        # NFKC leaves ASCII unchanged and casefold of ASCII is lower(): same result, a third of the time.
        return text.lower().translate(_TABLE).split()
    folded = unicodedata.normalize("NFKC", unicodedata.normalize("NFKC", text).casefold())
    return folded.translate(_TABLE).split()


def word_hash(word: str) -> int:
    """BLAKE2b (RFC 7693) with digest_size 8, no key, of the UTF-8 word, read little-endian."""
    return int.from_bytes(hashlib.blake2b(word.encode("utf-8"), digest_size=8).digest(), "little")


class WordHasher:
    """Word → 64-bit :func:`word_hash`, cached.

    Each distinct word gets a small integer index (a dict lookup per word occurrence) and its hash is
    kept in a numpy table, so a document's word hashes are one fancy-indexing call: converting lists
    of Python integers above 2^63 into uint64 arrays would cost more than hashing. The cache is bounded
    by ``max_words`` and simply cleared when full: the distribution of words is so skewed that a
    cleared cache refills with the frequent words within a few documents.
    """

    def __init__(self, max_words: int = 1_000_000) -> None:
        self._index: dict[str, int] = {}
        self._table = np.empty(1024, dtype=np.uint64)
        self._max = max_words

    def __call__(self, word: str) -> int:
        return int(self.hash_words([word])[0])

    def _add(self, words: Iterable[str]) -> None:
        # set difference runs in C; a Python loop over every word occurrence would cost more than
        # the hashing it saves
        missing = [w for w in dict.fromkeys(words) if w not in self._index]
        if len(self._index) + len(missing) > self._max:
            self._index.clear()
            missing = missing[: self._max]
        start = len(self._index)
        need = start + len(missing)
        if need > len(self._table):
            grown = np.empty(max(need, 2 * len(self._table)), dtype=np.uint64)
            grown[:start] = self._table[:start]
            self._table = grown
        self._table[start:need] = np.array([word_hash(w) for w in missing], dtype=np.uint64)
        self._index.update(zip(missing, range(start, need), strict=True))

    def _ids(self, words: Sequence[str]) -> np.ndarray:
        return np.fromiter(map(self._index.__getitem__, words), dtype=np.intp, count=len(words))

    def hash_words(self, words: Sequence[str]) -> np.ndarray:
        try:
            return self._table[self._ids(words)]
        except KeyError:
            self._add(words)
        try:
            return self._table[self._ids(words)]
        except KeyError:  # more distinct words than the cache holds: hash without it
            return np.array([word_hash(w) for w in words], dtype=np.uint64)


_DEFAULT_HASHER = WordHasher()


def chain_hash(columns: Sequence[np.ndarray]) -> np.ndarray:
    """Order-sensitive combination of equal-length uint64 columns: h ← fmix64(h XOR column_i)."""
    h = np.full(len(columns[0]) if len(columns) else 0, CHAIN_START, dtype=np.uint64)
    for col in columns:
        h ^= col
        fmix64_inplace(h)
    return h


def _to_width(h64: np.ndarray, width: int) -> np.ndarray:
    # The top half of fmix64's output is as well mixed as the bottom; taking it keeps the 32-bit value
    # a plain shift of the 64-bit one, which is easy to state and to reproduce.
    if width == 64:
        return h64
    if width == 32:
        return (h64 >> np.uint64(32)).astype(np.uint32)
    raise ValueError(f"hash width must be 32 or 64, not {width}")


def shingle_hashes_from_word_hashes(word_hashes: np.ndarray, shingle_size: int, width: int = 32) -> np.ndarray:
    """Hashes of every run of ``shingle_size`` consecutive words, in text order (duplicates kept).

    A text with at least one but fewer than ``shingle_size`` words gives a single shingle of all its
    words, so a short text is still comparable with an identical short text (common practice, no
    source); an empty text gives no shingles.
    """
    n = len(word_hashes)
    if n == 0:
        return np.empty(0, dtype=np.uint32 if width == 32 else np.uint64)
    k = min(shingle_size, n)
    m = n - k + 1
    return _to_width(chain_hash([word_hashes[i:i + m] for i in range(k)]), width)


def shingle_hashes(text: str, shingle_size: int, *, width: int = 32,
                   hasher: WordHasher | None = None) -> np.ndarray:
    """Sorted distinct shingle hashes of one text: the set whose Jaccard similarity we estimate."""
    words = normalise_words(text)
    wh = (hasher or _DEFAULT_HASHER).hash_words(words)
    return np.unique(shingle_hashes_from_word_hashes(wh, shingle_size, width))


def batch_shingle_hashes(texts: Iterable[str], shingle_size: int, *, width: int = 32,
                         hasher: WordHasher | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Shingle hashes of many texts at once, as one flat array plus offsets (CSR layout).

    Document ``i`` owns ``values[offsets[i]:offsets[i + 1]]``. Values are in text order and may repeat
    within a document (MinHash takes a minimum, so repeats do not matter; call ``np.unique`` on a slice
    for the exact set). The shingle chain runs once over all documents concatenated and windows that
    would cross a document boundary are dropped, which keeps the numpy work in a few large calls.
    """
    hasher = hasher or _DEFAULT_HASHER
    k = shingle_size
    doc_words = [normalise_words(text) for text in texts]
    lengths = [len(w) for w in doc_words]
    # One hashing call for the whole batch: per-call overhead is what dominates at this level.
    all_hashes = hasher.hash_words(list(chain.from_iterable(doc_words)))
    n_docs = len(lengths)
    lens = np.array(lengths, dtype=np.int64)
    counts = np.where(lens >= k, lens - k + 1, np.minimum(lens, 1))
    offsets = np.zeros(n_docs + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    dtype = np.uint32 if width == 32 else np.uint64
    out = np.empty(int(offsets[-1]), dtype=dtype)
    word_starts = np.zeros(n_docs + 1, dtype=np.int64)
    np.cumsum(lens, out=word_starts[1:])
    long_docs = np.flatnonzero(lens >= k)
    if len(long_docs):
        is_long = np.repeat(lens >= k, lens)
        words = all_hashes[is_long]
        starts = np.zeros(len(long_docs), dtype=np.int64)
        np.cumsum(lens[long_docs][:-1], out=starts[1:])
        m = len(words) - k + 1
        h = _to_width(chain_hash([words[i:i + m] for i in range(k)]), width)
        # Keep window j only if it starts at least k-1 words before the end of its document.
        doc_of = np.repeat(np.arange(len(long_docs)), lens[long_docs])[:m]
        keep = np.arange(m) + k <= (starts + lens[long_docs])[doc_of]
        cnt = counts[long_docs]
        first = np.zeros(len(cnt), dtype=np.int64)
        np.cumsum(cnt[:-1], out=first[1:])
        out_pos = np.repeat(offsets[long_docs] - first, cnt) + np.arange(int(cnt.sum()))
        out[out_pos] = h[keep]
    for i in np.flatnonzero((lens > 0) & (lens < k)):
        short = all_hashes[word_starts[i]:word_starts[i + 1]]
        out[offsets[i]] = shingle_hashes_from_word_hashes(short, k, width)[0]
    return out, offsets


def exact_jaccard(a: np.ndarray, b: np.ndarray) -> float:
    """Jaccard similarity |A∩B| / |A∪B| of two sorted distinct hash arrays; two empty sets give 0."""
    if len(a) == 0 and len(b) == 0:
        return 0.0
    inter = len(np.intersect1d(a, b, assume_unique=True))
    return inter / (len(a) + len(b) - inter)


def shingles_to_bytes(hashes: np.ndarray, width: int = 32) -> bytes:
    """A shingle set for storage (exact Jaccard later): sorted distinct values, fixed-width little-endian."""
    dtype = np.dtype("<u4" if width == 32 else "<u8")
    return np.unique(np.asarray(hashes)).astype(dtype).tobytes()


def shingles_from_bytes(data: bytes, width: int = 32) -> np.ndarray:
    """Inverse of :func:`shingles_to_bytes`; a length that is not whole values or unsorted values
    mean the stored bytes are not a shingle set of this width (raises ``SignatureError``)."""
    size = width // 8
    if len(data) % size:
        raise SignatureError(f"stored shingle set is {len(data)} bytes, not a whole number of {width}-bit values")
    native = np.uint32 if width == 32 else np.uint64
    values: np.ndarray = np.frombuffer(data, dtype="<u4" if width == 32 else "<u8").astype(native)
    if len(values) > 1 and not np.all(np.greater(values[1:], values[:-1])):
        raise SignatureError("stored shingle set is not sorted and distinct")
    return values
