"""Where two texts differ, word by word: one alignment, two views of it.

The comparison is word by word (difflib's longest-matching-block alignment, with its junk heuristic off
so long texts are aligned as faithfully as short ones). :func:`side_by_side` marks, in both texts whole,
the words only one of them has, keeping each text's whitespace (paragraph breaks included) as it was: the
comparison page shows it. :func:`differing_passages` gives the places where they differ, each with a few
words of context: the cluster report shows it. Pure: no database, no network.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

_TOKEN = re.compile(r"\S+\s*|\s+")
# Alignment time grows with the product of the lengths in the worst case: past this many words per text,
# the rest is shown unmarked, and the page says so.
MAX_WORDS = 20000


def changed_spans(a: Sequence[str], b: Sequence[str]) -> Iterator[tuple[int, int, int, int]]:
    """``(i1, i2, j1, j2)`` of every span where word list ``b`` differs from ``a`` (``a[i1:i2]`` was
    replaced by ``b[j1:j2]``; an empty side is an insertion or a deletion), in text order."""
    matcher = difflib.SequenceMatcher(None, a, b, autojunk=False)
    for tag, i1, i2, j1, j2 in matcher.get_opcodes():
        if tag != "equal":
            yield i1, i2, j1, j2


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
    """Both texts whole, cut into segments that are marked where only one text has the words (compared
    without regard to case)."""
    ta, tb = _tokens(left), _tokens(right)
    truncated = len(ta) > max_words or len(tb) > max_words
    wa = [tok.strip().casefold() for tok in ta[:max_words]]
    wb = [tok.strip().casefold() for tok in tb[:max_words]]
    marks_a = [False] * len(ta)
    marks_b = [False] * len(tb)
    for i1, i2, j1, j2 in changed_spans(wa, wb):
        for i in range(i1, i2):
            marks_a[i] = bool(wa[i])
        for j in range(j1, j2):
            marks_b[j] = bool(wb[j])
    return SideBySide(_merge(ta, marks_a), _merge(tb, marks_b), sum(marks_a), sum(marks_b), truncated)


def _clip(words: Sequence[str], max_words: int) -> str:
    return " ".join(words[:max_words]) + (" …" if len(words) > max_words else "")


def differing_passages(a: str, b: str, *, context: int = 4, max_passages: int = 6,
                       max_words: int = 40) -> list[tuple[str, str]]:
    """Word-level passages where ``b`` differs from ``a`` (compared as written), each with ``context``
    words either side and the differing words in ``[`` ``]``; at most ``max_passages``, each side clipped
    to ``max_words`` words."""
    wa, wb = a.split(), b.split()
    out: list[tuple[str, str]] = []
    for i1, i2, j1, j2 in changed_spans(wa, wb):
        out.append((_clip([*wa[max(0, i1 - context):i1], "[", *wa[i1:i2], "]", *wa[i2:i2 + context]], max_words),
                    _clip([*wb[max(0, j1 - context):j1], "[", *wb[j1:j2], "]", *wb[j2:j2 + context]], max_words)))
        if len(out) >= max_passages:
            break
    return out


__all__ = ["MAX_WORDS", "Segment", "SideBySide", "changed_spans", "differing_passages", "side_by_side"]
