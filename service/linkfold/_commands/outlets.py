"""``linkfold outlets``, ``outlets load``, ``outlets report``, ``outlets versions``."""

from __future__ import annotations

import csv
import json
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import click

from .._tabular import csv_cell
from ..errors import OutletListError
from ..outlets import (
    PREFER_CHOICES,
    current_conflicts,
    list_outlet_lists,
    load_outlet_list,
    outlet_report,
    outlet_table,
)
from ..outlets.listfile import MAX_PROBLEMS
from ..outlets.report import DEFAULT_SHAPES, REPORT_COLUMNS
from ._common import Context, common_options, format_option, pass_ctx, write_rows, write_table

_format_option = format_option()


def _dataset_option(func: Any) -> Any:
    return click.option("--dataset", "datasets", multiple=True, metavar="NAME",
                        help="Count only these datasets (repeat for several; default: all).")(func)


def _write_csv(rows: Sequence[Mapping[str, Any]], columns: Sequence[str]) -> None:
    writer = csv.writer(sys.stdout, lineterminator="\r\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([csv_cell(row.get(c)) for c in columns])
    sys.stdout.flush()


def _warn_conflicts(obj: Context) -> None:
    with obj.engine().connect() as conn:
        found = current_conflicts(conn)
    for c in found[:5]:
        obj.message(f"linkfold: warning: outlet list line {c.line_no}: {c.reason()}; the list's name is used "
                    "(load the list again after changing either, docs/outlets.md)")


@click.group("outlets", invoke_without_command=True)
@_dataset_option
@click.option("--listed", "listed_only", is_flag=True, help="Only the outlets the outlet list in force names.")
@_format_option
@common_options
@pass_ctx
@click.pass_context
def outlets_group(ctx: click.Context, obj: Context, datasets: tuple[str, ...], listed_only: bool, fmt: str) -> None:
    """List outlets with their attributes and counts: datasets, sightings, units, URLs, articles, stories.

    A sighting counts for the outlet of the URL it stands for after short links and redirects, under the
    outlet list in force (docs/outlets.md).

    \b
    Example:
      linkfold outlets
      linkfold outlets --dataset northvale-panel --format csv > outlets.csv
      linkfold outlets load lab-outlets.csv
      linkfold outlets report
    """
    if ctx.invoked_subcommand is not None:
        return
    with obj.engine().connect() as conn:
        table = outlet_table(conn, datasets=list(datasets) or None, listed_only=listed_only,
                             progress=obj.progress())
    if fmt in ("json", "jsonl"):
        write_rows(fmt, table.rows, table.columns)
    elif fmt == "csv":
        _write_csv(table.rows, table.columns)
    elif table.rows:
        write_table(table.rows, table.columns)
    s = table.summary
    obj.message(f"{s['outlets']:,} outlets; {s['counted']:,} of {s['sightings']:,} sightings counted"
                + (f"; {s['short_links_unresolved']:,} short links not resolved yet" if s["short_links_unresolved"]
                   else "")
                + (f"; {s['unparsable']:,} unparsable" if s["unparsable"] else "")
                + (f"; {s['no_outlet']:,} on hosts without an outlet (IP addresses)" if s["no_outlet"] else "")
                + ("" if table.list_version is not None else
                   "; no outlet list loaded (linkfold outlets load FILE)"))
    if table.list_version is not None:
        _warn_conflicts(obj)


@outlets_group.command("load")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--prefer", type=click.Choice(PREFER_CHOICES), default=None,
              help="When an entry's outlet name differs from the rules file's for the same host: whose name "
                   "wins (default: refuse the load and list the conflicts).")
@click.option("--name", help="Name of the version in the registry (default: the file name).")
@click.option("--check", "check_only", is_flag=True, help="Check the file against the ruleset in force; store "
                                                            "nothing.")
