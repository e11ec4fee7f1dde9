"""The pure pieces together, as the storage stage will chain them (behaviour test on invented data).

text → signatures → band keys → candidates → verification → article clusters and IDs → story
clusters and IDs; then a second run with a person's "not the same" decision.
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from linkfold.dedupe import (
    DocFeatures,
    Edge,
    EventKind,
    IdState,
    Level,
    SignatureParams,
    Thresholds,
    assign_ids,
    band_keys,
    candidate_pairs,
    cluster,
    empty_rows,
    shingle_hashes,
    signatures_from_texts,
    verify_pairs,
)
from synthetic_texts import edited_copy, invented_vocabulary, random_words

OUTLETS = ["herald.example", "courier.test", "gazette.example", "ledger.test"]


def _corpus(n_families: int, seed: int):
    """Each family: an original, a near-exact same-outlet copy, and rewrites on two other outlets."""
    rng = np.random.default_rng(seed)
    vocab = invented_vocabulary(8000, rng)
    texts, outlets, family = [], [], []
    for f in range(n_families):
        home = f % len(OUTLETS)
        base = random_words(rng, vocab, int(rng.integers(200, 400)))
        variants = [(base, home), (edited_copy(rng, base, 0.004, vocab), home),
                    (edited_copy(rng, base, 0.02, vocab), (home + 1) % len(OUTLETS)),
                    (edited_copy(rng, base, 0.04, vocab), (home + 2) % len(OUTLETS))]
        for words, outlet in variants:
            texts.append(" ".join(words))
            outlets.append(OUTLETS[outlet])
            family.append(f)
    texts.append("")              # a page whose text could not be extracted
    outlets.append(OUTLETS[0])
    family.append(-1)
    return texts, outlets, np.array(family)


def _run(texts, outlets, article_state, story_state, *, cannot_articles=()):
    params, thresholds = SignatureParams(), Thresholds()
    sig = signatures_from_texts(texts, params)
    found = candidate_pairs(band_keys(sig, params.bands, params.rows), exclude=empty_rows(sig, params))
    docs = [DocFeatures(doc=i, outlet=outlets[i], words=len(t.split()),
                        signature=sig[i] if t else None,
                        shingles=shingle_hashes(t, params.shingle_size) if t else None)
            for i, t in enumerate(texts)]
    links = verify_pairs(docs, found.pairs, thresholds=thresholds)
    keys = [f"k{i:04d}" for i in range(len(texts))]   # stand-ins for url keys
    article_edges = [Edge(keys[link.a], keys[link.b], link.verdict.strength, link.verdict.reason.value)
                     for link in links if link.verdict.level is Level.ARTICLE]
    articles = cluster(keys, article_edges)
    a_update = assign_ids(article_state, articles.components, prefix="a")
    article_of = a_update.state.assigned
    story_edges = [Edge(article_of[keys[link.a]], article_of[keys[link.b]], link.verdict.strength)
                   for link in links if link.verdict.level is Level.STORY]
    live_articles = sorted(set(article_of.values()))
    stories = cluster(live_articles, story_edges, cannot_link=cannot_articles)
    s_update = assign_ids(story_state, stories.components, prefix="s")
    return keys, a_update, s_update, stories


def test_families_become_stories_and_near_exact_copies_one_article() -> None:
    texts, outlets, family = _corpus(30, seed=5)
    keys, a_up, s_up, _ = _run(texts, outlets, IdState(), IdState())
    article_of, story_of = a_up.state.assigned, s_up.state.assigned
    by_family: dict[int, set[str]] = defaultdict(set)
    for i, f in enumerate(family):
        if f >= 0:
            by_family[int(f)].add(story_of[article_of[keys[i]]])
            # the original and its near-exact same-outlet copy are one article; rewrites are not
            assert (article_of[keys[i]] == article_of[keys[i - i % 4]]) == (i % 4 in (0, 1))
    assert all(len(s) == 1 for s in by_family.values())
    assert len({next(iter(s)) for s in by_family.values()}) == 30
    empty_story = story_of[article_of[keys[-1]]]
    assert all(empty_story not in s for s in by_family.values())

    # Second run, same data, plus a person separating family 0's rewrite on another outlet from the
    # rest: only that story splits, the part with the founder keeps its ID, everything else is quiet.
    first, rewrite = article_of[keys[0]], article_of[keys[3]]
    others = [article_of[keys[1]], article_of[keys[2]]]
    _, a_up2, s_up2, stories2 = _run(texts, outlets, a_up.state, s_up.state,
                                     cannot_articles=[(first, rewrite)])
    assert a_up2.events == [] and a_up2.changes == []
    old_story = story_of[first]
    assert s_up2.state.assigned[first] == old_story == s_up2.state.assigned[others[0]]
    new_story = s_up2.state.assigned[rewrite]
    assert new_story != old_story
    assert [(e.kind, e.id, e.other) for e in s_up2.events] == [
        (EventKind.MINTED, new_story, None), (EventKind.SPLIT_FROM, new_story, old_story)]
    assert [c.member for c in s_up2.changes] == [rewrite]
    assert stories2.refused  # the blocked links are reported, not dropped silently
