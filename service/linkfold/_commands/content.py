"""``linkfold fetch``, ``linkfold pages load`` (old spelling ``import-pages``), ``linkfold documents load|show`` and ``linkfold extract``."""

from __future__ import annotations

from pathlib import Path

import click

from ..content.extracting import extract_pages
from ..content.fetching import fetch_pages
from ..content.loading import load_documents
from ..content.page_import import import_pages
from ..store import pages as store_pages
from ._common import (
    Context,
    common_options,
    deprecated_command,
    pass_ctx,
    report_summary,
    summary_option,
    write_jsonl,
)

#: Problems printed one by one; the rest are counted in the summary.
SHOWN_PROBLEMS = 50

def _report(obj: Context, summary, fmt: str) -> None:
    # The bad records first, one by one (even under -q: they are what a person has to fix).
    problems = getattr(summary, "problems", None)
    if problems is not None:
        for problem in problems.kept[:SHOWN_PROBLEMS]:
            obj.problem(str(problem))
        hidden = problems.total - min(len(problems.kept), SHOWN_PROBLEMS)
        if hidden > 0:
            obj.problem(f"… and {hidden:,} more problems (counted in the summary; run without -q to see it)")
    report_summary(obj, summary, fmt)


@click.command("fetch")
@click.option("--dataset", metavar="NAME", help="Only URLs sighted in this dataset.")
@click.option("--only-articles", is_flag=True,
              help="Only URLs that match the ruleset's article patterns (they come first anyway).")
@click.option("--limit", type=click.IntRange(min=1), metavar="N", help="At most N URLs in this run.")
@click.option("--retry-refused", is_flag=True,
              help="Fetch again the URLs that were refused (after changing allow_networks, or when a site's "
                   "robots.txt changed).")
@summary_option
@common_options
@pass_ctx
def fetch_command(obj: Context, dataset: str | None, only_articles: bool, limit: int | None,
                  retry_refused: bool, fmt: str) -> None:
    """GET pending canonical URLs and store their pages.

    Pending: no page stored yet, and never tried or failed with the next attempt due (backoff per failure
    class). URLs matching the ruleset's article patterns go first. Through the same safe client as
    `linkfold follow`: robots.txt before every GET, private and reserved addresses refused (setting
    allow_networks), per-host delay, body cap http_max_bytes (a longer page is cut and flagged). Needs
    the contact setting (LINKFOLD_CONTACT).

    \b
    Example:
      LINKFOLD_CONTACT=mailto:lab@university.example linkfold fetch --dataset panel-2031 --only-articles
      linkfold fetch --limit 1000 --format json
    """
    summary = fetch_pages(obj.engine(), settings=obj.settings, dataset=dataset, only_articles=only_articles,
                          limit=limit, retry_refused=retry_refused, progress=obj.progress())
    _report(obj, summary, fmt)


@click.command("load")
@click.argument("paths", nargs=-1, required=True, type=click.Path(path_type=Path))
@summary_option
@common_options
@pass_ctx
def pages_load_command(obj: Context, paths: tuple[Path, ...], fmt: str) -> None:
    """Store pages from WARC files, page directories or page JSON lines, as if fetched.

    Each PATH is a WARC file (.warc or .warc.gz), a directory with a pages.tsv manifest (file<TAB>url,
    optional final_url, status, fetched_at, content_type), or JSON lines with url and html. The format is
    found from the content, not the name. Bad records are reported as FILE:LINE: reason and skipped;
    importing the same input again stores nothing new.

    \b
    Example:
      linkfold pages load crawl-2031-10.warc.gz saved-pages/
      linkfold pages load pages.jsonl --format json
    """
    summary = import_pages(obj.engine(), paths, settings=obj.settings, progress=obj.progress())
    _report(obj, summary, fmt)


@click.group("pages")
def pages_group() -> None:
    """Pages: store pages fetched elsewhere (WARC files, page directories, page JSON lines).

    \b
    Example:
      linkfold pages load crawl-2031-10.warc.gz
    """


pages_group.add_command(pages_load_command)


@click.group("documents")
def documents_group() -> None:
    """Documents: load texts extracted elsewhere, or show what is stored for a URL.

    \b
    Example:
      linkfold documents load texts.jsonl
      linkfold documents show https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens
    """


@documents_group.command("load")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@summary_option
@common_options
@pass_ctx
def documents_load_command(obj: Context, file: Path, fmt: str) -> None:
    """Load already-extracted documents from JSON lines.

    One object a line: url, title, text (required), published (ISO 8601), author, language (optional).
    Each URL is canonicalised; bad lines are reported as FILE:LINE: reason and skipped; loading the same
    file again stores nothing new. Texts go through the same normalisation and usable-text rules as
    extracted ones.

    \b
    Example:
      linkfold documents load texts-from-partner-lab.jsonl
      linkfold documents load texts.jsonl.gz --format json
    """
    summary = load_documents(obj.engine(), file, settings=obj.settings, progress=obj.progress())
    _report(obj, summary, fmt)


@documents_group.command("show")
@click.argument("url")
@click.option("--all", "all_documents", is_flag=True,
              help="Every document of the URL (older extractor versions, unusable ones), oldest first.")
@click.option("--no-text", "without_text", is_flag=True, help="Leave the text out of the output.")
@common_options
@pass_ctx
def documents_show_command(obj: Context, url: str, all_documents: bool, without_text: bool) -> None:
    """The current document of a URL as JSON: its newest usable one.

    URL is found the way `linkfold lookup` finds it: the raw URL as loaded, any variant that canonicalises
    to a stored URL under the ruleset in force, a url key, or an article or story ID (its founder's).

    \b
    Example:
      linkfold documents show "https://lakeside-wire.example/wire/20260910/old-mill-bridge-reopens?utm_source=x"
      linkfold documents show https://riverton-daily.test/story/mayor-outlines-budget-121 --all --no-text
    """
    docs = store_pages.documents_for(obj.engine(), url, all_documents=all_documents).documents
    if without_text:
        docs = [{k: v for k, v in d.items() if k != "text"} for d in docs]
    write_jsonl(docs)


@click.command("extract")
@click.option("--reextract", is_flag=True,
              help="Also redo pages whose documents come from an older extractor version (after upgrading "
                   "trafilatura or linkfold); older documents are kept.")
@click.option("--limit", type=click.IntRange(min=1), metavar="N", help="At most N pages in this run.")
@click.option("--cluster", metavar="tcp://HOST:PORT", default=None,
              help="Extract on this Dask scheduler's workers (setting executor; default: every core here).")
@summary_option
@common_options
@pass_ctx
def extract_command(obj: Context, reextract: bool, limit: int | None, cluster: str | None,
                    fmt: str) -> None:
    """Turn stored pages into documents: title, text, date, author, language, declared canonical.

    Pages that yield no usable text (paywall stub, consent wall, video page, too short) are stored with
    the reason. A declared canonical on the same outlet becomes a `declared` link; one naming another
    outlet is recorded as `declared_cross`, not trusted.

    \b
    Example:
      linkfold extract
      linkfold extract --reextract --format json
    """
    settings = obj.settings.replace(executor=cluster) if cluster else obj.settings
    summary = extract_pages(obj.engine(), settings=settings, reextract=reextract, limit=limit,
                            progress=obj.progress())
    _report(obj, summary, fmt)


def register(cli: click.Group) -> None:
    cli.add_command(fetch_command)
    cli.add_command(pages_group)
    cli.add_command(deprecated_command(pages_load_command, "import-pages", "linkfold pages load"))
    cli.add_command(documents_group)
    cli.add_command(extract_command)
