"""The two pictures of the inspection pages, drawn as SVG text on the server (no plotting library).

* the similarity histogram: verified text similarities (Jaccard, exact where stored, else estimated) of
  every ``similar_text`` link, by level, in 0.05-wide bins, with the thresholds drawn in;
* the cluster-size distribution: how many clusters of each level have 1, 2, 3, … members.

Every label passes through :func:`xml.sax.saxutils.escape`, so nothing from the registry can break out
of the picture.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from xml.sax.saxutils import escape

from sqlalchemy.engine import Engine

from ..store.clusters import cluster_size_counts

BINS = 20
# Sizes of clusters, grouped so that the long tail of big clusters stays readable on one axis.
SIZE_BUCKETS: tuple[tuple[int, int | None], ...] = ((1, 1), (2, 2), (3, 3), (4, 4), (5, 5), (6, 10), (11, 20),
                                                    (21, 50), (51, 100), (101, None))


@dataclass(frozen=True)
class Series:
    name: str
    counts: Sequence[int]
    css: str


def similarity_bins(values: Sequence[float], bins: int = BINS) -> list[int]:
    """Counts per bin of width 1/bins over [0, 1]; 1.0 falls in the last bin."""
    counts = [0] * bins
    for v in values:
        if 0.0 <= v <= 1.0:
            counts[min(int(v * bins), bins - 1)] += 1
    return counts


def size_distribution(engine: Engine, level: str) -> list[int]:
    """Clusters of ``level`` per size bucket of :data:`SIZE_BUCKETS`."""
    with engine.connect() as conn:
        by_size = cluster_size_counts(conn, level)
    out = []
    for lo, hi in SIZE_BUCKETS:
        out.append(sum(n for size, n in by_size.items() if size >= lo and (hi is None or size <= hi)))
    return out


def size_labels() -> list[str]:
    return [str(lo) if lo == hi else (f"{lo}–{hi}" if hi is not None else f">{lo - 1}")
            for lo, hi in SIZE_BUCKETS]


def bar_chart(*, title: str, labels: Sequence[str], series: Sequence[Series], x_label: str,
              y_label: str, marks: Sequence[tuple[float, str]] = (), width: int = 720,
              height: int = 320) -> str:
    """Grouped bars, one group per label; ``marks`` are vertical lines at a fraction of the x axis."""
    left, right, top, bottom = 56, 16, 36, 58
    plot_w, plot_h = width - left - right, height - top - bottom
    peak = max([1, *(c for s in series for c in s.counts)])
    step = _nice_step(peak)
    y_max = step * -(-peak // step)
    group_w = plot_w / max(len(labels), 1)
    bar_w = max(group_w * 0.8 / max(len(series), 1), 1.0)
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" '
           f'height="{height}" role="img" aria-label="{escape(title, {chr(34): "&quot;"})}">',
           "<style>text{font:11px sans-serif;fill:#1d232a}.t{font-size:13px;font-weight:600}"
           ".grid{stroke:#d5dbe1}.axis{stroke:#5b6570}.a{fill:#1f5fa8}.b{fill:#c98a00}"
           ".mark{stroke:#b3261e;stroke-dasharray:4 3}</style>",
           f'<text class="t" x="{left}" y="20">{escape(title)}</text>']
    for i in range(0, y_max + 1, step):
        y = top + plot_h - plot_h * i / y_max
        out.append(f'<line class="grid" x1="{left}" x2="{left + plot_w}" y1="{y:.1f}" y2="{y:.1f}"/>')
        out.append(f'<text x="{left - 6}" y="{y + 4:.1f}" text-anchor="end">{i:,}</text>')
    for g, label in enumerate(labels):
        x0 = left + g * group_w + group_w * 0.1
        for k, s in enumerate(series):
            n = s.counts[g]
            h = plot_h * n / y_max
            x = x0 + k * bar_w
            out.append(f'<rect class="{s.css}" x="{x:.1f}" y="{top + plot_h - h:.1f}" width="{bar_w:.1f}" '
                       f'height="{h:.1f}"><title>{escape(s.name)} {escape(label)}: {n:,}</title></rect>')
        out.append(f'<text x="{left + g * group_w + group_w / 2:.1f}" y="{top + plot_h + 14}" '
                   f'text-anchor="middle">{escape(label)}</text>')
    for frac, name in marks:
        x = left + plot_w * frac
        out.append(f'<line class="mark" x1="{x:.1f}" x2="{x:.1f}" y1="{top}" y2="{top + plot_h}"/>')
        out.append(f'<text x="{x + 3:.1f}" y="{top + 10}">{escape(name)}</text>')
    out.append(f'<line class="axis" x1="{left}" x2="{left + plot_w}" y1="{top + plot_h}" y2="{top + plot_h}"/>')
    out.append(f'<text x="{left + plot_w / 2:.1f}" y="{height - 22}" text-anchor="middle">{escape(x_label)}</text>')
    out.append(f'<text transform="translate(14 {top + plot_h / 2:.1f}) rotate(-90)" text-anchor="middle">'
               f"{escape(y_label)}</text>")
    lx = left
    for s in series:
        out.append(f'<rect class="{s.css}" x="{lx}" y="{height - 12}" width="10" height="10"/>')
        out.append(f'<text x="{lx + 14}" y="{height - 3}">{escape(s.name)}</text>')
        lx += 24 + 7 * len(s.name)
    out.append("</svg>")
    return "\n".join(out)


def _nice_step(peak: int) -> int:
    """A grid step of 1, 2 or 5 times a power of ten giving at most five lines."""
    magnitude = 1
    while True:
        for m in (1, 2, 5):
            if peak / (m * magnitude) <= 5:
                return m * magnitude
        magnitude *= 10


def similarity_svg(values: dict[str, list[float]], *, article_threshold: float, story_threshold: float) -> str:
    labels = [f"{i / BINS:.2f}" for i in range(BINS)]
    return bar_chart(
        title="Verified text similarities", labels=labels,
        series=[Series("same outlet (articles)", similarity_bins(values.get("article", [])), "a"),
                Series("across outlets (stories)", similarity_bins(values.get("story", [])), "b")],
        x_label="Jaccard similarity (bin start)", y_label="links",
        marks=[(story_threshold, f"story ≥ {story_threshold:g}"),
               (article_threshold, f"article ≥ {article_threshold:g}")])


def sizes_svg(engine: Engine) -> str:
    return bar_chart(
        title="Cluster sizes", labels=size_labels(),
        series=[Series("articles", size_distribution(engine, "article"), "a"),
                Series("stories", size_distribution(engine, "story"), "b")],
        x_label="members (canonical URLs)", y_label="clusters")
