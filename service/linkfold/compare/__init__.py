"""Datasets side by side: per-outlet and per-attribute shares of sightings and units, the overlap of their
stories (count, Jaccard index, weighted Jaccard of sighting shares), top stories and those seen in only
one. ``compare_datasets`` gives a :class:`Comparison`; the figures' definitions are in figures.py and
docs/corpus.md.
"""

from __future__ import annotations

from .figures import Overlap, jaccard, share, weighted_jaccard
from .report import COMPARE_FORMATS, DEFAULT_TOP, NOT_LISTED, Comparison, compare_datasets

__all__ = [
    "COMPARE_FORMATS",
    "DEFAULT_TOP",
    "NOT_LISTED",
    "Comparison",
    "Overlap",
    "compare_datasets",
    "jaccard",
    "share",
    "weighted_jaccard",
]