@common_options
@pass_ctx
def outlets_load(obj: Context, file: Path, prefer: str | None, name: str | None, check_only: bool) -> None:
    """Store an outlet list (CSV) as a new version; the newest version is in force.

    The header names a 'domain' (or 'host') column and an 'outlet' column; every other column is a
    lab-defined attribute. The same content again is a no-op that says so. A bad line (missing column,
    duplicate domain, empty outlet name, not a domain) or an outlet name that disagrees with the rules
    file names the file and line, and nothing is stored.

    \b
    Example:
      linkfold outlets load lab-outlets.csv
      linkfold outlets load lab-outlets.csv --prefer rules
    """
    try:
        result = load_outlet_list(obj.engine(), file, prefer=prefer,  # type: ignore[arg-type]
                                  name=name, check_only=check_only)
    except OutletListError as exc:
        if len(exc.problems) < 2:
            raise
        # Every problem on its own line, so a lab fixes the file in one pass.
        for line, reason in exc.problems:
            click.echo(f"linkfold: error: {file}:{line}: {reason}", err=True)
        shown = len(exc.problems)
        total = f"{shown} or more" if shown >= MAX_PROBLEMS else str(shown)
        raise OutletListError(f"{total} problems in {file}; nothing was stored") from None
    for c in result.conflicts:
        winner = "the rules file's" if result.prefer == "rules" else "the list's"
        obj.message(f"{file}:{c.line_no}: {c.reason()}; {winner} name is used (--prefer {result.prefer})")
    if check_only:
        obj.message(f"{file}: OK, {result.entries:,} entries, {result.outlets:,} outlets, attributes: "
                    f"{', '.join(result.columns) or 'none'} (checked only, nothing stored)")
        return
    click.echo(json.dumps({"version": result.version, "name": result.name, "new": result.created,
                           "in_force": result.in_force, "entries": result.entries, "outlets": result.outlets,
                           "columns": list(result.columns)}, ensure_ascii=False))
    if result.created:
        obj.message(f"outlet list version {result.version} stored and in force: {result.entries:,} entries, "
                    f"{result.outlets:,} outlets, attributes: {', '.join(result.columns) or 'none'}")
    else:
        force = ("it is in force" if result.in_force == result.version
                 else f"version {result.in_force} is in force")
        obj.message(f"outlet list already stored as version {result.version}; nothing changed ({force})")


@outlets_group.command("report")
@_dataset_option
@click.option("--outlet", "outlets", multiple=True, metavar="NAME", help="Only these outlets (repeat for several).")
@click.option("--shapes", type=click.IntRange(min=0), default=DEFAULT_SHAPES, show_default=True,
              help="How many non-article path shapes to show per outlet (0: none).")
@_format_option
@common_options
@pass_ctx
def outlets_report(obj: Context, datasets: tuple[str, ...], outlets: tuple[str, ...], shapes: int, fmt: str) -> None:
    """Per-outlet coverage: article share, short links resolved, pages fetched, usable text, and the most
    frequent path shapes of URLs that are not articles by the site rules.

    \b
    Example:
      linkfold outlets report
      linkfold outlets report --outlet "Northvale Herald" --shapes 20 --format jsonl
    """
    with obj.engine().connect() as conn:
        report = outlet_report(conn, datasets=list(datasets) or None, outlets=list(outlets) or None, shapes=shapes,
                               progress=obj.progress())
    rows = report.rows
    if fmt in ("json", "jsonl"):
        write_rows(fmt, rows, REPORT_COLUMNS)
    elif fmt == "csv":
        _write_csv(rows, [*REPORT_COLUMNS, "shapes"])
    elif rows:
        write_table(rows, REPORT_COLUMNS)
        shaped = [{"outlet": r["outlet"], **s} for r in rows for s in r["shapes"]]
        if shaped:
            click.echo("")
            click.echo("most frequent path shapes that are not articles:")
            write_table(shaped, ["outlet", "shape", "sightings", "urls"])
        click.echo("")
        click.echo("site rules proposed from the evidence, per outlet:")
        for r in rows:
            click.echo(f"  {r['suggest']}")
    s = report.summary
    short = s["short_links"]
    share = "n/a" if s["article_share"] is None else f"{s['article_share']:.1%}"
    obj.message(f"{s['outlets']:,} outlets, {s['sightings']:,} sightings, {share} articles by the site rules; "
                f"short links: {short['sightings']:,} sightings, {short['resolved']:,} resolved, "
                f"{short['failed']:,} failed, {short['refused']:,} refused, {short['pending']:,} not followed yet")


@outlets_group.command("versions")
@format_option()
@common_options
@pass_ctx
def outlets_versions(obj: Context, fmt: str) -> None:
    """List the stored outlet list versions, oldest first; the newest is in force.

    \b
    Example:
      linkfold outlets versions --format jsonl
    """
    with obj.engine().connect() as conn:
        rows = list_outlet_lists(conn)
    if fmt != "table":
        write_rows(fmt, rows, ["version", "name", "entries", "outlets", "columns", "in_force", "created_at"])
    elif rows:
        write_table([{**r, "columns": ",".join(r["columns"])} for r in rows],
                    ["version", "name", "entries", "outlets", "columns", "in_force", "created_at"])
    else:
        obj.message("no outlet list yet: load one with linkfold outlets load FILE")


def register(cli: click.Group) -> None:
    cli.add_command(outlets_group)
