"""``linkfold dedupe``, ``decide``, ``clusters`` and ``thresholds``."""

from __future__ import annotations

import getpass
import shutil
import textwrap
from collections.abc import Mapping
from typing import Any

import click

from ..dedupe.stage import (
    list_clusters,
    list_decisions,
    record_decision,
    run_dedupe,
    show_cluster,
    thresholds_report,
)
from ._common import (
    Context,
    common_options,
    format_option,
    pass_ctx,
    report_summary,
    summary_option,
    to_json,
    write_rows,
    write_table,
)


def _table(rows: list[dict[str, Any]]) -> list[Mapping[str, Any]]:
    return list(rows)


@click.command("dedupe")
@click.option("--full", is_flag=True,
              help="Match every current document again and recluster the whole registry (after lowering a "
                   "threshold or changing the banding). Without it only pending work is done.")
@summary_option
@common_options
@pass_ctx
def dedupe_command(obj: Context, full: bool, fmt: str) -> None:
    """Sign, match, verify and cluster what is pending; hand out article and story IDs.

    New documents get MinHash signatures and LSH band keys; their candidate pairs come from the band-key
    table and are verified (same-outlet near-exact copies are one article, cross-outlet near-duplicates
    one story); then the clusters touched by new evidence or decisions are recomputed and their IDs kept,
    merged, split or minted. Takes the registry lock, like the nightly job.

    \b
    Example:
      linkfold dedupe
      linkfold dedupe --full --format json
    """
    summary = run_dedupe(obj.engine(), settings=obj.settings, full=full, progress=obj.progress())
    report_summary(obj, summary, fmt)


@click.group("decide")
def decide_group() -> None:
    """Record a person's decision: two things are the same, or are not. Every later run obeys it.

    A and B are URLs, url keys or article/story IDs. The level follows from what is named: a story ID
    decides at the story level, an article ID at the article level; two URLs on one outlet at the
    article level, on different outlets at the story level (unless they are one article now, such as a
    short link and its target); --level overrides. "different URL ID" moves the URL out of that cluster
    and the ID stays with the rest, even when the URL is the founder. The latest decision on a pair is
    in force; earlier ones are kept. The answer says which level was recorded, and when the decision
    changes nothing as the clusters stand. It takes effect at the next `linkfold dedupe` or nightly run.

    \b
    Example:
      linkfold decide same https://herald.example/a/1 https://herald.example/print/1 --note "print view"
      linkfold decide different https://herald.example/a/1 s2k7q4m3v5bxa --by rkim --note "local report"
      linkfold decide list
    """


def _decide(obj: Context, verdict: str, a: str, b: str, note: str | None, by: str | None,
            level: str | None) -> None:
    who = by or getpass.getuser()
    result = record_decision(obj.engine(), verdict, a, b, decided_by=who, note=note, level=level)
    click.echo(to_json(result.as_dict()))
    obj.message(result.message)


_ref_options = [
    click.argument("a"), click.argument("b"),
    click.option("--note", metavar="TEXT", help="Why; kept with the decision."),
    click.option("--by", metavar="NAME", help="Who decided (default: the login name)."),
    click.option("--level", type=click.Choice(["article", "story"]), default=None,
                 help="Record at this level instead of the one that follows from A and B (e.g. two URLs "
                      "on different outlets that are different articles: --level article)."),
]


def _with_refs(func):
    for decorator in reversed(_ref_options):
        func = decorator(func)
    return func


@decide_group.command("same")
@_with_refs
@common_options
@pass_ctx
def decide_same(obj: Context, a: str, b: str, note: str | None, by: str | None, level: str | None) -> None:
    """A and B are the same article (or story): every run joins them.

    \b
    Example:
      linkfold decide same https://herald.example/a/1 https://m.herald.example/a/1 --note "mobile mirror"
      linkfold decide same https://courier.example/r/9 s2k7q4m3v5bxa --note "rewritten wire copy"
    """
    _decide(obj, "same", a, b, note, by, level)


