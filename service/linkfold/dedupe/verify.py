"""Verification of candidate pairs: is this pair the same article, the same story, or neither?

LSH candidates include false positives by design, so every candidate is checked here. The rule
(docs/dedupe.md, "Verification"):

* Both texts long enough (``min_words``): the text decides. The similarity is the exact Jaccard of
  the shingle sets when both are at hand, else the MinHash estimate. Same outlet and similarity ≥
  ``article`` → one article (a near-exact copy); different outlets and similarity ≥ ``story`` → one
  story. Below that, nothing else can rescue the pair: a title match between two long, different
  texts is two articles on one topic.
* Otherwise (a short or missing text on either side): titles decide, with dates as the check.
  Titles of at least ``MIN_TITLE_WORDS`` words, at least ``title`` similar (rapidfuzz ratio on
  normalised titles), and both publication dates known and at most ``max_date_gap_days`` apart → one
  story, across outlets only. Same-outlet
  pairs are never joined on titles: outlets reuse titles (daily columns, live pages), and articles
  within an outlet are joined by URL evidence (redirects, declared canonicals) instead.
"""

from __future__ import annotations

import enum
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date

import numpy as np
from rapidfuzz import fuzz

from ..errors import ConfigError
from ..progress import SILENT, Progress
from ..settings import Settings
from .minhash import estimate_jaccard
from .shingle import exact_jaccard, normalise_words
from .titles import MIN_TITLE_WORDS, title_word_count


class Level(enum.StrEnum):
    ARTICLE = "article"
    STORY = "story"


class Reason(enum.StrEnum):
    NEAR_EXACT_TEXT = "near_exact_text"
    SIMILAR_TEXT = "similar_text"
    TITLE_AND_DATE = "title_and_date"


@dataclass(frozen=True)
class Thresholds:
    article: float = 0.9
    story: float = 0.5
    title: float = 90.0
    max_date_gap_days: int = 3
    min_words: int = 50

    def __post_init__(self) -> None:
        if not 0 <= self.story <= self.article <= 1:
            raise ConfigError("thresholds need 0 ≤ story ≤ article ≤ 1")
        if not 0 <= self.title <= 100:
            raise ConfigError("title threshold is a rapidfuzz ratio in [0, 100]")
        if self.max_date_gap_days < 0 or self.min_words < 1:
            raise ConfigError("max_date_gap_days must be ≥ 0 and min_words ≥ 1")

    @classmethod
    def from_settings(cls, settings: Settings) -> Thresholds:
        return cls(article=settings.article_threshold, story=settings.story_threshold,
                   title=settings.title_threshold, max_date_gap_days=settings.max_date_gap_days,
                   min_words=settings.min_words)


@dataclass(frozen=True)
class DocFeatures:
    """What verification needs of one document; nothing more is kept.

    ``shingles`` is the sorted distinct shingle-hash array (for exact Jaccard) or ``None``;
    ``signature`` is ``None`` when the document has no text.
    """

    doc: int
    outlet: str | None
    words: int
    signature: np.ndarray | None = None
    shingles: np.ndarray | None = None
    title: str | None = None
    published: date | None = None


@dataclass(frozen=True)
class Verdict:
    level: Level
    reason: Reason
    est_jaccard: float | None
    exact_jaccard: float | None
    title_ratio: float | None
    date_gap_days: int | None
    same_outlet: bool | None

    @property
    def strength(self) -> float:
        """The score that orders edges for clustering: the deciding similarity on a 0–1 scale (for the
        title rule the title ratio, although a short text's Jaccard is known too)."""
        if self.reason is Reason.TITLE_AND_DATE:
            return (self.title_ratio or 0.0) / 100.0
        if self.exact_jaccard is not None:
            return self.exact_jaccard
        return self.est_jaccard if self.est_jaccard is not None else 0.0


@dataclass(frozen=True)
class SimilarityLink:
    a: int
    b: int
    verdict: Verdict


def normalise_title(title: str) -> str:
    return " ".join(normalise_words(title))


