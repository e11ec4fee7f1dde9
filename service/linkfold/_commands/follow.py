"""``linkfold follow``, ``linkfold redirects load`` (old spelling ``follow --import``), ``follow-report``."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import click

from ..dedupe.stage import list_sinks
from ..follow import follow_links, follow_report, import_redirects
from ..follow.imports import FORMATS
from ._common import (
    OUTPUT_FORMATS,
    Context,
    common_options,
    format_option,
    pass_ctx,
    report_summary,
    summary_option,
    warn_deprecated,
    write_rows,
    write_table,
)

#: Problems printed one by one after an import; the rest are counted in the summary.
SHOWN_PROBLEMS = 50


def _hosts(value: str | None) -> list[str] | None:
    if value is None:
        return None
    hosts = [h.strip() for h in value.split(",") if h.strip()]
    if not hosts:
        raise click.BadParameter("give at least one host", param_hint="--hosts")
    return hosts


def _given(name: str) -> bool:
    ctx = click.get_current_context()
    return ctx.get_parameter_source(name) not in (None, click.core.ParameterSource.DEFAULT)


def _pair_options(*, hidden: bool = False) -> Any:
    def decorate(func: Any) -> Any:
        func = click.option("--expanded-column", default="expanded", show_default=True, metavar="NAME",
                            hidden=hidden, help="Column (or JSON key) of the expanded URL.")(func)
        return click.option("--short-column", default="short", show_default=True, metavar="NAME",
                            hidden=hidden, help="Column (or JSON key) of the short URL.")(func)
    return decorate


@click.command("follow")
@click.option("--dataset", metavar="NAME", help="Only URLs sighted in this dataset.")
@click.option("--hosts", metavar="HOST,…", help="Follow URLs on these hosts (default: the ruleset's "
                                                "shortener_hosts).")
@click.option("--all", "all_urls", is_flag=True, help="Follow every URL not yet followed, whatever its host.")
@click.option("--limit", type=click.IntRange(min=1), metavar="N", help="At most N URLs in this run.")
@click.option("--retry-failed", is_flag=True,
              help="Follow again the URLs that failed and are due (backoff per failure class).")
@click.option("--retry-failed-now", is_flag=True,
              help="Follow again every URL that failed, now, whether it is due or not (after fixing a "
                   "cause: a CA bundle, a network outage).")
@click.option("--retry-refused", is_flag=True,
              help="Follow again the URLs that were refused (after changing allow_networks, or when a "
                   "site's robots.txt changed).")
@click.option("--import", "import_file", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              hidden=True, help="Deprecated: use linkfold redirects load FILE.")
@_pair_options(hidden=True)
@summary_option(also_accept=FORMATS)
@common_options
@pass_ctx
def follow_command(obj: Context, dataset: str | None, hosts: str | None, all_urls: bool, limit: int | None,
                   retry_failed: bool, retry_failed_now: bool, retry_refused: bool, import_file: Path | None,
                   short_column: str, expanded_column: str, fmt: str) -> None:
    """Resolve short links and redirect chains; store each hop as a redirect link.

    Takes the canonical URLs not yet followed whose host is a shortener (the ruleset's shortener_hosts,
    or --hosts), or every one with --all. HEAD first, GET when a server refuses HEAD; up to max_hops
    redirects; robots.txt honoured for GETs; private and reserved addresses are refused (setting
    allow_networks), and so are hosts the rules file lists in never_follow_hosts (nothing is sent).
    Outcomes are stored per URL: resolved, failed (with a class such as dns, timeout, http_4xx, loop) or
    refused, and the summary says why URLs were refused and which setting would allow them. Needs the
    contact setting (LINKFOLD_CONTACT).

    \b
    Example:
      LINKFOLD_CONTACT=mailto:lab@university.example linkfold follow --dataset posts-2031
      linkfold follow --hosts short.test,go.news.example --limit 500
      linkfold follow --retry-failed
      LINKFOLD_CA_BUNDLE=/etc/lab/ca.pem linkfold follow --retry-failed-now
      LINKFOLD_ALLOW_NETWORKS=10.20.0.0/16 linkfold follow --retry-refused
    """
    if import_file is not None:
        if dataset or hosts or all_urls or limit or retry_failed or retry_failed_now or retry_refused:
            raise click.UsageError("--import reads pairs from a file; it takes none of --dataset, --hosts, "
                                   "--all, --limit, --retry-failed, --retry-failed-now, --retry-refused")
        # The old spelling keeps its old meaning: beside --import, --format csv|tsv|jsonl was the file's.
        import_format = fmt if fmt in FORMATS and _given("fmt") else None
        warn_deprecated("linkfold redirects load --input-format" if import_format else "linkfold redirects load")
        out = click.get_current_context().meta.get("linkfold.old_summary", "table") if import_format else fmt
        _load_pairs(obj, import_file, import_format, short_column, expanded_column, out)
        return
    if fmt not in OUTPUT_FORMATS:
        raise click.UsageError(f"--format {fmt}: the format of a file of pairs goes to "
                               "linkfold redirects load --input-format")
    if _given("short_column") or _given("expanded_column"):
        raise click.UsageError("--short-column and --expanded-column belong to linkfold redirects load")
    if all_urls and hosts:
        raise click.UsageError("give --all or --hosts, not both")
    if sum([retry_failed, retry_failed_now, retry_refused]) > 1:
        raise click.UsageError("give one of --retry-failed, --retry-failed-now, --retry-refused")
    result = follow_links(obj.engine(), settings=obj.settings, dataset=dataset, hosts=_hosts(hosts),
                          all_urls=all_urls, limit=limit, retry_failed=retry_failed or retry_failed_now,
                          due_only=not retry_failed_now, retry_refused=retry_refused, progress=obj.progress())
    report_summary(obj, result, fmt)


def _load_pairs(obj: Context, file: Path, input_format: str | None, short_column: str, expanded_column: str,
                fmt: str) -> None:
    summary = import_redirects(obj.engine(), file, fmt=input_format, short_column=short_column,
                               expanded_column=expanded_column, batch_size=obj.settings.batch_size,
                               progress=obj.progress())
    for problem in summary.problems[:SHOWN_PROBLEMS]:
        obj.problem(str(problem))
    hidden = sum(summary.problem_counts.values()) - min(len(summary.problems), SHOWN_PROBLEMS)
    if hidden > 0:
        obj.problem(f"… and {hidden:,} more skipped lines (counted in the summary; run without -q to see it)")
    report_summary(obj, summary, fmt)


@click.group("redirects")
def redirects_group() -> None:
    """Redirects: store (short, expanded) pairs resolved elsewhere as redirect links.

    \b
    Example:
      linkfold redirects load expanded-links.csv --short-column link --expanded-column target
    """


@redirects_group.command("load")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--input-format", "input_format", type=click.Choice(FORMATS), default=None,
              help="Format of FILE (default: from its name: .csv .tsv .jsonl, each optionally .gz).")
@_pair_options()
@summary_option
@common_options
@pass_ctx
def redirects_load_command(obj: Context, file: Path, input_format: str | None, short_column: str,
                           expanded_column: str, fmt: str) -> None:
    """Store the (short, expanded) pairs of FILE as redirect links, without fetching anything.

    FILE is CSV or TSV with a header, or JSON lines (.gz allowed). A bad line is reported as
    FILE:LINE: reason: detail and skipped; loading the same file again adds nothing new. The stage these
    runs are recorded under is ``follow_import`` (docs/following.md).

    \b
    Example:
      linkfold redirects load expanded-links.csv --short-column link --expanded-column target
      linkfold redirects load pairs.jsonl.gz --format json
    """
    _load_pairs(obj, file, input_format, short_column, expanded_column, fmt)


#: Sinks shown under the outcome table; --sinks lists them all.
SHOWN_SINKS = 20


def _sink_rows(sinks: list[Any]) -> list[Mapping[str, Any]]:
    return [s.as_dict() for s in sinks]


@click.command("follow-report")
@click.option("--dataset", metavar="NAME", help="Only URLs sighted in this dataset.")
@click.option("--sinks", "sinks_only", is_flag=True,
              help="List every sink (a redirect or declared-canonical target that joins nothing) with its "
                   "fan-in, instead of the outcomes.")
@format_option()
@common_options
@pass_ctx
def follow_report_command(obj: Context, dataset: str | None, sinks_only: bool, fmt: str) -> None:
    """How following went for the links a dataset holds: resolved, failed by class, refused by reason, and
    the dead share; then the sinks the links lead to.

    Counts the distinct canonical URLs the dataset sighted (every dataset's without --dataset), not the
    URLs that redirect chains passed through. One row per state, failure class and refusal reason, and
    one for the links not followed yet; the rows add up to the links held. The dead share is failed /
    (resolved + failed): refused URLs were never asked. Each refusal reason is explained on stderr with
    the setting that would allow it. A sink is a target that is no article (a home page, a page the site
    rules call no article, a never_article_hosts URL) or that more than sink_fan_in URLs lead to (a
    subscribe page behind every ad click): its links are kept as evidence but join nothing. The table
    shows the largest sinks by fan-in under the outcomes; --sinks lists them all.

    \b
    Example:
      linkfold follow-report --dataset posts-2031
      linkfold follow-report --format jsonl
      linkfold follow-report --sinks --format jsonl
    """
    sinks = list_sinks(obj.engine(), settings=obj.settings, dataset=dataset)
    if sinks_only:
        write_rows(fmt, _sink_rows(sinks), ["url", "sink", "fan_in", "sources", "top_source_host",
                                            "top_host_sources"])
        obj.message(f"{len(sinks):,} sink(s): their links are kept as evidence, never used to join")
        return
    report = follow_report(obj.engine(), dataset=dataset)
    write_rows(fmt, report.rows(), ["state", "failure", "reason", "urls"])
    if fmt == "table" and sinks:
        click.echo(f"\nsinks, largest fan-in first ({min(len(sinks), SHOWN_SINKS)} of {len(sinks):,}; "
                   "--sinks lists all):")
        write_table(_sink_rows(sinks[:SHOWN_SINKS]), ["url", "sink", "fan_in", "sources", "top_source_host"])
    for line in report.lines():
        obj.message(line)
    if sinks:
        obj.message(f"{len(sinks):,} sink(s) among their targets (kept as evidence, never used to join); "
                    "linkfold follow-report --sinks lists them")


def register(cli: click.Group) -> None:
    cli.add_command(follow_command)
    cli.add_command(follow_report_command)
    cli.add_command(redirects_group)
