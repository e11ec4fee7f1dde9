"""Two texts side by side, the words that only one of them has marked.

The comparison is word by word (difflib's longest-matching-block alignment), so a changed word, an
inserted sentence or a dropped paragraph is marked where it sits, and the whitespace of each text,
paragraph breaks included, is kept as it was.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass

_TOKEN = re.compile(r"\S+\s*|\s+")
# Alignment time grows with the product of the lengths in the worst case: past this many words per text,
# the rest is shown unmarked, and the page says so.
MAX_WORDS = 20000


@dataclass(frozen=True)
class Segment:
    text: str
    marked: bool


@dataclass(frozen=True)
class SideBySide:
    left: list[Segment]
    right: list[Segment]
    left_only: int   # words only the left text has
    right_only: int
    truncated: bool


def _tokens(text: str) -> list[str]:
    return _TOKEN.findall(text)


def _merge(tokens: list[str], marks: list[bool]) -> list[Segment]:
    out: list[Segment] = []
    for tok, mark in zip(tokens, marks, strict=True):
        if out and out[-1].marked == mark:
            out[-1] = Segment(out[-1].text + tok, mark)
        else:
            out.append(Segment(tok, mark))
    return out


def side_by_side(left: str, right: str, *, max_words: int = MAX_WORDS) -> SideBySide:
    ta, tb = _tokens(left), _tokens(right)
    truncated = len(ta) > max_words or len(tb) > max_words
    head_a, head_b = ta[:max_words], tb[:max_words]
    wa = [tok.strip().casefold() for tok in head_a]
    wb = [tok.strip().casefold() for tok in head_b]
    marks_a = [False] * len(ta)
    marks_b = [False] * len(tb)
    matcher = difflib.SequenceMatcher(None, wa, wb, autojunk=False)
    for tag, i1, i2, j1, j2 in matcher.get_opcodes():
        if tag == "equal":
            continue
        for i in range(i1, i2):
            marks_a[i] = bool(wa[i])
        for j in range(j1, j2):
            marks_b[j] = bool(wb[j])
    return SideBySide(_merge(ta, marks_a), _merge(tb, marks_b), sum(marks_a), sum(marks_b), truncated)