def title_ratio(a: str | None, b: str | None) -> float | None:
    if not a or not b:
        return None
    na, nb = normalise_title(a), normalise_title(b)
    if not na or not nb:
        return None
    return float(fuzz.ratio(na, nb))


def verify_pair(a: DocFeatures, b: DocFeatures, *, thresholds: Thresholds) -> Verdict | None:
    """The verdict on one candidate pair, or ``None`` when the evidence does not reach a threshold."""
    same_outlet = None if a.outlet is None or b.outlet is None else a.outlet == b.outlet
    gap = None if a.published is None or b.published is None else abs((a.published - b.published).days)
    est = None
    if a.signature is not None and b.signature is not None:
        est = float(np.count_nonzero(a.signature == b.signature)) / len(a.signature)
    exact = None
    if a.shingles is not None and b.shingles is not None:
        exact = exact_jaccard(a.shingles, b.shingles)
    long_texts = (min(a.words, b.words) >= thresholds.min_words and est is not None)
    if long_texts:
        score = exact if exact is not None else est
        assert score is not None
        if same_outlet and score >= thresholds.article:
            return Verdict(Level.ARTICLE, Reason.NEAR_EXACT_TEXT, est, exact, None, gap, same_outlet)
        if same_outlet is False and score >= thresholds.story:
            return Verdict(Level.STORY, Reason.SIMILAR_TEXT, est, exact, None, gap, same_outlet)
        return None
    if same_outlet is not False:
        return None
    ratio = title_ratio(a.title, b.title)
    if ratio is None or ratio < thresholds.title or gap is None or gap > thresholds.max_date_gap_days:
        return None
    # A title of a few words is not evidence: "Weather" repeats on every outlet every day.
    if min(title_word_count(a.title), title_word_count(b.title)) < MIN_TITLE_WORDS:
        return None
    return Verdict(Level.STORY, Reason.TITLE_AND_DATE, est, exact, ratio, gap, same_outlet)


def verify_pairs(docs: Sequence[DocFeatures], pairs: np.ndarray, *, thresholds: Thresholds,
                 progress: Progress = SILENT) -> list[SimilarityLink]:
    """Verify many candidate pairs (row indices into ``docs``); accepted pairs as links, in input order.

    A vectorised screen first drops pairs of two long texts whose MinHash estimate is far below the
    story threshold (more than six standard errors at the worst case J = 0.5, i.e. 3/sqrt(k)), so that
    exact Jaccard and the per-pair rule run only where they can change the answer.
    """
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    links: list[SimilarityLink] = []
    progress.start("verifying", len(pairs))
    if not len(pairs):
        progress.finish()
        return links
    signed = [d.signature for d in docs if d.signature is not None]
    screen = np.ones(len(pairs), dtype=bool)
    if signed:
        # Rows of documents without a signature are zeros; the mask below keeps them out of the screen.
        sigs = np.zeros((len(docs), len(signed[0])), dtype=signed[0].dtype)
        has_sig = np.zeros(len(docs), dtype=bool)
        for row, d in enumerate(docs):
            if d.signature is not None:
                sigs[row] = d.signature
                has_sig[row] = True
        k = sigs.shape[1]
        words = np.array([d.words for d in docs])
        est = estimate_jaccard(sigs, pairs)
        both_long = (has_sig[pairs[:, 0]] & has_sig[pairs[:, 1]]
                     & (np.minimum(words[pairs[:, 0]], words[pairs[:, 1]]) >= thresholds.min_words))
        screen = ~both_long | (est >= thresholds.story - 3.0 / np.sqrt(k))
    for idx in range(len(pairs)):
        if screen[idx]:
            i, j = int(pairs[idx, 0]), int(pairs[idx, 1])
            verdict = verify_pair(docs[i], docs[j], thresholds=thresholds)
            if verdict is not None:
                links.append(SimilarityLink(docs[i].doc, docs[j].doc, verdict))
        if idx % 4096 == 4095:
            progress.advance(4096)
    progress.advance(len(pairs) % 4096)
    progress.finish()
    return links
