"""MinHash signatures: equal to the reference library, accurate as the theory says, stored losslessly."""

from __future__ import annotations

import datasketch
import numpy as np
import pytest

import linkfold.dedupe.minhash as minhash_module
from linkfold.dedupe import (
    SignatureParams,
    batch_shingle_hashes,
    empty_rows,
    estimate_jaccard,
    minhash_signatures,
    shingle_hashes,
    signature_from_bytes,
    signature_to_bytes,
    signatures_from_texts,
)
from linkfold.errors import ConfigError, SignatureError
from linkfold.settings import load_settings
from synthetic_texts import near_duplicate_corpus, set_pair


def _csr(sets: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    offsets = np.zeros(len(sets) + 1, dtype=np.int64)
    np.cumsum([len(s) for s in sets], out=offsets[1:])
    dtype = sets[0].dtype if sets else np.uint32
    return (np.concatenate(sets) if sets else np.empty(0, dtype)), offsets


def _reference(values: np.ndarray, params: SignatureParams) -> np.ndarray:
    # datasketch 2.x as the reference library: the integer shingle hashes go in through its hashfunc
    # hook (identity), so both sides permute exactly the same inputs.
    m = datasketch.MinHash(num_perm=params.num_perm, seed=params.seed, scheme=params.scheme, hashfunc=int)
    m.update_batch(values.tolist())
    return m.hashvalues


@pytest.mark.parametrize("scheme", ["affine32", "affine64"])
@pytest.mark.parametrize(("num_perm", "seed"), [(128, 1), (64, 7), (256, 12345), (1, 0)])
def test_signatures_equal_datasketch(scheme: str, num_perm: int, seed: int) -> None:
    params = SignatureParams(scheme=scheme, num_perm=num_perm, seed=seed, bands=1, rows=1)
    rng = np.random.default_rng(seed)
    dtype = np.uint32 if params.width == 32 else np.uint64
    sizes = [0, 1, 2, 17, 300, 0, 5000, 1]
    sets = [rng.integers(0, np.iinfo(dtype).max, size=n, dtype=dtype, endpoint=True) for n in sizes]
    values, offsets = _csr(sets)
    sig = minhash_signatures(values, offsets, params)
    assert sig.dtype == dtype and sig.shape == (len(sizes), num_perm)
    for i, s in enumerate(sets):
        if len(s):
            np.testing.assert_array_equal(sig[i], _reference(s, params))
        else:
            # an empty datasketch MinHash keeps its initial values, 2^w − 1 everywhere
            np.testing.assert_array_equal(sig[i], datasketch.MinHash(num_perm, seed=seed, scheme=scheme).hashvalues)


def test_document_cut_by_chunk_boundary_equals_datasketch(monkeypatch: pytest.MonkeyPatch) -> None:
    # One document far larger than a chunk, between small ones, so chunk edges fall inside it.
    monkeypatch.setattr(minhash_module, "CHUNK_VALUES", 1000)
    params = SignatureParams()
    rng = np.random.default_rng(3)
    sets = [rng.integers(0, 2**32, size=n, dtype=np.uint32) for n in (10, 2123, 7, 0, 1000, 1)]
    sig = minhash_signatures(*_csr(sets), params)
    for i, s in enumerate(sets):
        if len(s):
            np.testing.assert_array_equal(sig[i], _reference(s, params))
    assert np.all(sig[3] == 2**32 - 1)


def test_from_text_equals_datasketch_given_our_shingle_hashes() -> None:
    params = SignatureParams()
    texts, _ = near_duplicate_corpus(40, seed=5, n_words=120)
    texts += ["", "one", "only four short words"]
    sig = signatures_from_texts(texts, params, batch_size=7)
    for i, text in enumerate(texts):
        hashes = shingle_hashes(text, params.shingle_size)
        if len(hashes):
            np.testing.assert_array_equal(sig[i], _reference(hashes, params))
    assert empty_rows(sig, params).tolist() == [False] * 40 + [True, False, False]


def test_batch_shingles_repeat_within_document_do_not_matter() -> None:
    params = SignatureParams()
    text = "na na na na na na na na batman " * 20
    values, offsets = batch_shingle_hashes([text], params.shingle_size)
    assert len(values) > len(np.unique(values))
    np.testing.assert_array_equal(minhash_signatures(values, offsets, params)[0],
                                  _reference(np.unique(values), params))


def test_estimate_within_standard_error() -> None:
    # Broder (1997): the MinHash estimate is unbiased with standard error sqrt(J(1 − J)/k). Over many
    # pairs the standardised errors should look like a standard normal: mean ≈ 0, sd ≈ 1, and about
    # 95% within ±2 (checked loosely: ≥ 90%) — the affine scheme is not provably min-wise independent,
    # so this is the empirical check datasketch's own notes ask for.
    params = SignatureParams()
    rng = np.random.default_rng(2024)
    k = params.num_perm
    z, truth, est_ref = [], [], []
    sets = []
    for _ in range(400):
        union = int(rng.integers(50, 2000))
        inter = int(rng.integers(1, union))
        a, b = set_pair(rng, inter, union)
        sets += [a, b]
        truth.append(inter / union)
    sig = minhash_signatures(*_csr(sets), params)
    pairs = np.arange(len(sets)).reshape(-1, 2)
    est = estimate_jaccard(sig, pairs)
    for (i, j), j_true, e in zip(pairs, truth, est, strict=True):
        z.append((e - j_true) / np.sqrt(j_true * (1 - j_true) / k))
        ma = datasketch.MinHash(k, seed=1, hashvalues=sig[i], scheme="affine32")
        mb = datasketch.MinHash(k, seed=1, hashvalues=sig[j], scheme="affine32")
        est_ref.append(ma.jaccard(mb))
    z_arr = np.array(z)
    assert abs(z_arr.mean()) < 0.15
    assert 0.8 < z_arr.std() < 1.2
    assert np.mean(np.abs(z_arr) <= 2) >= 0.90
    # and our estimator is datasketch's estimator
    np.testing.assert_allclose(est, est_ref)


def test_bytes_round_trip_and_layout() -> None:
    for scheme in ("affine32", "affine64"):
        params = SignatureParams(scheme=scheme)
        sig = signatures_from_texts(["alpha beta gamma delta epsilon zeta eta"], params)[0]
        data = signature_to_bytes(sig, params)
        assert len(data) == params.num_perm * params.width // 8
        # little-endian fixed width: the first value is the first width/8 bytes
        assert int.from_bytes(data[: params.width // 8], "little") == int(sig[0])
        back = signature_from_bytes(data, params)
        np.testing.assert_array_equal(back, sig)
        assert back.dtype == params.dtype and back.flags.writeable
    with pytest.raises(SignatureError, match="needs 512"):
        signature_from_bytes(b"\0" * 100, SignatureParams())
    with pytest.raises(SignatureError, match="shape"):
        signature_to_bytes(np.zeros(3, np.uint32), SignatureParams())


def test_params_token_round_trip_and_errors() -> None:
    params = SignatureParams(shingle_size=4, num_perm=96, seed=9, scheme="affine64", bands=32, rows=3)
    assert str(params) == "lfsig1:hash=lfw1:shingle=4:scheme=affine64:perm=96:seed=9:bands=32x3"
    assert SignatureParams.parse(str(params)) == params
    assert SignatureParams.parse(params.signature_token).signature_token == params.signature_token
    with pytest.raises(SignatureError):
        SignatureParams.parse("minhash 128")
    with pytest.raises(SignatureError, match="exceeds"):
        SignatureParams.parse("lfsig1:hash=lfw1:shingle=5:scheme=affine32:perm=8:seed=1:bands=9x1")
    with pytest.raises(ConfigError, match="biased"):
        SignatureParams(scheme="legacy")
    with pytest.raises(ConfigError, match="exceeds"):
        SignatureParams(num_perm=64, bands=32, rows=3)
    with pytest.raises(ConfigError, match="seed"):
        SignatureParams(seed=-1)


def test_params_from_default_settings() -> None:
    params = SignatureParams.from_settings(load_settings(environ={}))
    assert (params.num_perm, params.bands, params.rows, params.shingle_size) == (128, 32, 3, 5)
    with pytest.raises(ConfigError, match="exceeds"):
        load_settings(environ={"LINKFOLD_LSH_BANDS": "64"})


def test_hashes_too_wide_for_scheme_are_refused() -> None:
    with pytest.raises(ValueError, match="32-bit"):
        minhash_signatures(np.array([2**40], dtype=np.uint64), np.array([0, 1]), SignatureParams())
