"""The per-outlet coverage report: how much of what a lab loaded for each outlet the registry understands.

For each outlet (by the final URL each sighting stands for, the outlet list in force applied; see
counts.py), over the sightings in scope:

* ``sightings``; ``articles`` / ``not_articles`` / ``unknown``: sightings whose final URL the site rules
  call an article, not an article, or do not say (no article pattern for the site); ``article_share``;
* ``via_short_links``: sightings of a short link that was followed and resolved to this outlet;
  ``via_redirects``: sightings whose URL led here through any followed chain or imported pair (short
  links included);
* ``urls``: distinct final URLs; ``fetched``: those with a stored page (fetched or imported, either as
  the URL asked for or where a fetch ended); ``usable_text``: those with a usable document; and the
  shares of both;
* ``shapes``: the most frequent path shapes (canon/shapes.py) of the final URLs that are *not* articles by the
  rules, with their sightings and distinct URLs: the page templates the lab's article patterns miss, or
  that are rightly not articles;
* ``suggest``: the command that proposes the outlet's site rules from the stored evidence (article
  patterns for those shapes, parameters, hosts: docs/rule-suggestions.md).

The summary counts short links over the whole scope — resolved, failed, refused, not followed yet —
since a short link that was not resolved has no outlet to be reported under. Counts are set-based SQL;
the shapes are computed over the distinct non-article URLs, streamed.
"""

from __future__ import annotations

import re
import shlex
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from ..canon.shapes import path_shape
from ..progress import SILENT, Progress
from ..store import tables as t
from .counts import dataset_ids, final_sightings
from .lists import OutletJoin, list_in_force, outlet_attributes

#: The per-outlet columns of the report, in output order (``shapes`` comes last, nested).
REPORT_COLUMNS = ("outlet", "listed", "sightings", "articles", "not_articles", "unknown", "article_share",
                  "via_short_links", "via_redirects", "urls", "fetched", "fetched_share", "usable_text",
                  "usable_share")
#: Path shapes shown per outlet in the coverage report unless asked for more or fewer.
DEFAULT_SHAPES = 5


@dataclass
class OutletReport:
    rows: list[dict[str, Any]]
    summary: dict[str, Any] = field(default_factory=dict)
    list_version: int | None = None


def _share(part: int, whole: int) -> float | None:
    return round(part / whole, 4) if whole else None


def outlet_report(conn: Connection, *, datasets: Sequence[str] | None = None, shapes: int = DEFAULT_SHAPES,
                  outlets: Sequence[str] | None = None, progress: Progress = SILENT) -> OutletReport:
    """The coverage report (see the module doc); ``outlets`` limits it to the outlets named."""
    ids = dataset_ids(conn, datasets)
    version = list_in_force(conn)
    per = final_sightings(ids)
    u = t.canonical_urls.alias("u")
    oj = OutletJoin.of(u, version)
    outlet = oj.outlet()
    frm = oj.join(per.join(u, u.c.id == per.c.fid))
    # One row per outlet and final URL first; the page and document tests then run once per URL.
    by_url = (sa.select(outlet.label("outlet"), u.c.id.label("uid"), u.c.url.label("url"),
                        u.c.is_article.label("is_article"), sa.func.count().label("n"),
                        sa.func.sum(per.c.short).label("short"), sa.func.sum(per.c.led).label("led"))
              .select_from(frm).group_by(outlet, u.c.id, u.c.url, u.c.is_article))
    if outlets:
        by_url = by_url.where(outlet.in_(list(outlets)))
    pu = by_url.subquery("pu")
    pg, doc = t.pages, t.documents
    has_page = sa.exists().where(sa.or_(pg.c.canonical_id == pu.c.uid, pg.c.final_canonical_id == pu.c.uid))
    has_text = sa.exists().where(doc.c.canonical_id == pu.c.uid, doc.c.state == "usable")
    one = sa.literal(1)
    q = (sa.select(pu.c.outlet, sa.func.sum(pu.c.n).label("sightings"),
                   sa.func.sum(sa.case((pu.c.is_article.is_(True), pu.c.n), else_=0)).label("articles"),
                   sa.func.sum(sa.case((pu.c.is_article.is_(False), pu.c.n), else_=0)).label("not_articles"),
                   sa.func.sum(sa.case((pu.c.is_article.is_(None), pu.c.n), else_=0)).label("unknown"),
                   sa.func.sum(pu.c.short).label("via_short_links"), sa.func.sum(pu.c.led).label("via_redirects"),
                   sa.func.count().label("urls"),
                   sa.func.sum(sa.case((has_page, one), else_=0)).label("fetched"),
                   sa.func.sum(sa.case((has_text, one), else_=0)).label("usable_text"))
         .where(pu.c.outlet.is_not(None)).group_by(pu.c.outlet))
    progress.start("outlet coverage")
    rows: dict[str, dict[str, Any]] = {}
    for r in conn.execute(q).mappings():
        row: dict[str, Any] = {k: int(r[k] or 0) for k in ("sightings", "articles", "not_articles", "unknown", "via_short_links",
                                            "via_redirects", "urls", "fetched", "usable_text")}
        rows[r["outlet"]] = {"outlet": r["outlet"], **row}
    attrs = outlet_attributes(conn, version) if version is not None else {}
    for name in attrs:
        if name not in rows and (not outlets or name in outlets):
            rows[name] = {"outlet": name, **dict.fromkeys(("sightings", "articles", "not_articles", "unknown",
                                                           "via_short_links", "via_redirects", "urls", "fetched",
                                                           "usable_text"), 0)}
    for row in rows.values():
        row["listed"] = row["outlet"] in attrs
        row["article_share"] = _share(row["articles"], row["sightings"])
        row["fetched_share"] = _share(row["fetched"], row["urls"])
        row["usable_share"] = _share(row["usable_text"], row["urls"])
        row["shapes"] = []
    if shapes > 0:
        _add_shapes(conn, pu, rows, shapes, progress)
    progress.finish()
    ordered = sorted(rows.values(), key=lambda r: (-r["sightings"], str(r["outlet"])))
    out = [{**{k: r[k] for k in (*REPORT_COLUMNS, "shapes")}, "suggest": suggest_command(r["outlet"])}
           for r in ordered]
    return OutletReport(out, _short_link_summary(conn, ids, out), version)


