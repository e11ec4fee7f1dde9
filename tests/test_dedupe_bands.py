"""LSH banding: the S-curve, band keys, and candidate pairs against references and brute force."""

from __future__ import annotations

import itertools

import datasketch
import numpy as np
import pytest

from linkfold.dedupe import (
    SignatureParams,
    band_keys,
    banding_options,
    candidate_pairs,
    empty_rows,
    exact_jaccard,
    minhash_signatures,
    s_curve,
    shingle_hashes,
    signatures_from_texts,
    threshold_point,
)
from synthetic_texts import near_duplicate_corpus, set_pair

# Mining of Massive Datasets (Leskovec, Rajaraman & Ullman), ch. 3, the table of 1 − (1 − s^r)^b for
# b = 20, r = 5. Values from memory, confirmed by computing the formula; the book rounds to 3 digits
# (4 for the last).
MMDS_B20_R5 = [(0.2, 0.006), (0.3, 0.047), (0.4, 0.186), (0.5, 0.470), (0.6, 0.802), (0.7, 0.975),
               (0.8, 0.9996)]


@pytest.mark.parametrize(("s", "p"), MMDS_B20_R5)
def test_s_curve_mmds_table(s: float, p: float) -> None:
    digits = 4 if p > 0.99 else 3
    assert round(float(s_curve(s, 20, 5)), digits) == p


def test_s_curve_shape() -> None:
    s = np.linspace(0, 1, 101)
    p = s_curve(s, 32, 3)
    assert p[0] == 0.0 and p[-1] == 1.0 and np.all(np.diff(p) >= 0)
    # MMDS §3.4.3: the threshold (1/b)^(1/r) is roughly where the rise is steepest; for b=20, r=5 ≈ 0.55.
    assert round(threshold_point(20, 5), 2) == 0.55
    with pytest.raises(ValueError):
        s_curve(1.5, 2, 2)


def test_default_banding_meets_recall_target() -> None:
    # Our target (docs/dedupe.md): P(candidate) ≥ 0.99 at story_threshold + 0.05 = 0.55.
    assert s_curve(0.55, 32, 3) >= 0.99
    by_rows = {o.rows: o for o in banding_options(128, target=0.55, low=0.2)}
    assert by_rows[3].bands == 42 and by_rows[4].recall_at < 0.99 < by_rows[3].recall_at


def test_band_keys_shape_and_properties() -> None:
    rng = np.random.default_rng(0)
    sig = rng.integers(0, 2**32, size=(50, 128), dtype=np.uint32)
    keys = band_keys(sig, 32, 3)
    assert keys.shape == (50, 32) and keys.dtype == np.int64
    np.testing.assert_array_equal(keys, band_keys(sig.copy(), 32, 3))
    # rows default to num_perm // bands
    np.testing.assert_array_equal(band_keys(sig, 32), band_keys(sig, 32, 4))
    # one band's key depends only on that band's values
    other = sig.copy()
    other[:, 3:] = rng.integers(0, 2**32, size=(50, 125), dtype=np.uint32)
    assert np.all(band_keys(other, 32, 3)[:, 0] == keys[:, 0])
    assert not np.any(band_keys(other, 32, 3)[:, 1:] == keys[:, 1:])
    # the same values in different bands give different keys (the band index is hashed in)
    same = np.zeros((1, 6), dtype=np.uint32)
    k = band_keys(same, 2, 3)
    assert k[0, 0] != k[0, 1]
    with pytest.raises(ValueError):
        band_keys(sig, 32, 5)


def test_candidates_equal_datasketch_lsh() -> None:
    # datasketch's MinHashLSH with params=(b, r) as the reference: a query returns every key that
    # shares at least one band slice with the query signature; our pairs must be exactly those.
    params = SignatureParams()
    texts, _ = near_duplicate_corpus(150, seed=11, n_words=80, edit_rates=(0.0, 0.05, 0.1, 0.2, 0.3))
    sig = signatures_from_texts(texts, params)
    ours = {tuple(p) for p in candidate_pairs(band_keys(sig, params.bands, params.rows)).pairs.tolist()}
    lsh = datasketch.MinHashLSH(num_perm=params.num_perm, params=(params.bands, params.rows))
    mhs = [datasketch.MinHash(params.num_perm, seed=params.seed, hashvalues=s, scheme=params.scheme) for s in sig]
    for i, m in enumerate(mhs):
        lsh.insert(i, m)
    theirs = {(min(i, j), max(i, j)) for i, m in enumerate(mhs) for j in lsh.query(m) if j != i}
    assert ours == theirs and len(ours) > 50


