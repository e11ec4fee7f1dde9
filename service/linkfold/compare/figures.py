"""The figures of a comparison of datasets, as pure functions over counts (no database).

* **share** of a count: the count over the dataset's total (sightings over the dataset's counted
  sightings; units over the dataset's distinct units, so unit shares of outlets need not sum to one: a
  person sees several outlets);
* **Jaccard index** of the story sets A and B: |A ∩ B| / |A ∪ B| (P. Jaccard, 1901/1912);
* **weighted Jaccard** of the sighting shares p_A(s) = n_A(s) / N_A and p_B(s) = n_B(s) / N_B over every
  story s: Σ_s min(p_A(s), p_B(s)) / Σ_s max(p_A(s), p_B(s)) — the Ruzicka similarity (M. Ruzicka, 1958),
  also called the weighted Jaccard index (e.g. S. Ioffe, "Improved Consistent Sampling, Weighted Minhash
  and L1 Sketching", ICDM 2010, which defines it as Σ min / Σ max over non-negative weights). It is 1 when
  both datasets spread their sightings over the same stories in the same proportions and 0 when they share
  none; a story seen once in a large dataset weighs little, unlike in the plain index.

:class:`Overlap` accumulates them in one pass over per-story counts, in memory independent of the number of
stories (pairs of datasets, and top lists of fixed length).
"""

from __future__ import annotations

import heapq
from collections.abc import Sequence
from dataclasses import dataclass, field
from itertools import combinations
from typing import Any


def share(count: int | None, total: int) -> float | None:
    """``count / total``; None when either is missing or the total is zero."""
    if count is None or not total:
        return None
    return count / total


def jaccard(a: set[Any], b: set[Any]) -> float | None:
    """|A ∩ B| / |A ∪ B|; None for two empty sets."""
    union = len(a | b)
    return len(a & b) / union if union else None


def weighted_jaccard(x: dict[Any, float], y: dict[Any, float]) -> float | None:
    """Σ min(x_k, y_k) / Σ max(x_k, y_k) over every key of either (a missing key weighs 0)."""
    keys = x.keys() | y.keys()
    hi = sum(max(x.get(k, 0.0), y.get(k, 0.0)) for k in keys)
    return sum(min(x.get(k, 0.0), y.get(k, 0.0)) for k in keys) / hi if hi else None


class _Desc:
    """An ID that sorts in reverse, so that among equal counts the smaller ID ranks higher."""

    __slots__ = ("value",)

    def __init__(self, value: str) -> None:
        self.value = value

    def __lt__(self, other: _Desc) -> bool:
        return self.value > other.value

    def __gt__(self, other: _Desc) -> bool:
        return self.value < other.value

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _Desc) and self.value == other.value

    def __hash__(self) -> int:
        return hash(self.value)


@dataclass
class _Pair:
    both: int = 0
    either: int = 0
    low: float = 0.0
    high: float = 0.0


@dataclass
class Overlap:
    """Overlap figures over a stream of (story ID, sightings per dataset), with each dataset's total of
    sightings known beforehand (the shares' denominators)."""

    totals: Sequence[int]
    top: int = 10
    stories: list[int] = field(init=False)
    only: list[int] = field(init=False)
    _pairs: dict[tuple[int, int], _Pair] = field(init=False)
    _top: list[list[tuple[int, _Desc, Any]]] = field(init=False)
    _only: list[list[tuple[int, _Desc, Any]]] = field(init=False)

    def __post_init__(self) -> None:
        k = len(self.totals)
        self.stories, self.only = [0] * k, [0] * k
        self._pairs = {pair: _Pair() for pair in combinations(range(k), 2)}
        self._top, self._only = [[] for _ in range(k)], [[] for _ in range(k)]

    @staticmethod
    def _keep(heap: list[tuple[int, _Desc, Any]], size: int, count: int, story: str, extra: Any) -> None:
        # Most sightings first, ties to the smaller ID: a min-heap on (count, reversed ID order).
        item = (count, _Desc(story), extra)
        if len(heap) < size:
            heapq.heappush(heap, item)
        elif (count, item[1]) > heap[0][:2]:
            heapq.heapreplace(heap, item)

    def add(self, story: str, counts: Sequence[int], extra: Sequence[Any] = ()) -> None:
        seen = [i for i, n in enumerate(counts) if n]
        for i in seen:
            self.stories[i] += 1
            self._keep(self._top[i], self.top, counts[i], story, extra[i] if extra else None)
        if len(seen) == 1:
            i = seen[0]
            self.only[i] += 1
            self._keep(self._only[i], self.top, counts[i], story, extra[i] if extra else None)
        for (a, b), p in self._pairs.items():
            na, nb = counts[a], counts[b]
            if na or nb:
                p.either += 1
                p.both += bool(na and nb)
                sa_, sb_ = (na / self.totals[a] if self.totals[a] else 0.0), (nb / self.totals[b] if self.totals[b] else 0.0)
                p.low += min(sa_, sb_)
                p.high += max(sa_, sb_)

    def pairs(self) -> list[dict[str, Any]]:
        """Per pair of datasets (by position): both, either, ``jaccard``, ``weighted_jaccard``."""
        return [{"a": a, "b": b, "both": p.both, "either": p.either,
                 "jaccard": p.both / p.either if p.either else None,
                 "weighted_jaccard": p.low / p.high if p.high else None} for (a, b), p in self._pairs.items()]

    def top_of(self, i: int, *, only: bool = False) -> list[tuple[str, int, Any]]:
        """(story, sightings, extra) of dataset ``i``'s top list, most sightings first."""
        heap = self._only[i] if only else self._top[i]
        return [(d.value, n, extra) for n, d, extra in sorted(heap, reverse=True)]


__all__ = ["Overlap", "jaccard", "share", "weighted_jaccard"]