def suggest_command(outlet: str) -> str:
    """The command line that proposes ``outlet``'s site rules (the report's link to its suggestions)."""
    name = shlex.quote(outlet)
    file = re.sub(r"[^\w.-]+", "-", outlet).strip("-").lower() or "outlet"
    return f"linkfold rules suggest --outlet {name} --out {file}-rules.toml --diff"


def _add_shapes(conn: Connection, pu: sa.Subquery, rows: dict[str, dict[str, Any]], top: int,
                progress: Progress) -> None:
    sightings: dict[str, Counter[str]] = {}
    urls: dict[str, Counter[str]] = {}
    q = (sa.select(pu.c.outlet, pu.c.url, pu.c.n)
         .where(pu.c.outlet.is_not(None), sa.or_(pu.c.is_article.is_(False), pu.c.is_article.is_(None))))
    result = conn.execution_options(yield_per=10000).execute(q)
    for outlet, url, n in result:
        shape = path_shape(url)
        sightings.setdefault(outlet, Counter())[shape] += int(n)
        urls.setdefault(outlet, Counter())[shape] += 1
        progress.advance()
    for outlet, counter in sightings.items():
        if outlet in rows:
            ranked = sorted(counter.items(), key=lambda kv: (-kv[1], -urls[outlet][kv[0]], kv[0]))[:top]
            rows[outlet]["shapes"] = [{"shape": s, "sightings": n, "urls": urls[outlet][s]} for s, n in ranked]


def _short_link_summary(conn: Connection, ids: list[int] | None, rows: list[dict[str, Any]]) -> dict[str, Any]:
    """Short-link sightings in scope by what following them gave: resolved (to an outlet above), failed,
    refused, or not followed yet; plus the totals of the report."""
    per = final_sightings(ids)
    fr = t.follow_results
    # A chain that resolved onto another short link not resolved yet is still pending.
    state = sa.case((per.c.fid.is_not(None), "resolved"), (fr.c.state.in_(("failed", "refused")), fr.c.state),
                    else_="pending")
    q = (sa.select(state.label("state"), sa.func.count().label("n"))
         .select_from(per.outerjoin(fr, fr.c.canonical_id == per.c.cid))
         .where(per.c.short == 1).group_by(state))
    by_state = {state: int(n) for state, n in conn.execute(q)}
    short = {"sightings": sum(by_state.values()), "resolved": by_state.pop("resolved", 0),
             "failed": by_state.pop("failed", 0), "refused": by_state.pop("refused", 0),
             "pending": sum(by_state.values())}
    total = sum(r["sightings"] for r in rows)
    articles = sum(r["articles"] for r in rows)
    return {"outlets": len(rows), "sightings": total, "articles": articles, "article_share": _share(articles, total),
            "short_links": short}


__all__ = ["DEFAULT_SHAPES", "REPORT_COLUMNS", "OutletReport", "outlet_report", "suggest_command"]
