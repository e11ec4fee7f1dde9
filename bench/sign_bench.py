"""Signing benchmark: our text → signature path against datasketch's usual use, in the same run.

Baseline ("usual use"): for each document, one ``datasketch.MinHash`` fed the UTF-8 shingle strings
through ``update_batch`` with its default hash (SHA-1). Both sides split words with the same
normalisation (``normalise_words``), so the ratio measures shingle hashing and MinHash, not tokenising.

Identity check: datasketch, handed our integer shingle hashes through its ``hashfunc`` hook, must give
exactly our signatures, so the speed is not bought with a different algorithm.

Target (brief of issue 7): ours ≥ 3× faster end to end. Run:  python bench/sign_bench.py [--docs N]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import datasketch
import numpy as np

from linkfold.dedupe import (
    SignatureParams,
    WordHasher,
    normalise_words,
    shingle_hashes,
    signatures_from_texts,
)

# The generated texts live beside the tests that use them too (not in the package).
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from synthetic_texts import near_duplicate_corpus

TARGET = 3.0


def datasketch_usual(texts: list[str], params: SignatureParams) -> np.ndarray:
    k = params.shingle_size
    out = np.empty((len(texts), params.num_perm), dtype=np.uint32)
    for i, text in enumerate(texts):
        words = normalise_words(text)
        shingles = [" ".join(words[j:j + k]) for j in range(max(len(words) - k + 1, 1))] if words else []
        m = datasketch.MinHash(num_perm=params.num_perm, seed=params.seed)
        m.update_batch([s.encode("utf-8") for s in shingles])
        out[i] = m.hashvalues
    return out


def identical_to_datasketch(texts: list[str], params: SignatureParams, ours: np.ndarray) -> bool:
    for i, text in enumerate(texts):
        m = datasketch.MinHash(num_perm=params.num_perm, seed=params.seed, scheme=params.scheme, hashfunc=int)
        m.update_batch(shingle_hashes(text, params.shingle_size).tolist())
        if not np.array_equal(m.hashvalues, ours[i]):
            return False
    return True


def best_of(repeat: int, fn, *args):
    best, result = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = fn(*args)
        best = min(best, time.perf_counter() - t0)
    return best, result


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--docs", type=int, default=3000)
    ap.add_argument("--words", type=int, default=400, help="mean words per document")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--check-sample", type=int, default=300, help="documents checked for identity")
    args = ap.parse_args(argv)

    params = SignatureParams()
    texts, _ = near_duplicate_corpus(args.docs, seed=1, n_words=args.words)
    n_words = sum(len(normalise_words(t)) for t in texts)
    # A fresh word cache per repetition: the measured time includes hashing every distinct word once.
    t_ours, ours = best_of(args.repeat, lambda: signatures_from_texts(texts, params, hasher=WordHasher()))
    t_base, base = best_of(args.repeat, datasketch_usual, texts, params)
    ratio = t_base / t_ours
    same = identical_to_datasketch(texts[: args.check_sample], params, ours)
    print(f"documents: {len(texts)}, words: {n_words}, params: {params.signature_token}")
    print(f"datasketch usual use: {t_base:8.3f} s  ({len(texts) / t_base:9.0f} docs/s)")
    print(f"linkfold vectorised:  {t_ours:8.3f} s  ({len(texts) / t_ours:9.0f} docs/s)")
    print(f"speed-up: {ratio:.2f}x (target ≥ {TARGET:.0f}x)")
    print(f"identical to datasketch given our shingle hashes ({min(args.check_sample, len(texts))} docs): {same}")
    # The two paths use different shingle hashes (SHA-1 of strings vs our chain), so their signatures
    # differ value by value but estimate the same Jaccard similarities:
    pairs = np.stack([np.arange(0, len(texts) - 1), np.arange(1, len(texts))], axis=1)
    d = np.abs((ours[pairs[:, 0]] == ours[pairs[:, 1]]).mean(1) - (base[pairs[:, 0]] == base[pairs[:, 1]]).mean(1))
    print(f"neighbour-pair Jaccard estimates, ours vs datasketch default hash: mean |diff| {d.mean():.4f}")
    return 0 if same and ratio >= TARGET else 1


if __name__ == "__main__":
    sys.exit(main())
