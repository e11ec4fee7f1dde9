"""Matching benchmark: candidate pairs from band keys at 10k–100k documents, recall and scaling.

Corpus: generated shingle-hash sets in families of near-duplicates (``synthetic.set_families``), so
the true Jaccard similarity of any pair is computed exactly. Measured in one run:

* time of band keys + candidate generation (in memory: sort and group of (band, key)) at several
  corpus sizes, and the scaling exponent (slope of log time against log size; 1 = linear);
* candidate recall against brute force over all pairs of a sample of families (every pair of the
  sample, exact Jaccard by an inverted index), at the story threshold + 0.05 (target ≥ 0.99).

Run:  python bench/match_bench.py [--max-docs 100000]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from linkfold.dedupe import SignatureParams, band_keys, candidate_pairs, minhash_signatures, s_curve
from linkfold.settings import load_settings

# The generated texts live beside the tests that use them too (not in the package).
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from synthetic_texts import set_families

RECALL_TARGET = 0.99


def subset(values: np.ndarray, offsets: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    return values[: offsets[n]], offsets[: n + 1]


def all_pairs_jaccard(values: np.ndarray, offsets: np.ndarray, docs: np.ndarray) -> dict[tuple[int, int], float]:
    """Exact Jaccard of every pair of ``docs`` that shares at least one value (all others are 0)."""
    sizes = offsets[docs + 1] - offsets[docs]
    vals = np.concatenate([values[offsets[d]:offsets[d + 1]] for d in docs])
    owner = np.repeat(docs, sizes)
    order = np.lexsort((owner, vals))
    vals, owner = vals[order], owner[order]
    n = int(docs.max()) + 1
    codes = []
    for d in range(1, 64):
        same = vals[:-d] == vals[d:]
        if not same.any():
            break
        codes.append(owner[:-d][same] * n + owner[d:][same])
    inter_codes, inter = np.unique(np.concatenate(codes), return_counts=True)
    size_of = dict(zip(docs.tolist(), sizes.tolist(), strict=True))
    out = {}
    for code, c in zip(inter_codes.tolist(), inter.tolist(), strict=True):
        a, b = divmod(code, n)
        out[(a, b)] = c / (size_of[a] + size_of[b] - c)
    return out


def timed(fn, repeat: int):
    best, result = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return best, result


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--max-docs", type=int, default=100_000)
    ap.add_argument("--sample-families", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)

    settings = load_settings(environ={})
    params = SignatureParams.from_settings(settings)
    floor = settings.story_threshold + 0.05
    sizes = [n for n in (10_000, 30_000, 100_000, 300_000, 1_000_000) if n <= args.max_docs] or [args.max_docs]

    t0 = time.perf_counter()
    values, offsets, family = set_families(sizes[-1], seed=7)
    t_gen = time.perf_counter() - t0
    t0 = time.perf_counter()
    sig = minhash_signatures(values, offsets, params)
    t_sig = time.perf_counter() - t0
    print(f"params: {params}; recall floor: Jaccard ≥ {floor:.2f} "
          f"(S-curve P = {float(s_curve(floor, params.bands, params.rows)):.4f})")
    print(f"corpus: {sizes[-1]} sets, {len(values)} values, generated in {t_gen:.1f} s; "
          f"signatures in {t_sig:.1f} s ({sizes[-1] / t_sig:.0f} sets/s)")

    times = []
    result = None
    for n in sizes:
        t, result = timed(lambda n=n: candidate_pairs(band_keys(sig[:n], params.bands, params.rows)),
                          args.repeat)
        times.append(t)
        print(f"{n:>9} docs: candidates in {t:7.3f} s, {len(result.pairs):>9} pairs "
              f"({len(result.pairs) / n:.2f} per doc), largest bucket {result.largest_bucket}")
    exponent = float(np.polyfit(np.log(sizes), np.log(times), 1)[0]) if len(sizes) > 1 else float("nan")
    print(f"scaling exponent (log time vs log docs): {exponent:.2f} (1.00 = linear)")

    rng = np.random.default_rng(3)
    fams = rng.choice(int(family.max()) + 1, size=min(args.sample_families, int(family.max()) + 1), replace=False)
    docs = np.flatnonzero(np.isin(family, fams))
    truth = all_pairs_jaccard(values, offsets, docs)
    assert result is not None
    n = sizes[-1]
    found = set((result.pairs[:, 0] * n + result.pairs[:, 1]).tolist())
    true_pairs = [p for p, j in truth.items() if j >= floor]
    hit = sum(a * n + b in found for a, b in true_pairs)
    recall = hit / len(true_pairs) if true_pairs else float("nan")
    cross = sum(1 for (a, b) in truth if family[a] != family[b])
    print(f"brute force over {len(docs)} sampled docs ({len(docs) * (len(docs) - 1) // 2} pairs, "
          f"{cross} cross-family overlaps): {len(true_pairs)} pairs with J ≥ {floor:.2f}, "
          f"recall {recall:.4f} (target ≥ {RECALL_TARGET})")
    return 0 if recall >= RECALL_TARGET else 1


if __name__ == "__main__":
    sys.exit(main())
