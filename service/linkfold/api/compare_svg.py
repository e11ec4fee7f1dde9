"""The compare page's two pictures, drawn as SVG text on the server (no plotting library, no script).

* outlet shares side by side: one row per outlet (the most seen first), one bar per dataset, the share
  of the dataset's sightings (or units) the outlet has;
* overlap: per pair of datasets, one bar split into the story IDs seen only in the first, in both and
  only in the second, with the Jaccard index and the weighted Jaccard written beside it.

Every label passes through :func:`xml.sax.saxutils.escape`, so nothing from
the registry can break out of the picture.
"""

from __future__ import annotations

from typing import Any
from xml.sax.saxutils import escape

from .network_svg import PALETTE


def esc(text: Any) -> str:
    return escape(str(text), {'"': "&quot;"})


#: Outlets drawn in the shares picture (the table below it has them all).
SHOWN_OUTLETS = 15


def _names(comparison: dict[str, Any]) -> list[str]:
    return [d["dataset"] for d in comparison["datasets"]]


def shares_svg(comparison: dict[str, Any], *, measure: str = "sightings", shown: int = SHOWN_OUTLETS) -> str:
    """Outlet shares of ``measure`` (``sightings`` or ``units``) per dataset, side by side."""
    key = f"{measure}_share"
    names = _names(comparison)
    per: dict[str, dict[str, float | None]] = {}
    for r in comparison["outlets"]:
        per.setdefault(r["outlet"], {})[r["dataset"]] = r[key]
    ranked = sorted(per, key=lambda o: (-sum(v or 0.0 for v in per[o].values()), o))[:shown]
    peak = max([0.01, *(v or 0.0 for o in ranked for v in per[o].values())])
    left, right, top, row_gap, width = 190, 70, 40, 8, 760
    bar_h = 12
    row_h = bar_h * len(names) + row_gap
    plot_w = width - left - right
    height = top + row_h * max(len(ranked), 1) + 20 + 18 * len(names)
    title = f"Share of each dataset's {measure} per outlet"
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" id="shares-{measure}-svg" viewBox="0 0 {width} {height}" '
           f'width="{width}" height="{height}" role="img" aria-label="{esc(title)}">',
           "<style>text{font:11px sans-serif;fill:#1d232a}.t{font-size:13px;font-weight:600}"
           ".grid{stroke:#d5dbe1}.none{fill:#5b6570}</style>",
           f'<text class="t" x="8" y="20">{esc(title)}</text>']
    for i in range(5):
        frac = i / 4
        x = left + plot_w * frac
        out.append(f'<line class="grid" x1="{x:.1f}" x2="{x:.1f}" y1="{top - 6}" y2="{top + row_h * len(ranked)}"/>')
        out.append(f'<text x="{x:.1f}" y="{top - 9}" text-anchor="middle">{100 * peak * frac:.0f}%</text>')
    for g, outlet in enumerate(ranked):
        y0 = top + g * row_h
        out.append(f'<text x="{left - 8}" y="{y0 + bar_h * len(names) / 2 + 4:.1f}" text-anchor="end">'
                   f"{esc(outlet)}</text>")
        for k, name in enumerate(names):
            value = per[outlet].get(name)
            y = y0 + k * bar_h
            colour = PALETTE[k % len(PALETTE)]
            if value is None:
                out.append(f'<text class="none" x="{left + 3}" y="{y + bar_h - 2}">— {esc(name)}: '
                           f'{"suppressed or none" if name in per[outlet] else "none"}</text>')
                continue
            w = plot_w * value / peak
            out.append(f'<rect class="bar" x="{left}" y="{y}" width="{w:.1f}" height="{bar_h - 1}" fill="{colour}">'
                       f"<title>{esc(name)} · {esc(outlet)}: {100 * value:.1f}%</title></rect>")
            out.append(f'<text x="{left + w + 4:.1f}" y="{y + bar_h - 2}">{100 * value:.1f}%</text>')
    ly = top + row_h * max(len(ranked), 1) + 14
    for k, name in enumerate(names):
        out.append(f'<rect x="{left}" y="{ly + 18 * k - 9}" width="10" height="10" fill="{PALETTE[k % len(PALETTE)]}"/>')
        out.append(f'<text x="{left + 14}" y="{ly + 18 * k}">{esc(name)}</text>')
    out.append("</svg>")
    return "\n".join(out)


def overlap_svg(comparison: dict[str, Any]) -> str:
    """Per pair of datasets: only in a | in both | only in b, with both Jaccard figures."""
    pairs = comparison["overlap"]
    level = comparison["level"]
    left, right, top, row_h = 190, 200, 40, 34
    width = 760
    plot_w = width - left - right
    height = top + row_h * max(len(pairs), 1) + 30
    title = f"Overlap of {level} IDs per pair of datasets"
    colours = (PALETTE[0], PALETTE[2], PALETTE[1])
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" id="overlap-svg" viewBox="0 0 {width} {height}" '
           f'width="{width}" height="{height}" role="img" aria-label="{esc(title)}">',
           "<style>text{font:11px sans-serif;fill:#1d232a}.t{font-size:13px;font-weight:600}</style>",
           f'<text class="t" x="8" y="20">{esc(title)}</text>']
    for g, p in enumerate(pairs):
        y = top + g * row_h
        parts = (p["stories_a"] - p["both"], p["both"], p["stories_b"] - p["both"])
        total = max(sum(parts), 1)
        out.append(f'<text x="{left - 8}" y="{y + 14}" text-anchor="end">{esc(p["a"])} / {esc(p["b"])}</text>')
        x = float(left)
        for part, colour, what in zip(parts, colours, (f"only in {p['a']}", "in both", f"only in {p['b']}"),
                                      strict=True):
            w = plot_w * part / total
            out.append(f'<rect class="seg" x="{x:.1f}" y="{y}" width="{w:.1f}" height="20" fill="{colour}">'
                       f"<title>{esc(what)}: {part:,}</title></rect>")
            if w > 28:
                out.append(f'<text x="{x + w / 2:.1f}" y="{y + 14}" text-anchor="middle" style="fill:#fff">'
                           f"{part:,}</text>")
            x += w
        j = "—" if p["jaccard"] is None else f"{p['jaccard']:.3f}"
        wj = "—" if p["weighted_jaccard"] is None else f"{p['weighted_jaccard']:.3f}"
        out.append(f'<text x="{left + plot_w + 8}" y="{y + 14}">Jaccard {j} · weighted {wj}</text>')
    ly = top + row_h * max(len(pairs), 1) + 12
    for k, what in enumerate(("only in the first", "in both", "only in the second")):
        out.append(f'<rect x="{left + 140 * k}" y="{ly - 9}" width="10" height="10" fill="{colours[k]}"/>')
        out.append(f'<text x="{left + 140 * k + 14}" y="{ly}">{what}</text>')
    out.append("</svg>")
    return "\n".join(out)


__all__ = ["SHOWN_OUTLETS", "overlap_svg", "shares_svg"]