def _brute_force(texts: list[str], k: int) -> dict[tuple[int, int], float]:
    sets = [shingle_hashes(t, k) for t in texts]
    return {(i, j): exact_jaccard(sets[i], sets[j]) for i, j in itertools.combinations(range(len(sets)), 2)}


def test_recall_against_brute_force_all_pairs() -> None:
    params = SignatureParams()
    texts, _ = near_duplicate_corpus(300, seed=21, n_words=150, family_size=6,
                                     edit_rates=(0.0, 0.01, 0.02, 0.04, 0.07, 0.1))
    truth = _brute_force(texts, params.shingle_size)
    found = {tuple(p) for p in candidate_pairs(band_keys(signatures_from_texts(texts, params),
                                                          params.bands, params.rows)).pairs.tolist()}
    for floor in (0.55, 0.7):
        true_pairs = [p for p, j in truth.items() if j >= floor]
        assert len(true_pairs) > 100
        recall = sum(p in found for p in true_pairs) / len(true_pairs)
        assert recall >= 0.99, (floor, recall)
    # The miss count is what the S-curve predicts (within a generous Poisson margin).
    true_pairs = [(p, j) for p, j in truth.items() if j >= 0.3]
    expected_misses = sum(1 - float(s_curve(j, params.bands, params.rows)) for _, j in true_pairs)
    misses = sum(p not in found for p, _ in true_pairs)
    assert abs(misses - expected_misses) <= 4 * np.sqrt(expected_misses) + 3
    # Unrelated texts share no shingles, so they are (almost) never candidates.
    assert sum(1 for p in found if truth[p] == 0.0) <= 2


def test_empirical_candidate_rate_follows_s_curve() -> None:
    # P(share a band) for pairs of exact Jaccard s, measured over many pairs, against 1 − (1 − s^r)^b.
    params = SignatureParams()
    rng = np.random.default_rng(8)
    for s_num, union in ((20, 100), (35, 100), (50, 100), (60, 100)):
        sets = []
        for _ in range(300):
            sets += list(set_pair(rng, s_num, union))
        offsets = np.zeros(len(sets) + 1, dtype=np.int64)
        np.cumsum([len(x) for x in sets], out=offsets[1:])
        keys = band_keys(minhash_signatures(np.concatenate(sets), offsets, params), params.bands, params.rows)
        shared = np.any(keys[0::2] == keys[1::2], axis=1)
        p = float(s_curve(s_num / union, params.bands, params.rows))
        sd = np.sqrt(p * (1 - p) / len(shared))
        assert abs(shared.mean() - p) <= 4 * sd + 0.01, (s_num, shared.mean(), p)


def test_exclude_and_bucket_cap() -> None:
    params = SignatureParams()
    texts = ["", "", "", "same text here and there", "same text here and there"] + ["solo words"] * 4
    sig = signatures_from_texts(texts, params)
    keys = band_keys(sig, params.bands, params.rows)
    # Without the mask, the three empty texts would pair up (all their values are equal).
    assert {(0, 1), (0, 2), (1, 2)} <= {tuple(p) for p in candidate_pairs(keys).pairs.tolist()}
    result = candidate_pairs(keys, exclude=empty_rows(sig, params), max_bucket=3)
    assert [tuple(p) for p in result.pairs.tolist()] == [(3, 4)]
    assert result.largest_bucket == 4 and result.oversize_buckets == params.bands
    none = candidate_pairs(keys[:1])
    assert none.pairs.shape == (0, 2)


def test_band_key_matches_documented_spec() -> None:
    # docs/dedupe.md: key_i = chain over [i, v_0 … v_{r−1}] with h₀ = 0x9E3779B97F4A7C15 and
    # h ← fmix64(h XOR x), read as signed 64-bit. Written out with Python integers, independently.
    mask = (1 << 64) - 1

    def fmix(h: int) -> int:
        h ^= h >> 33
        h = (h * 0xFF51AFD7ED558CCD) & mask
        h ^= h >> 33
        h = (h * 0xC4CEB9FE1A85EC53) & mask
        return h ^ (h >> 33)

    rng = np.random.default_rng(4)
    sig = rng.integers(0, 2**32, size=(3, 10), dtype=np.uint32)
    keys = band_keys(sig, 3, 3)
    for d in range(3):
        for i in range(3):
            h = 0x9E3779B97F4A7C15
            for x in [i, *sig[d, i * 3:(i + 1) * 3].tolist()]:
                h = fmix(h ^ x)
            assert int(keys[d, i]) == (h - (1 << 64) if h >= 1 << 63 else h)
