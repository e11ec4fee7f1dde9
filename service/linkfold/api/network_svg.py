"""The network page's pictures, drawn as SVG text on the server: the outlet co-exposure network laid out
by networkx's spring layout (Fruchterman–Reingold) with a fixed seed, so the same network always gives the
same picture, and the exposure distribution per outlet as small histograms.

Every label passes through :func:`xml.sax.saxutils.escape`, so nothing from the registry (outlet names,
the lab's attribute values) can break out of the picture.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from xml.sax.saxutils import escape

from ..network import Network, to_networkx

LAYOUT_SEED = 20310501
# Eight colours that stay apart for the common colour-vision deficiencies (after Okabe & Ito's palette,
# from memory), then grey for "not listed".
PALETTE = ("#0072b2", "#e69f00", "#009e73", "#cc79a7", "#56b4e9", "#d55e00", "#f0e442", "#000000")
MISSING = "#9aa4ae"
WEIGHTS = ("jaccard", "lift", "units")


def _attr(text: str) -> str:
    return escape(text, {'"': "&quot;"})


def colours(network: Network, attribute: str | None) -> tuple[dict[str, str], list[tuple[str, str]]]:
    """Colour of each node by the value of ``attribute`` (most frequent values first; past eight,
    "other"), and the legend."""
    if not attribute:
        return {n["outlet"]: PALETTE[0] for n in network.nodes}, []
    counts: dict[str, int] = {}
    for n in network.nodes:
        v = n.get(attribute)
        if v not in (None, ""):
            counts[str(v)] = counts.get(str(v), 0) + 1
    ranked = sorted(counts, key=lambda v: (-counts[v], v))
    shown = ranked[:len(PALETTE) - 1] if len(ranked) > len(PALETTE) else ranked
    colour_of = {v: PALETTE[i] for i, v in enumerate(shown)}
    other = PALETTE[-1] if len(ranked) > len(shown) else None
    out = {}
    for n in network.nodes:
        v = n.get(attribute)
        out[n["outlet"]] = MISSING if v in (None, "") else colour_of.get(str(v), other or MISSING)
    legend = [(v, colour_of[v]) for v in shown] + ([("other", other)] if other else []) + \
        ([("not listed", MISSING)] if any(c == MISSING for c in out.values()) else [])
    return out, legend


def network_svg(network: Network, *, attribute: str | None = None, weight: str = "jaccard",
                width: int = 880, height: int = 620) -> str:
    """The network as an SVG picture: node area by audience (units), colour by ``attribute``, edge
    thickness and opacity by ``weight`` (one of :data:`WEIGHTS`), laid out by the spring layout."""
    import networkx as nx

    if weight not in WEIGHTS:
        raise ValueError(f"unknown weight {weight!r}: one of {', '.join(WEIGHTS)}")
    title = f"Outlets sharing at least {network.min_units} units, edges by {weight}"
    head = (f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" '
            f'height="{height}" role="img" aria-label="{_attr(title)}" id="network-svg">'
            "<style>text{font:11px sans-serif;fill:#1d232a}.t{font-size:13px;font-weight:600}"
            ".e{stroke:#41505e;stroke-linecap:round}.n{stroke:#ffffff;stroke-width:1.5}"
            ".l{paint-order:stroke;stroke:#ffffff;stroke-width:3px}</style>"
            f'<text class="t" x="16" y="22">{escape(title)}</text>')
    if not network.nodes:
        return head + (f'<text x="{width / 2}" y="{height / 2}" text-anchor="middle">No outlet has '
                       f"{network.min_units} or more units in these datasets.</text></svg>")
    g = to_networkx(network)
    # The layout pulls strongly tied outlets together; lift can be large, so its log (PMI, clipped at 0).
    for _a, _b, d in g.edges(data=True):
        d["pull"] = {"jaccard": d["jaccard"], "lift": max(d["pmi"], 0.0) + 0.05, "units": float(d["units"])}[weight]
    pos = nx.spring_layout(g, seed=LAYOUT_SEED, weight="pull", k=1.6 / math.sqrt(max(len(g), 1)))
    fill, legend = colours(network, attribute)
    left, top, right, bottom = 70, 44, 170 if legend else 70, 40
    xs, ys = [p[0] for p in pos.values()], [p[1] for p in pos.values()]
    span_x, span_y = (max(xs) - min(xs)) or 1.0, (max(ys) - min(ys)) or 1.0

    def at(node: str) -> tuple[float, float]:
        x, y = pos[node]
        return (left + (x - min(xs)) / span_x * (width - left - right),
                top + (y - min(ys)) / span_y * (height - top - bottom))

    peak_units = max(n["units"] for n in network.nodes)
    values = [e["units"] if weight == "units" else e[weight] for e in network.edges]
    lo, hi = (min(values), max(values)) if values else (0.0, 1.0)
    out = [head]
    for e, v in zip(network.edges, values, strict=True):
        share = (v - lo) / (hi - lo) if hi > lo else 1.0
        (x1, y1), (x2, y2) = at(e["outlet_a"]), at(e["outlet_b"])
        out.append(f'<line class="e" x1="{x1:.1f}" y1="{y1:.1f}" x2="{x2:.1f}" y2="{y2:.1f}" '
                   f'stroke-width="{0.8 + 7 * share:.2f}" stroke-opacity="{0.25 + 0.6 * share:.2f}">'
                   f"<title>{escape(e['outlet_a'])} – {escape(e['outlet_b'])}: {e['units']:,} shared units, "
                   f"Jaccard {e['jaccard']:.3f}, lift {e['lift']:.2f}</title></line>")
    for n in sorted(network.nodes, key=lambda n: -n["units"]):  # small nodes on top of big ones
        x, y = at(n["outlet"])
        r = 5 + 25 * math.sqrt(n["units"] / peak_units)  # area by audience
        label = escape(n["outlet"])
        out.append(f'<circle class="n" cx="{x:.1f}" cy="{y:.1f}" r="{r:.1f}" fill="{fill[n["outlet"]]}">'
                   f"<title>{label}: {n['units']:,} units, {n['sightings']:,} sightings</title></circle>")
        out.append(f'<text class="l" x="{x + r + 3:.1f}" y="{y + 4:.1f}">{label}</text>')
    if legend:
        lx, ly = width - right + 20, top + 10
        out.append(f'<text class="t" x="{lx}" y="{ly}">{escape(attribute or "")}</text>')
        for i, (value, colour) in enumerate(legend):
            y = ly + 20 + 18 * i
            out.append(f'<circle cx="{lx + 6}" cy="{y - 4}" r="6" fill="{colour}"/>')
            out.append(f'<text x="{lx + 18}" y="{y}">{escape(value[:22])}</text>')
    out.append(f'<text x="16" y="{height - 12}">Node area: audience (units exposed). '
               f"{len(network.nodes)} outlets, {len(network.edges)} edges, {network.units:,} units.</text>")
    out.append("</svg>")
    return "".join(out)


def distribution_svg(dist: dict[str, list[int | None]], labels: Sequence[str], *, min_units: int,
                     columns: int = 3, limit: int = 12) -> str:
    """Small histograms, one per outlet (the ``limit`` largest audiences): units by number of sightings
    at the outlet. A suppressed bucket (fewer than ``min_units`` units) is drawn as a hatched stub."""
    shown = sorted(dist, key=lambda o: (-sum(v or 0 for v in dist[o]), o))[:limit]
    cell_w, cell_h, pad = 280, 150, 14
    rows = max(1, -(-len(shown) // columns))
    width, height = columns * cell_w, rows * cell_h + 40
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" '
           f'height="{height}" role="img" aria-label="Exposure distribution per outlet" id="distribution-svg">'
           "<style>text{font:10px sans-serif;fill:#1d232a}.t{font-size:12px;font-weight:600}.b{fill:#1f5fa8}"
           ".s{fill:url(#hatch)}.axis{stroke:#5b6570}</style>"
           '<defs><pattern id="hatch" width="4" height="4" patternUnits="userSpaceOnUse">'
           '<path d="M0,4 l4,-4" stroke="#9aa4ae" stroke-width="1"/></pattern></defs>']
    if not shown:
        out.append(f'<text x="12" y="24">No outlet has {min_units} or more units in these datasets.</text></svg>')
        return "".join(out)
    for i, outlet in enumerate(shown):
        ox, oy = (i % columns) * cell_w, (i // columns) * cell_h
        counts = dist[outlet]
        peak = max([1, *(v or 0 for v in counts)])
        plot_x, plot_y, plot_w, plot_h = ox + pad + 26, oy + 28, cell_w - 2 * pad - 30, cell_h - 62
        out.append(f'<text class="t" x="{ox + pad}" y="{oy + 18}">{escape(outlet[:38])}</text>')
        out.append(f'<text x="{plot_x - 4}" y="{plot_y + 8}" text-anchor="end">{peak:,}</text>')
        bar = plot_w / len(counts)
        for k, (n, label) in enumerate(zip(counts, labels, strict=True)):
            x = plot_x + k * bar + bar * 0.1
            if n is None:
                out.append(f'<rect class="s" x="{x:.1f}" y="{plot_y + plot_h - 6}" width="{bar * 0.8:.1f}" '
                           f'height="6"><title>{escape(label)} sightings: fewer than {min_units} units'
                           f"</title></rect>")
            else:
                h = plot_h * n / peak
                out.append(f'<rect class="b" x="{x:.1f}" y="{plot_y + plot_h - h:.1f}" width="{bar * 0.8:.1f}" '
                           f'height="{h:.1f}"><title>{escape(label)} sightings: {n:,} units</title></rect>')
            out.append(f'<text x="{x + bar * 0.4:.1f}" y="{plot_y + plot_h + 12}" text-anchor="middle">'
                       f"{escape(label)}</text>")
        out.append(f'<line class="axis" x1="{plot_x}" x2="{plot_x + plot_w}" y1="{plot_y + plot_h}" '
                   f'y2="{plot_y + plot_h}"/>')
    out.append(f'<text x="12" y="{height - 12}">Units (y) by sightings of that outlet per unit (x); hatched: '
               f"fewer than {min_units} units, not shown.</text>")
    out.append("</svg>")
    return "".join(out)


def attribute_choices(network: Network) -> list[str]:
    """The outlet list's attribute columns a page may colour by."""
    return list(network.node_columns[3:])


__all__ = ["LAYOUT_SEED", "PALETTE", "WEIGHTS", "attribute_choices", "colours", "distribution_svg",
           "network_svg"]
