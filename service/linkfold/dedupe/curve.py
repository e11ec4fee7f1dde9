"""The banding S-curve and plain-text renderings of it and of verified similarities.

For b bands of r rows, a pair with Jaccard similarity s shares at least one band with probability
1 − (1 − s^r)^b (Leskovec, Rajaraman & Ullman, Mining of Massive Datasets, §3.4.2).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

DEFAULT_POINTS = tuple(round(x, 2) for x in np.arange(0.05, 1.0001, 0.05))


def s_curve(s: float | np.ndarray, bands: int, rows: int) -> np.ndarray:
    """Probability that a pair of Jaccard similarity ``s`` becomes a candidate; vectorised over ``s``."""
    s = np.asarray(s, dtype=np.float64)
    if np.any((s < 0) | (s > 1)):
        raise ValueError("similarities must lie in [0, 1]")
    # -expm1(b·log1p(-s^r)) is 1 − (1 − s^r)^b without the cancellation that loses digits near 0.
    with np.errstate(divide="ignore"):
        return -np.expm1(bands * np.log1p(-np.power(s, rows)))


def threshold_point(bands: int, rows: int) -> float:
    """(1/b)^(1/r): roughly where the curve is steepest (MMDS §3.4.3)."""
    return (1.0 / bands) ** (1.0 / rows)


@dataclass(frozen=True)
class BandingOption:
    bands: int
    rows: int
    recall_at: float       # P(candidate) at the similarity the recall target is set for
    false_rate_at: float   # P(candidate) at a low similarity that should rarely become a candidate


def banding_options(num_perm: int, *, target: float, low: float) -> list[BandingOption]:
    """Every (b, r) with b·r ≤ num_perm and the best b for each r, scored at ``target`` and ``low``.

    For a fixed r more bands only raise the curve, so the useful choices are one per r: the largest b
    that fits. Used to justify the defaults in docs/dedupe.md and by ``linkfold thresholds``.
    """
    options = []
    for rows in range(1, num_perm + 1):
        bands = num_perm // rows
        options.append(BandingOption(bands, rows, float(s_curve(target, bands, rows)),
                                     float(s_curve(low, bands, rows))))
    return options


def render_curve(bands: int, rows: int, points: Sequence[float] = DEFAULT_POINTS, *,
                 marks: dict[str, float] | None = None, width: int = 40) -> str:
    """A text table of the S-curve with a bar per row; ``marks`` labels thresholds (name → similarity)."""
    marks = marks or {}
    probs = s_curve(np.asarray(points), bands, rows)
    lines = [f"LSH S-curve, {bands} bands × {rows} rows (steepest near s ≈ {threshold_point(bands, rows):.3f})",
             f"{'jaccard':>8}  {'P(candidate)':>12}"]
    for s, p in zip(points, probs, strict=True):
        label = ", ".join(name for name, value in marks.items() if abs(value - s) < 1e-9)
        bar = "#" * round(float(p) * width)
        lines.append(f"{s:>8.2f}  {p:>12.4f}  {bar:<{width}}{'  ← ' + label if label else ''}".rstrip())
    return "\n".join(lines)


def render_histogram(values: Sequence[float] | np.ndarray, *, bins: int = 20, width: int = 40,
                     title: str = "verified similarities") -> str:
    """A text histogram of similarities over [0, 1] in ``bins`` equal bins, bars scaled to the largest."""
    vals = np.asarray(values, dtype=np.float64)
    counts, edges = np.histogram(vals, bins=bins, range=(0.0, 1.0))
    top = int(counts.max()) if len(vals) else 0
    lines = [f"{title}: {len(vals)} pair(s)", f"{'from':>6} {'to':>6}  {'count':>8}"]
    for i, c in enumerate(counts):
        bar = "#" * (round(c / top * width) if top else 0)
        lines.append(f"{edges[i]:>6.2f} {edges[i + 1]:>6.2f}  {int(c):>8}  {bar}".rstrip())
    return "\n".join(lines)
