"""``linkfold exposure`` and ``linkfold pseudonymise``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from ..errors import ConfigError
from ..exposure import EXPOSURE_FORMATS, LEVELS, PERIODS, write_exposure
from ..pseudonyms import Pseudonymiser, require_key, unit_text
from ..store.pseudonym_keys import stored_fingerprint
from ._common import Context, common_options, format_option, pass_ctx, to_json


@click.command("exposure")
@click.option("--dataset", "datasets", required=True, multiple=True, metavar="NAME",
              help="The dataset; repeat for several (one table with a dataset column).")
@click.option("--level", type=click.Choice(LEVELS), default="outlet", show_default=True,
              help="What a unit was exposed to: the outlet, the article ID or the story ID of the URL each "
                   "sighting stands for.")
@click.option("--by", type=click.Choice(PERIODS), default=None,
              help="One row per period too (UTC; weeks start on Monday; named by their first day).")
@click.option("--all-urls", is_flag=True,
              help="Count every sighting, not only those whose final URL is an article by the site rules.")
@format_option(EXPOSURE_FORMATS, default="csv", help="csv (with a header), jsonl, or parquet (needs --out).")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="File to write (default: stdout, for csv and jsonl).")
@common_options
@pass_ctx
def exposure_command(obj: Context, datasets: tuple[str, ...], level: str, by: str | None, all_urls: bool,
                     fmt: str, out: Path | None) -> None:
    """Write the exposure table: one row per unit × outlet (or article, story) (× period).

    Columns: unit (the keyed pseudonym), outlet | article_id | story_id, [period], sightings,
    first_seen, last_seen; with several --dataset a dataset column first; at outlet level the attributes
    of the outlet list in force. A sighting counts for the URL it stands for after short links and
    redirects. Sightings without a unit, not articles (unless --all-urls), with nothing to count for
    yet, or (with --by) without a time are left out; the summary on stderr counts each. Unit-level rows
    are personal data: see docs/exposure.md.

    \b
    Example:
      linkfold exposure --dataset panel-2031 --level outlet --by week --format parquet --out exp.parquet
      linkfold exposure --dataset panel-2031 --dataset posts-2031 --level story > exposure.csv
    """
    summary = write_exposure(obj.engine(), datasets=list(datasets), level=level, by=by, all_urls=all_urls,
                             fmt=fmt, out=out, progress=obj.progress())
    for line in summary.lines():
        obj.message(line)


@click.command("pseudonymise")
@click.option("--check", is_flag=True, help="First check the key against the registry's (--db): refused when "
                                            "its units were pseudonymised under another key.")
@common_options
@pass_ctx
def pseudonymise_command(obj: Context, check: bool) -> None:
    """Print the keyed pseudonym of each unit ID read on stdin, one JSON object a line.

    Each object has input (the line as read) and pseudonym (null for a blank line), computed exactly as
    ingest --unit-column stores units (surrounding white space removed), under the same setting
    pseudonym_key or pseudonym_key_file: the way to join survey answers to exposure tables. The key's
    fingerprint goes to stderr; --check compares it with the registry's. Nothing
    is stored; the output holds the raw IDs beside their pseudonyms, so treat it as the survey file
    itself.

    \b
    Example:
      cut -d, -f1 survey.csv | tail -n +2 | linkfold pseudonymise --check > survey-pseudonyms.jsonl
    """
    units = Pseudonymiser(require_key(obj.settings))
    if check:
        with obj.engine().connect() as conn:
            stored = stored_fingerprint(conn)
        if stored is None:
            obj.message("the registry holds no units yet: nothing to check the key against")
        elif stored != units.fingerprint:
            raise ConfigError(f"the registry's units are pseudonymised under another key (fingerprint {stored}; "
                              f"the key given has {units.fingerprint})")
    obj.message(f"pseudonyms under the key with fingerprint {units.fingerprint}")
    out = sys.stdout
    n = 0
    for line in sys.stdin:
        raw = line.rstrip("\r\n")
        text = unit_text(raw)
        out.write(to_json({"input": raw, "pseudonym": units(text) if text is not None else None}) + "\n")
        n += 1
    out.flush()
    obj.message(f"{n:,} IDs pseudonymised")


def register(cli: click.Group) -> None:
    for command in (exposure_command, pseudonymise_command):
        cli.add_command(command)
