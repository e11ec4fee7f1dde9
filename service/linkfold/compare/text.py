"""The comparison as text for the terminal: one block per section, datasets side by side."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .report import Comparison

#: Rows shown per block of outlets or attribute values (the JSON has them all).
SHOWN = 25


def _pct(value: float | None) -> str:
    return "—" if value is None else f"{100 * value:.1f}%"


def _num(value: int | None) -> str:
    return "—" if value is None else f"{value:,}"


def _block(title: str, header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)]

    def fmt(cells: Sequence[str]) -> str:
        return "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths,
                                                                                             strict=True)))
    return [title, fmt(header), fmt(["-" * w for w in widths]), *(fmt(r) for r in rows), ""]


def _side_by_side(rows: Sequence[dict[str, Any]], key: str, names: Sequence[str]) -> list[list[str]]:
    by_key: dict[Any, dict[str, dict[str, Any]]] = {}
    for r in rows:
        by_key.setdefault(r[key], {})[r["dataset"]] = r
    ordered = sorted(by_key.items(), key=lambda kv: -sum(r["sightings"] for r in kv[1].values()))[:SHOWN]
    out = []
    for value, per in ordered:
        cells = [str(value) if value not in (None, "") else "(none)"]
        for name in names:
            got = per.get(name)
            cells += [_pct(got["sightings_share"]) if got else "—", _pct(got["units_share"]) if got else "—"]
        out.append(cells)
    return out


def comparison_table(c: Comparison) -> str:
    names = [d["dataset"] for d in c.datasets]
    lines = _block("datasets", ["dataset", "sightings", "units", f"{c.level} IDs", "only here"],
                   [[d["dataset"], _num(d["sightings"]), _num(d["units"]), _num(d["stories"]),
                     _num(d["only_here"])] for d in c.datasets])
    shares = [h for n in names for h in (f"{n} sightings", f"{n} units")]
    lines += _block("outlets: share of sightings and of units", ["outlet", *shares],
                    _side_by_side(c.outlets, "outlet", names))
    for attribute in dict.fromkeys(r["attribute"] for r in c.attributes):
        rows = [r for r in c.attributes if r["attribute"] == attribute]
        lines += _block(f"outlet list: {attribute}", [attribute, *shares], _side_by_side(rows, "value", names))
    lines += _block(f"overlap of {c.level} IDs", ["pair", "in a", "in b", "both", "Jaccard", "weighted Jaccard"],
                    [[f"{p['a']} / {p['b']}", _num(p["stories_a"]), _num(p["stories_b"]), _num(p["both"]),
                      "—" if p["jaccard"] is None else f"{p['jaccard']:.3f}",
                      "—" if p["weighted_jaccard"] is None else f"{p['weighted_jaccard']:.3f}"] for p in c.overlap])
    id_col = "story_id" if c.level == "story" else "article_id"
    for section, rows in (("top", c.top), ("seen only in", c.only)):
        for name in names:
            mine = [r for r in rows if r["dataset"] == name]
            title = f"top {c.level} IDs of {name}" if section == "top" else f"{c.level} IDs seen only in {name}"
            lines += _block(title, ["#", id_col, "sightings", "share", "units", "title"],
                            [[str(r["rank"]), r[id_col], _num(r["sightings"]), _pct(r["sightings_share"]),
                              _num(r["units"]), (r["title"] or "")[:60]] for r in mine])
    return "\n".join(lines).rstrip() + "\n"


__all__ = ["SHOWN", "comparison_table"]
