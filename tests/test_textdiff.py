"""The one word diff (dedupe/textdiff.py) behind the comparison page and the cluster report."""

from __future__ import annotations

import difflib

from linkfold.dedupe.textdiff import changed_spans, differing_passages, side_by_side


def test_changed_spans_agree_with_the_reference_alignment():
    # Python's difflib (the reference library) on the worked example of its documentation's
    # SequenceMatcher.get_opcodes: "qabxcd" against "abycdf" (from the library docs, checked here by
    # asking difflib itself rather than from memory).
    a, b = list("qabxcd"), list("abycdf")
    expected = [(i1, i2, j1, j2) for tag, i1, i2, j1, j2 in
                difflib.SequenceMatcher(None, a, b, autojunk=False).get_opcodes() if tag != "equal"]
    assert list(changed_spans(a, b)) == expected == [(0, 1, 0, 0), (3, 4, 2, 3), (6, 6, 5, 6)]


def test_differing_passages_bracket_the_changed_words_with_context():
    a = "the council met on monday and voted to close the old bridge for repairs"
    b = "the council met on tuesday and voted to close the old bridge for good"
    assert differing_passages(a, b, context=2) == [
        ("met on [ monday ] and voted", "met on [ tuesday ] and voted"),
        ("bridge for [ repairs ]", "bridge for [ good ]"),
    ]
    assert differing_passages(a, a) == []
    assert len(differing_passages(a, b, max_passages=1)) == 1


def test_differing_passages_clip_long_passages():
    a = " ".join(f"w{i}" for i in range(100))
    left, right = differing_passages(a, "", max_words=10)[0]
    assert left.endswith(" …") and len(left.split()) == 11 and right == "[ ]"


def test_both_views_mark_the_same_words():
    # One alignment under both: the words side_by_side marks are the words differing_passages brackets
    # (texts without case differences, where the two comparisons agree by construction).
    a = "a tide barrier vote passed late on the night\n\nthe council met"
    b = "a tide barrier vote failed late on the night\n\nthe council met again today"
    view = side_by_side(a, b)
    marked_left = " ".join(s.text for s in view.left if s.marked).split()
    marked_right = " ".join(s.text for s in view.right if s.marked).split()
    def inside(passage: str) -> list[str]:
        words = passage.split()
        return words[words.index("[") + 1:words.index("]")]

    bracketed = [(inside(lf), inside(rt)) for lf, rt in differing_passages(a, b, context=0)]
    assert marked_left == [w for lf, _ in bracketed for w in lf] == ["passed"]
    assert marked_right == [w for _, rt in bracketed for w in rt] == ["failed", "again", "today"]
