"""Generated texts and sets with controlled overlap, for tests, benchmarks and calibration.

Nothing here is real text: words are invented syllable strings, documents are random word sequences,
and near-duplicates are made by random word edits, so the true Jaccard similarity of any two
documents is whatever exact computation on their shingle sets says, and can be dialled by the edit
rate. Everything is driven by a seeded ``numpy.random.Generator`` and is reproducible.
"""

from __future__ import annotations

import numpy as np

_ONSETS = ("b", "d", "f", "g", "k", "l", "m", "n", "p", "r", "s", "t", "v", "z", "br", "kr", "st", "th")
_VOWELS = ("a", "e", "i", "o", "u", "ai", "ou")
_CODAS = ("", "", "n", "r", "s", "l", "k")


def invented_vocabulary(size: int, rng: np.random.Generator) -> list[str]:
    """``size`` distinct pseudo-words of two to four syllables."""
    words: set[str] = set()
    while len(words) < size:
        n_syll = int(rng.integers(2, 5))
        parts = [(_ONSETS[rng.integers(len(_ONSETS))] + _VOWELS[rng.integers(len(_VOWELS))]
                  + _CODAS[rng.integers(len(_CODAS))]) for _ in range(n_syll)]
        words.add("".join(parts))
    return sorted(words)


def random_words(rng: np.random.Generator, vocab: list[str], n_words: int) -> list[str]:
    return [vocab[i] for i in rng.integers(len(vocab), size=n_words)]


def edited_copy(rng: np.random.Generator, words: list[str], edit_rate: float, vocab: list[str]) -> list[str]:
    """A copy in which each word is, with probability ``edit_rate``, replaced, deleted or followed by an
    inserted word (one third each): the kinds of change a rewrite desk makes to wire copy."""
    out: list[str] = []
    draws = rng.random(len(words))
    kinds = rng.integers(3, size=len(words))
    fresh = rng.integers(len(vocab), size=len(words))
    for w, d, k, f in zip(words, draws, kinds, fresh, strict=True):
        if d >= edit_rate:
            out.append(w)
        elif k == 0:
            out.append(vocab[f])
        elif k == 2:
            out.extend((w, vocab[f]))
    return out


def near_duplicate_corpus(n_docs: int, *, seed: int, family_size: int = 4, n_words: int = 300,
                          edit_rates: tuple[float, ...] = (0.0, 0.01, 0.02, 0.04, 0.07, 0.1),
                          vocab_size: int = 20000) -> tuple[list[str], np.ndarray]:
    """``n_docs`` texts in families of up to ``family_size``: an original and edited copies of it.

    Returns the texts and each text's family number. Copies of one family are near-duplicates to a
    degree set by the edit rate drawn for each copy; texts of different families share almost no
    5-word shingles (the vocabulary is large and words are drawn uniformly).
    """
    rng = np.random.default_rng(seed)
    vocab = invented_vocabulary(vocab_size, rng)
    texts: list[str] = []
    family: list[int] = []
    fam = 0
    while len(texts) < n_docs:
        base = random_words(rng, vocab, int(rng.integers(n_words // 2, n_words * 3 // 2)))
        size = int(rng.integers(1, family_size + 1))
        for i in range(min(size, n_docs - len(texts))):
            words = base if i == 0 else edited_copy(rng, base, float(rng.choice(edit_rates)), vocab)
            texts.append(" ".join(words))
            family.append(fam)
        fam += 1
    return texts, np.array(family, dtype=np.int64)


def set_pair(rng: np.random.Generator, inter: int, union: int, *, width: int = 32) -> tuple[np.ndarray, np.ndarray]:
    """Two sets of distinct ``width``-bit integers with exactly ``inter`` shared of ``union`` in all,
    the rest split evenly, so their Jaccard similarity is exactly inter / union."""
    if not 0 <= inter <= union:
        raise ValueError("need 0 ≤ inter ≤ union")
    dtype = np.uint32 if width == 32 else np.uint64
    values = np.unique(rng.integers(0, 2**width - 1, size=union * 2 + 16, dtype=np.uint64, endpoint=True))
    rng.shuffle(values)
    values = values[:union].astype(dtype)
    if len(values) < union:
        raise ValueError("could not draw enough distinct values")
    rest = union - inter
    shared, only_a, only_b = values[:inter], values[inter:inter + rest // 2], values[inter + rest // 2:]
    return np.sort(np.concatenate([shared, only_a])), np.sort(np.concatenate([shared, only_b]))


def set_families(n_docs: int, *, seed: int, set_size: int = 150, family_size: int = 4,
                 change_rates: tuple[float, ...] = (0.0, 0.05, 0.1, 0.2, 0.3, 0.5),
                 width: int = 32) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Shingle-hash sets without the text, for benchmarks at scale: CSR ``(values, offsets)`` + family.

    Each family is a base set of random ``width``-bit values and copies in which a drawn fraction f of
    the base's values is replaced by fresh ones, so a copy's Jaccard similarity to its base is
    (1 − f) / (1 + f) exactly (up to the rare chance that a fresh value equals an old one).
    """
    rng = np.random.default_rng(seed)
    dtype = np.uint32 if width == 32 else np.uint64
    top = np.iinfo(dtype).max
    sets: list[np.ndarray] = []
    family: list[int] = []
    fam = 0
    while len(sets) < n_docs:
        base = np.unique(rng.integers(0, top, size=set_size, dtype=dtype, endpoint=True))
        for i in range(min(int(rng.integers(1, family_size + 1)), n_docs - len(sets))):
            if i == 0:
                sets.append(base)
            else:
                f = float(rng.choice(change_rates))
                keep = rng.permutation(len(base))[: len(base) - round(f * len(base))]
                fresh = rng.integers(0, top, size=len(base) - len(keep), dtype=dtype, endpoint=True)
                sets.append(np.unique(np.concatenate([base[keep], fresh])))
            family.append(fam)
        fam += 1
    offsets = np.zeros(len(sets) + 1, dtype=np.int64)
    np.cumsum([len(s) for s in sets], out=offsets[1:])
    return np.concatenate(sets), offsets, np.array(family, dtype=np.int64)
