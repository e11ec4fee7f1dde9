"""``linkfold datasets`` and ``datasets load`` (old spelling ``ingest``), ``rejects``, ``lookup``, ``export``."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import click

from ..ingest import EXPORT_FORMATS, DumpFormat, export_dataset, ingest_dump, lookup
from ..pseudonyms import key_from_settings
from ..store.datasets import get_dataset, iter_rejects, list_datasets, reject_totals
from ._common import (
    Context,
    common_options,
    format_option,
    pass_ctx,
    summary_option,
    warn_deprecated,
    write_jsonl,
    write_rows,
    write_summary,
)

TABLE_LIMIT = 1000
REJECT_FIELDS = ["file", "line_no", "position", "reason", "detail", "excerpt"]


def _load_options(func: Callable) -> Callable:
    """The options of loading a dump, shared by ``datasets load`` and its old spelling ``ingest``."""
    for option in reversed((
        click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path)),
        click.option("--dataset", required=True, metavar="NAME", help="The dataset the files belong to."),
        click.option("--url-column", "url_columns", multiple=True, metavar="COLUMN",
                     help="Column holding the URLs (CSV/TSV: a header name; JSON lines: a dotted path such as "
                          "links.*.url). Repeat for several. Default: a column named 'url'."),
        click.option("--key-column", metavar="COLUMN", help="Column holding the row's own ID (default: the "
                                                            "line number is the key)."),
        click.option("--time-column", metavar="COLUMN", help="Column holding the row's time: ISO 8601 or "
                                                             "Unix epoch seconds/milliseconds; no zone means UTC."),
        click.option("--unit-column", metavar="COLUMN",
                     help="Column (or JSON path) naming the person or account of the row; stored only as its "
                          "keyed pseudonym (needs the setting pseudonym_key or pseudonym_key_file)."),
        click.option("--ruleset", "version", type=click.IntRange(min=1), metavar="VERSION",
                     help="Canonicalise under this stored ruleset version (default: the newest)."),
        click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
                     help="Canonicalise under this rules file (stored as a new ruleset version if new)."),
        click.option("--description", metavar="TEXT", help="What the dataset is (stored with it)."),
    )):
        func = option(func)
    return func


_INPUT_HELP = "Dump format (default: from the file name: .csv .tsv .jsonl .ndjson .txt, each optionally .gz)."


def _load(obj: Context, files: tuple[Path, ...], dataset: str, dump_format: str | None,
          url_columns: tuple[str, ...], key_column: str | None, time_column: str | None,
          unit_column: str | None, version: int | None, rules_file: Path | None, description: str | None,
          fmt: str) -> None:
    if version is not None and rules_file is not None:
        raise click.UsageError("give --ruleset VERSION or --rules FILE, not both")
    settings = obj.settings
    # The key is read only for a load that needs it, so a broken key file never stops other loads.
    key = key_from_settings(settings) if unit_column is not None else None
    summary = ingest_dump(
        obj.engine(), list(files), dataset=dataset, fmt=dump_format, url_column=url_columns or None,
        key_column=key_column, time_column=time_column, unit_column=unit_column, pseudonym_key=key,
        ruleset=version if version is not None else rules_file, description=description,
        batch_size=settings.ingest_batch_size, max_line_bytes=settings.max_line_bytes,
        cache_size=settings.canon_cache_size, progress=obj.progress())
    write_summary(obj, fmt, summary.as_dict(), summary.lines())


@click.command("load")
@_load_options
@click.option("--input-format", "dump_format", type=click.Choice([f.value for f in DumpFormat]), default=None,
              help=_INPUT_HELP)
@summary_option
@common_options
@pass_ctx
def datasets_load_command(obj: Context, files: tuple[Path, ...], dataset: str, dump_format: str | None,
                          url_columns: tuple[str, ...], key_column: str | None, time_column: str | None,
                          unit_column: str | None, version: int | None, rules_file: Path | None,
                          description: str | None, fmt: str) -> None:
    """Load URL dumps into a dataset: raw URLs, canonical URLs and one sighting per URL of each row.

    Bad rows never stop a load: each becomes a reject with file, line and reason (see linkfold
    rejects). Loading the same file into the same dataset again adds nothing; an interrupted load is
    resumed by running the same command again. Only the URLs, the row key and the time are stored, and
    with --unit-column the unit's keyed pseudonym (HMAC-SHA256 under the lab's pseudonym_key), never
    the unit's own ID. The stage these runs are recorded under is ``ingest``.

    \b
    Example:
      linkfold datasets load panel-week1.csv.gz --dataset panel-2031 --key-column visit_id --time-column visited
      linkfold datasets load posts.jsonl --dataset posts --url-column 'entities.links.*.url' --key-column id
      LINKFOLD_PSEUDONYM_KEY_FILE=~/lab.key linkfold datasets load panel.csv --dataset panel --unit-column person
    """
    _load(obj, files, dataset, dump_format, url_columns, key_column, time_column, unit_column, version,
          rules_file, description, fmt)


@click.command("ingest", hidden=True)
@_load_options
@click.option("--format", "dump_format", type=click.Choice([f.value for f in DumpFormat]), default=None,
              help=_INPUT_HELP)
@click.option("--summary", "summary_format", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="text: the summary on stderr; json: one JSON object on stdout.")
@common_options
@pass_ctx
def ingest_command(obj: Context, files: tuple[Path, ...], dataset: str, dump_format: str | None,
                   url_columns: tuple[str, ...], key_column: str | None, time_column: str | None,
                   unit_column: str | None, version: int | None, rules_file: Path | None, description: str | None,
                   summary_format: str) -> None:
    """Deprecated: use `linkfold datasets load` (input format: --input-format; the summary: --format)."""
    # The old spelling keeps its old meanings: --format was the INPUT format here.
    warn_deprecated("linkfold datasets load --input-format" if dump_format is not None
                    else "linkfold datasets load")
    _load(obj, files, dataset, dump_format, url_columns, key_column, time_column, unit_column, version,
          rules_file, description, "json" if summary_format == "json" else "table")


@click.command("rejects")
@click.option("--dataset", required=True, metavar="NAME", help="The dataset whose rejects to list.")
@click.option("--reason", metavar="CODE", help="Only rejects with this reason code (e.g. bad_time).")
@click.option("--limit", type=click.IntRange(min=1), metavar="N", help="At most N rejects.")
@format_option()
@common_options
@pass_ctx
def rejects_command(obj: Context, dataset: str, reason: str | None, limit: int | None, fmt: str) -> None:
    """List the rejects of a dataset: file, line, position (-1 the row, -2 its time, -3 its unit), reason,
    detail.

    \b
    Example:
      linkfold rejects --dataset panel-2031 --reason bad_time --limit 20
    """
    if fmt in ("table", "json") and limit is None:
        limit = TABLE_LIMIT  # a table is built in memory to align it; JSON lines stream any number
    with obj.engine().connect() as conn:
        ds = get_dataset(conn, dataset)
        rows = iter_rejects(conn, ds["id"], reason=reason, limit=limit)
        n = write_rows(fmt, rows, REJECT_FIELDS)
        totals = reject_totals(conn, ds["id"])
    by_reason = ", ".join(f"{k} {v:,}" for k, v in totals.items()) or "none"
    obj.message(f"{n:,} rejects listed; dataset {dataset!r} holds {sum(totals.values()):,} ({by_reason})")
    if fmt in ("table", "json") and n == limit:
        obj.message(f"(at most {limit:,} shown: give --limit N, or --format jsonl for all of them)")


def _stdin_items() -> Iterator[str]:
    for line in sys.stdin:
        text = line.rstrip("\r\n")
        if text.strip():
            yield text


@click.command("lookup")
@click.argument("items", nargs=-1, metavar="URL|KEY…")
@common_options
@pass_ctx
def lookup_command(obj: Context, items: tuple[str, ...]) -> None:
    """What the registry knows about URLs, url keys or IDs; one JSON object a line on stdout.

    Reads stdin, one a line, when no argument (or '-') is given. Each object has input, canonical,
    url_key, domain, outlet, seen, sightings, datasets, matched_by, article_id, story_id, error,
    id_history, and what the URL stands for after short links and redirects: final_url, final_domain,
    final_outlet, final_is_article (null for a short link not yet followed). A URL never loaded is
    canonicalised on the fly (seen: false). An article or story ID answers with id_history and cluster
    (its members, outlets, title and founder). Nothing is stored.

    \b
    Example:
      linkfold lookup 'https://www.daily-harbour.example/2031/05/harbour-bridge?utm_source=feed'
      cut -f2 links.tsv | linkfold lookup > answers.jsonl
    """
    source = _stdin_items() if not items or items == ("-",) else iter(items)
    write_jsonl(lookup(obj.engine(), source, cache_size=obj.settings.canon_cache_size))


@click.command("export")
@click.option("--dataset", required=True, metavar="NAME", help="The dataset to export.")
@format_option(EXPORT_FORMATS, default="csv", help="csv (with a header), jsonl, or parquet (needs --out).")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="File to write (default: stdout, for csv and jsonl).")
@common_options
@pass_ctx
def export_command(obj: Context, dataset: str, fmt: str, out: Path | None) -> None:
    """Write a dataset's linkage table: one row per sighting, the table to join datasets on.

    Columns: dataset, file, line_no, position, row_key, seen_at, raw_url, canonical_url, url_key,
    domain, outlet, article_id, story_id (empty until IDs are assigned), then what the URL stands for
    after short links and redirects: final_url, final_domain, final_outlet, final_is_article (empty for
    a short link not yet followed, or whose follow failed).

    \b
    Example:
      linkfold export --dataset panel-2031 --format parquet --out panel-2031.parquet
    """
    result = export_dataset(obj.engine(), dataset, fmt=fmt, out=out, progress=obj.progress())
    for line in result.lines():
        obj.message(line)


@click.group("datasets", invoke_without_command=True)
@format_option()
@common_options
@pass_ctx
@click.pass_context
def datasets_group(ctx: click.Context, obj: Context, fmt: str) -> None:
    """List the datasets with their files, rows, sightings and rejects; `datasets load` brings one in.

    \b
    Example:
      linkfold datasets --format jsonl
      linkfold datasets load panel-week1.csv.gz --dataset panel-2031
    """
    if ctx.invoked_subcommand is not None:
        return
    with obj.engine().connect() as conn:
        rows = list_datasets(conn)
    if not rows and fmt == "table":
        obj.message("no datasets yet: load one with linkfold datasets load FILE --dataset NAME")
        return
    write_rows(fmt, rows, ["dataset", "files", "rows", "sightings", "rejects", "files_loading", "ruleset",
                           "last_loaded_at", "description"])


datasets_group.add_command(datasets_load_command)


def register(cli: click.Group) -> None:
    for command in (ingest_command, rejects_command, lookup_command, export_command, datasets_group):
        cli.add_command(command)