@decide_group.command("different")
@_with_refs
@common_options
@pass_ctx
def decide_different(obj: Context, a: str, b: str, note: str | None, by: str | None,
                     level: str | None) -> None:
    """A and B are not the same: no run puts them into one cluster.

    With a URL and an ID, the URL (at the story level, its article) moves out of that cluster and the
    ID stays with the rest, founder or not.

    \b
    Example:
      linkfold decide different https://herald.example/live/4 a3xk2m4q7wbnc --note "live page, not the report"
      linkfold decide different https://herald.example/a/1 https://courier.example/r/9 --level article
    """
    _decide(obj, "different", a, b, note, by, level)


@decide_group.command("list")
@click.option("--limit", type=click.IntRange(min=1), default=100, show_default=True, metavar="N")
@format_option()
@common_options
@pass_ctx
def decide_list(obj: Context, limit: int, fmt: str) -> None:
    """The decisions on record, newest first, and whether each is still in force.

    \b
    Example:
      linkfold decide list --format jsonl
    """
    rows = list_decisions(obj.engine(), limit=limit)
    keep = ["id", "verdict", "level", "a_ref", "b_ref", "in_force", "decided_by", "decided_at", "note"]
    if fmt == "table":
        write_table(_table(rows), keep)
    else:
        full = [*keep, "a_url", "b_url", "a_cluster", "b_cluster"]
        write_rows(fmt, ({k: r[k] for k in full} for r in rows), full)


@click.group("clusters", invoke_without_command=True)
@click.option("--level", type=click.Choice(["article", "story"]), default="article", show_default=True)
@click.option("--min-size", type=click.IntRange(min=1), default=2, show_default=True, metavar="N",
              help="Only clusters with at least N URLs.")
@click.option("--outlet", metavar="OUTLET",
              help="Only clusters with a URL leading to this outlet (its final outlet, after short links and "
                   "redirects): its name as the site rules give it (any case) or one of its domains (a host "
                   "such as www.herald.example counts as herald.example).")
@click.option("--limit", type=click.IntRange(min=1), metavar="N", help="At most N clusters (largest first).")
@format_option()
@common_options
@click.pass_context
def clusters_group(ctx: click.Context, level: str, min_size: int, outlet: str | None, limit: int | None,
                   fmt: str) -> None:
    """List clusters with their sizes, the range of similarity scores inside them, and the sinks near them.

    A sink is a redirect or declared-canonical target that joins nothing (a home page, a subscribe page,
    a target of more than sink_fan_in URLs); `linkfold follow-report` lists them all.

    \b
    Example:
      linkfold clusters --level story --min-size 3
      linkfold clusters --outlet herald.example --format jsonl
      linkfold clusters --level story --outlet "Northvale Herald"
      linkfold clusters show s4ljvvcsmrfdl
    """
    if ctx.invoked_subcommand is not None:
        return
    obj: Context = ctx.ensure_object(Context)
    rows = [r.as_dict() for r in list_clusters(obj.engine(), level=level, min_size=min_size, outlet=outlet,
                                               limit=limit, settings=obj.settings)]
    if fmt != "table":
        write_rows(fmt, rows, ["id", "level", "size", "outlets", "founder_url", "min_score", "max_score",
                               "evidence", "sinks"])
        return
    for r in rows:
        r["scores"] = ("" if r["min_score"] is None else f"{r['min_score']:.3f}–{r['max_score']:.3f}")
        r["evidence"] = ", ".join(f"{k} {v}" for k, v in r["evidence"].items())
        r["sinks"] = ", ".join(f"{s['url']} ({s['sink']}, fan-in {s['fan_in']})" for s in r["sinks"])
    write_table(_table(rows), ["id", "size", "outlets", "scores", "evidence", "sinks", "founder_url"])
    obj.message(f"{len(rows):,} {level} cluster(s) with at least {min_size} URL(s)")


