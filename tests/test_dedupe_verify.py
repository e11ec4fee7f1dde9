"""Verification of candidate pairs and the text renderings of the S-curve and similarities."""

from __future__ import annotations

from datetime import date

import numpy as np
import pytest

from linkfold.dedupe import (
    DocFeatures,
    Level,
    Reason,
    SignatureParams,
    Thresholds,
    render_curve,
    render_histogram,
    shingle_hashes,
    signatures_from_texts,
    title_ratio,
    verify_pair,
    verify_pairs,
)
from linkfold.errors import ConfigError
from linkfold.settings import load_settings
from synthetic_texts import edited_copy, invented_vocabulary, random_words

PARAMS = SignatureParams()
T = Thresholds()


def _doc(i: int, words: list[str] | None, outlet: str, *, title: str | None = None,
         published: date | None = None, exact: bool = True) -> DocFeatures:
    text = " ".join(words or [])
    sig = signatures_from_texts([text], PARAMS)[0] if words else None
    return DocFeatures(doc=i, outlet=outlet, words=len(words or []), signature=sig,
                       shingles=shingle_hashes(text, PARAMS.shingle_size) if words and exact else None,
                       title=title, published=published)


@pytest.fixture(scope="module")
def texts() -> dict[str, list[str]]:
    rng = np.random.default_rng(99)
    vocab = invented_vocabulary(5000, rng)
    base = random_words(rng, vocab, 400)
    return {"base": base, "copy": edited_copy(rng, base, 0.005, vocab),
            "rewrite": edited_copy(rng, base, 0.06, vocab), "other": random_words(rng, vocab, 400)}


def test_title_ratio_rapidfuzz_documented_example() -> None:
    # rapidfuzz documentation: fuzz.ratio("this is a test", "this is a test!") ≈ 96.55 (one inserted
    # character in 29: 2·14/29). Our normalisation drops case and punctuation first, so that very pair
    # is 100, and a pair differing by one inserted letter gives the documented value.
    assert title_ratio("This is a test", "this is a test!") == 100.0
    assert title_ratio("This is a test", "this is a tests") == pytest.approx(96.5517, abs=1e-4)
    assert title_ratio("", "x") is None and title_ratio("...", "x") is None and title_ratio(None, "x") is None


def test_same_outlet_near_exact_copy_is_one_article(texts: dict[str, list[str]]) -> None:
    a, b = _doc(1, texts["base"], "herald.example"), _doc(2, texts["copy"], "herald.example")
    v = verify_pair(a, b, thresholds=T)
    assert v is not None and v.level is Level.ARTICLE and v.reason is Reason.NEAR_EXACT_TEXT
    assert v.exact_jaccard is not None and v.exact_jaccard >= 0.9 and v.same_outlet is True
    assert v.strength == v.exact_jaccard


def test_cross_outlet_rewrite_is_one_story_and_same_outlet_rewrite_is_nothing(texts) -> None:
    a, b = _doc(1, texts["base"], "herald.example"), _doc(2, texts["rewrite"], "courier.test")
    v = verify_pair(a, b, thresholds=T)
    assert v is not None and v.level is Level.STORY and v.reason is Reason.SIMILAR_TEXT
    assert 0.5 <= v.exact_jaccard < 0.9
    # The same rewrite inside one outlet is neither a copy nor a story (stories span outlets).
    assert verify_pair(a, _doc(3, texts["rewrite"], "herald.example"), thresholds=T) is None


def test_estimate_used_when_shingles_absent(texts) -> None:
    a = _doc(1, texts["base"], "herald.example", exact=False)
    b = _doc(2, texts["rewrite"], "courier.test", exact=False)
    v = verify_pair(a, b, thresholds=T)
    assert v is not None and v.exact_jaccard is None and v.strength == v.est_jaccard


def test_long_different_texts_are_not_rescued_by_titles(texts) -> None:
    day = date(2031, 5, 4)
    a = _doc(1, texts["base"], "herald.example", title="Bridge opens in Lake Varn", published=day)
    b = _doc(2, texts["other"], "courier.test", title="Bridge opens in Lake Varn", published=day)
    assert verify_pair(a, b, thresholds=T) is None


def test_short_texts_fall_back_to_title_and_date() -> None:
    day = date(2031, 5, 4)
    a = _doc(1, ["teaser", "only"], "herald.example", title="Bridge opens in Lake Varn", published=day)
    b = _doc(2, None, "courier.test", title="Bridge opens in Lake Varn.", published=date(2031, 5, 6))
    v = verify_pair(a, b, thresholds=T)
    assert v is not None and v.level is Level.STORY and v.reason is Reason.TITLE_AND_DATE
    assert v.title_ratio == 100.0 and v.date_gap_days == 2 and v.strength == 1.0
    far = DocFeatures(doc=3, outlet="courier.test", words=0, title=b.title, published=date(2031, 6, 1))
    assert verify_pair(a, far, thresholds=T) is None          # dates too far apart
    undated = DocFeatures(doc=4, outlet="courier.test", words=0, title=b.title)
    assert verify_pair(a, undated, thresholds=T) is None      # a title alone is not enough
    same_outlet = DocFeatures(doc=5, outlet="herald.example", words=0, title=b.title, published=day)
    assert verify_pair(a, same_outlet, thresholds=T) is None  # outlets reuse titles


def test_verify_pairs_matches_verify_pair(texts) -> None:
    docs = [_doc(0, texts["base"], "herald.example"), _doc(1, texts["copy"], "herald.example"),
            _doc(2, texts["rewrite"], "courier.test"), _doc(3, texts["other"], "courier.test"),
            DocFeatures(doc=4, outlet="gazette.test", words=0, title="x")]
    pairs = np.array([(i, j) for i in range(5) for j in range(i + 1, 5)])
    links = verify_pairs(docs, pairs, thresholds=T)
    expected = [(int(i), int(j)) for i, j in pairs if verify_pair(docs[i], docs[j], thresholds=T)]
    assert [(link.a, link.b) for link in links] == expected
    assert {(0, 1), (0, 2), (1, 2)} == set(expected)
    assert verify_pairs(docs, np.empty((0, 2)), thresholds=T) == []


def test_thresholds_from_settings_and_validation() -> None:
    t = Thresholds.from_settings(load_settings(environ={"LINKFOLD_STORY_THRESHOLD": "0.6"}))
    assert t.story == 0.6 and t.article == 0.9 and t.min_words == 50
    with pytest.raises(ConfigError):
        Thresholds(article=0.4, story=0.5)
    with pytest.raises(ConfigError):
        Thresholds(title=120)


def test_renderings() -> None:
    curve = render_curve(20, 5, [0.2, 0.5, 0.8], marks={"story": 0.5})
    lines = curve.splitlines()
    assert lines[0].startswith("LSH S-curve, 20 bands × 5 rows")
    # Mining of Massive Datasets ch. 3, b=20, r=5: 0.006, 0.470, 0.9996 (from memory; rounded there)
    assert "0.0064" in lines[2] and "0.4701" in lines[3] and "← story" in lines[3] and "0.9996" in lines[4]
    hist = render_histogram([0.51, 0.52, 0.97], bins=4)
    assert hist.splitlines()[0] == "verified similarities: 3 pair(s)"
    assert hist.splitlines()[4].split()[:3] == ["0.50", "0.75", "2"]
    assert "0 pair(s)" in render_histogram([])
