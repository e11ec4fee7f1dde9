"""``linkfold corpus`` and ``linkfold compare``."""

from __future__ import annotations

from pathlib import Path

import click

from ..compare import DEFAULT_TOP, compare_datasets
from ..corpus import CORPUS_FORMATS, LEVELS, MAX_NGRAM, Preparation, write_corpus
from ..exposure import DEFAULT_MIN_UNITS
from ._common import Context, common_options, format_option, pass_ctx, write_rows

_MIN_UNITS_HELP = (f"Unit counts of fewer units are given as null (default {DEFAULT_MIN_UNITS}, the floor of "
                   "exposure's aggregate; see docs/exposure.md).")


@click.command("corpus")
@click.option("--level", type=click.Choice(LEVELS), default="story", show_default=True,
              help="One record per story (syndicated copies once) or per article (one per outlet).")
@click.option("--dataset", "datasets", multiple=True, metavar="NAME",
              help="Count sightings of this dataset; repeat for several (default: every dataset).")
@click.option("--language", metavar="TAG",
              help="Only texts in this language (BCP 47: 'de' takes 'de-AT' too; 'de-AT' only itself).")
@click.option("--min-words", type=click.IntRange(min=0), default=0, show_default=True, metavar="N",
              help="Only texts of at least N words.")
@format_option(CORPUS_FORMATS, default="jsonl", help="jsonl, or parquet (needs --out).")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="File to write, replaced when complete (default: stdout, for jsonl).")
@click.option("--all-urls", is_flag=True,
              help="Count every sighting, not only those whose final URL is an article by the site rules.")
@click.option("--min-units", type=click.IntRange(min=1), default=DEFAULT_MIN_UNITS, show_default=True,
              metavar="N", help=_MIN_UNITS_HELP)
@click.option("--tokens", is_flag=True, help="Add the text's tokens (a list; the raw text stays).")
@click.option("--lowercase", is_flag=True, help="Lower-case the tokens (implies --tokens).")
@click.option("--drop-stop-words", is_flag=True,
              help="Drop the stop words of the text's language from the tokens (implies --tokens).")
@click.option("--ngrams", type=click.IntRange(1, MAX_NGRAM), default=1, show_default=True, metavar="N",
              help="Add the 2- … N-grams of the tokens, joined by '_' (implies --tokens).")
@common_options
@pass_ctx
def corpus_command(obj: Context, level: str, datasets: tuple[str, ...], language: str | None, min_words: int,
                   fmt: str, out: Path | None, all_urls: bool, min_units: int, tokens: bool, lowercase: bool,
                   drop_stop_words: bool, ngrams: int) -> None:
    """Write the corpus: one text per story (or article) seen in the datasets.

    Each record has the ID, the representative document's title, text, published date, language, word
    count and URL (the earliest-published current document of the cluster; ties to the smallest url
    key), members, articles (story level), outlets, and its sightings, distinct units, first and last
    seen, in total and per dataset. IDs seen without a usable text are left out and counted on stderr.
    See docs/corpus.md.

    \b
    Example:
      linkfold corpus --level story --dataset panel-2031 --dataset posts-2031 --language en \\
          --min-words 100 --format parquet --out stories.parquet
      linkfold corpus --level article --dataset posts-2031 --lowercase --drop-stop-words --ngrams 2 > a.jsonl
    """
    how = Preparation(tokens=tokens, lowercase=lowercase, stop_words=drop_stop_words, ngrams=ngrams)
    summary = write_corpus(obj.engine(), datasets=list(datasets), level=level, language=language,
                           min_words=min_words, all_urls=all_urls, min_units=min_units, preparation=how,
                           fmt=fmt, out=out, progress=obj.progress())
    for line in summary.lines():
        obj.message(line)


@click.command("compare")
@click.argument("datasets", nargs=-1, required=True, metavar="D1 D2 [D3 …]")
@click.option("--level", type=click.Choice(LEVELS), default="story", show_default=True,
              help="Overlap and top lists of story IDs or article IDs.")
@click.option("--top", type=click.IntRange(1, 1000), default=DEFAULT_TOP, show_default=True, metavar="N",
              help="How many top stories per dataset, and seen only there.")
@click.option("--all-urls", is_flag=True,
              help="Count every sighting, not only those whose final URL is an article by the site rules.")
@click.option("--min-units", type=click.IntRange(min=1), default=DEFAULT_MIN_UNITS, show_default=True,
              metavar="N", help=_MIN_UNITS_HELP)
@format_option(("table", "json", "jsonl"), help="table (for people); json (one array) or jsonl (one object a "
                                                  "line), each object with a 'section' field.")
@common_options
@pass_ctx
def compare_command(obj: Context, datasets: tuple[str, ...], level: str, top: int, all_urls: bool,
                    min_units: int, fmt: str) -> None:
    """Compare datasets side by side: outlets, outlet attributes, story overlap, top stories.

    Per outlet: sightings and their share of the dataset's, units and the share of the dataset's units
    who saw it (unit counts below --min-units suppressed). Per attribute of the outlet list in force:
    the same per value. Per pair of datasets: stories in both, the Jaccard index of the story sets and
    the weighted Jaccard of their sighting shares. Per dataset: the top stories and those seen only
    there. See docs/corpus.md.

    \b
    Example:
      linkfold compare panel-2031 posts-2031
      linkfold compare panel-2031 posts-2031 --format jsonl --top 20 > comparison.jsonl
    """
    result = compare_datasets(obj.engine(), datasets=list(datasets), level=level, top=top, all_urls=all_urls,
                              min_units=min_units)
    if fmt in ("json", "jsonl"):
        write_rows(fmt, result.lines_json(), [])
    else:
        click.echo(result.table())
    for line in result.lines():
        obj.message(line)


def register(cli: click.Group) -> None:
    for command in (corpus_command, compare_command):
        cli.add_command(command)