def _two_columns(left: str, right: str, width: int) -> list[str]:
    col = max(20, (width - 3) // 2)
    a, b = textwrap.wrap(left, col) or [""], textwrap.wrap(right, col) or [""]
    n = max(len(a), len(b))
    return [f"{(a[i] if i < len(a) else ''):<{col}} | {b[i] if i < len(b) else ''}".rstrip() for i in range(n)]


@clusters_group.command("show")
@click.argument("cluster_id")
@format_option(("table", "json"), help="table: the cluster laid out for people; json: one JSON object.")
@common_options
@pass_ctx
def clusters_show(obj: Context, cluster_id: str, fmt: str) -> None:
    """One cluster: its members, the links between them with their evidence, decisions, and a
    side-by-side of the passages where the members' texts differ from the founder's.

    \b
    Example:
      linkfold clusters show a2swtbc53jhcf
    """
    d = show_cluster(obj.engine(), cluster_id, settings=obj.settings)
    if fmt == "json":
        click.echo(to_json(vars(d)))
        return
    width = shutil.get_terminal_size((120, 40)).columns
    head = f"{d.level} {d.id}"
    if d.path[0] != d.id:
        head += f" (asked for {d.asked}: " + " → ".join(d.path) + ")"
    click.echo(head)
    for e in d.events:
        other = f" {e['other_id']}" if e["other_id"] else ""
        click.echo(f"  event: {e['cluster_id']} {e['event']}{other} ({e['reason']}, run {e['run_id']})")
    click.echo(f"\nmembers ({len(d.members)}):")
    other_key = "article_id" if d.level == "story" else "story_id"
    for m in d.members:
        star = "*" if m["founder"] else " "
        words = f"{m['words']} words" if m["words"] is not None else "no text"
        leads = f" -> {m['final_url']}" if m.get("final_url") not in (None, m["url"]) else ""
        click.echo(f" {star} {m['url']}{leads}  [{m.get('final_outlet') or m['outlet']}; {other_key} {m[other_key]}; "
                   f"{words}]")
    click.echo(f"\nlinks ({len(d.links)}):")
    for link in d.links:
        detail = link["detail"] or {}
        scores = ", ".join(f"{k}={v:.3f}" if isinstance(v, float) else f"{k}={v}" for k, v in detail.items()
                           if k not in ("documents", "level"))
        click.echo(f"  {link['kind']:<12} {link['from']} → {link['to']}  {scores}")
    if d.sinks:
        click.echo(f"\nsinks ({len(d.sinks)}; their links are kept as evidence, never used to join):")
        for s in d.sinks:
            where = "this cluster's own URL" if s["member"] else f"led to by {s['members_leading_here']} member(s)"
            click.echo(f"  {s['url']}  [{s['sink']}; fan-in {s['fan_in']} of {s['sources']} sources; {where}]")
    if d.decisions:
        click.echo(f"\ndecisions ({len(d.decisions)}):")
        for x in d.decisions:
            click.echo(f"  #{x['id']} {x['verdict']}: {x['a']} / {x['b']} by {x['decided_by']}"
                       + (f" — {x['note']}" if x["note"] else ""))
    for diff in d.differences:
        click.echo(f"\n{diff['against']}  |  {diff['url']}")
        if not diff["passages"]:
            click.echo("  (same text)")
        for left, right in diff["passages"]:
            for line in _two_columns(left, right, width):
                click.echo("  " + line)
            click.echo("")


@click.command("thresholds")
@common_options
@pass_ctx
def thresholds_command(obj: Context) -> None:
    """The LSH S-curve for the current settings and the histograms of verified similarities.

    Shows how likely a pair of each similarity is to become a candidate under lsh_bands × lsh_rows, and
    where the pairs verified so far lie, so thresholds can be chosen against the lab's own data.

    \b
    Example:
      LINKFOLD_STORY_THRESHOLD=0.45 linkfold thresholds
    """
    click.echo(thresholds_report(obj.engine(), settings=obj.settings))


def register(cli: click.Group) -> None:
    for command in (dedupe_command, decide_group, clusters_group, thresholds_command):
        cli.add_command(command)
