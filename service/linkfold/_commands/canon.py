"""``linkfold canonicalize``, ``linkfold rules …`` and ``linkfold recanonicalize``."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO

import click

from ..canon import Canonicaliser, Ruleset, load_rules
from ..canon.records import Tally, records
from ..errors import InputError
from ..progress import Progress
from ..store import rulesets as registry
from ._common import (
    Context,
    common_options,
    deprecated_command,
    format_option,
    pass_ctx,
    report_summary,
    summary_option,
    to_json,
    write_jsonl,
    write_rows,
    write_table,
)


def _lines(stream: BinaryIO, name: str, obj: Context) -> Iterator[str]:
    """Lines of a byte stream as text, without their line ends; undecodable lines are reported."""
    for lineno, raw in enumerate(stream, start=1):
        raw = raw.rstrip(b"\n").rstrip(b"\r")
        try:
            yield raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            obj.message(f"linkfold: warning: {name}:{lineno}: not UTF-8 (byte {exc.start + 1}); "
                        "reported as bad_unicode")
            # Lone surrogates make the canonicaliser refuse the line with reason bad_unicode, and the
            # record still shows which line it was.
            yield raw.decode("utf-8", "surrogateescape")


def _inputs(files: tuple[Path, ...], obj: Context, progress: Progress) -> Iterator[str]:
    if not files:
        yield from _counted(_lines(sys.stdin.buffer, "<stdin>", obj), progress)
        return
    for path in files:
        try:
            stream = path.open("rb")
        except OSError as exc:
            raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
        with stream:
            yield from _counted(_lines(stream, str(path), obj), progress)


def _counted(lines: Iterator[str], progress: Progress) -> Iterator[str]:
    for line in lines:
        yield line
        progress.advance()


def _chosen_rules(obj: Context, rules_file: Path | None, version: int | None) -> Ruleset | None:
    if rules_file is not None and version is not None:
        raise click.UsageError("give --rules FILE or --ruleset VERSION, not both")
    if rules_file is not None:
        return load_rules(rules_file)
    if version is not None:
        with obj.engine().connect() as conn:
            return registry.get_ruleset(conn, version)
    return None


@click.command("canonicalize")
@click.argument("files", nargs=-1, type=click.Path(dir_okay=False, path_type=Path))
@click.option("--rules", "rules_file", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="A rules file laid over the defaults (default: the built-in rules).")
@click.option("--ruleset", "version", type=click.IntRange(min=1), metavar="VERSION",
              help="A ruleset version stored in the registry, instead of --rules.")
@click.option("--explain", is_flag=True, help="Add the list of steps that changed each URL ('steps').")
@common_options
@pass_ctx
def canonicalize_command(obj: Context, files: tuple[Path, ...], rules_file: Path | None, version: int | None,
                         explain: bool) -> None:
    """Canonicalise raw URLs, one a line, from FILES or stdin; one JSON object a line on stdout.

    Each object has input, canonical, url_key, host, domain, outlet, is_article, ruleset, error (null or
    a reason code such as not_http) and detail; with --explain also steps. Nothing is stored.

    \b
    Example:
      printf 'http://www.daily.example/a/?utm_source=x\\n' | linkfold canonicalize --explain
      linkfold canonicalize --rules lab-rules.toml urls.txt
    """
    rules = _chosen_rules(obj, rules_file, version)
    canon = Canonicaliser(rules, cache_size=obj.settings.canon_cache_size)
    progress = obj.progress()
    tally = Tally()
    progress.start("canonicalize")
    try:
        write_jsonl(records(_inputs(files, obj, progress), canon, explain=explain, tally=tally))
    finally:
        progress.finish()
    obj.message(tally.summary())


@click.group("rules")
def rules_group() -> None:
    """Check, store and read rulesets (the lab-editable site rules).

    \b
    Example:
      linkfold rules check lab-rules.toml
      linkfold rules load lab-rules.toml --name "demo outlets"
      linkfold rules list
      linkfold rules suggest --out suggested.toml --diff
    """


@rules_group.command("check")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@common_options
@pass_ctx
def rules_check(obj: Context, file: Path) -> None:
    """Validate a rules file: an OK line (and the never-follow and never-article host lists), or the
    file, line and reason of the first error (exit 5).

    \b
    Example:
      linkfold rules check lab-rules.toml
    """
    ruleset = load_rules(file)
    click.echo(f"{file}: OK ({len(ruleset.sites)} sites, {len(ruleset.shortener_hosts)} shortener hosts, "
               f"digest {ruleset.digest[:12]})")
    # The host lists change what is followed and what may join, so they are shown, not just counted.
    for key, hosts in (("never_follow_hosts", ruleset.never_follow_hosts),
                       ("never_article_hosts", ruleset.never_article_hosts)):
        if hosts:
            click.echo(f"  {key} ({len(hosts)}, subdomains included): {', '.join(sorted(hosts))}")


@rules_group.command("load")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--name", help="Name of the ruleset in the registry (default: the file's name key, else its "
                             "file name).")
@common_options
@pass_ctx
def rules_load(obj: Context, file: Path, name: str | None) -> None:
    """Store a rules file as a new ruleset version (the same rules give the same version again).

    \b
    Example:
      linkfold rules load lab-rules.toml --name "demo outlets"
    """
    ruleset = load_rules(file)
    engine = obj.engine()
    with engine.begin() as conn:
        known = {r["digest"]: r["version"] for r in registry.list_rulesets(conn)}
        version = registry.store_ruleset(conn, ruleset, name=name)
    is_new = ruleset.digest not in known
    click.echo(to_json({"version": version, "name": name or ruleset.name, "digest": ruleset.digest,
                        "new": is_new}))
    obj.message(f"ruleset version {version} ({'stored' if is_new else 'already stored'})")


@rules_group.command("list")
@format_option()
@common_options
@pass_ctx
def rules_list(obj: Context, fmt: str) -> None:
    """List the stored ruleset versions, oldest first.

    \b
    Example:
      linkfold rules list --format jsonl
    """
    with obj.engine().connect() as conn:
        rows = registry.list_rulesets(conn)
    if fmt != "table":
        write_rows(fmt, rows, ["version", "name", "digest", "canon_version", "psl_version", "current",
                               "created_at"])
        return
    for row in rows:
        row["digest"] = row["digest"][:12]
        row["created_at"] = row["created_at"].isoformat(timespec="seconds")
    write_table(rows, ["version", "name", "digest", "canon_version", "psl_version", "current", "created_at"])


@rules_group.command("show")
@click.argument("version", type=click.IntRange(min=1), required=False)
@common_options
@pass_ctx
def rules_show(obj: Context, version: int | None) -> None:
    """Print the rules text of a stored version (default: the newest).

    \b
    Example:
      linkfold rules show 2 > rules-v2.toml
    """
    engine = obj.engine()
    with engine.begin() as conn:
        if version is None:
            version, ruleset = registry.latest_ruleset(conn)
        else:
            ruleset = registry.get_ruleset(conn, version)
    obj.message(f"ruleset version {version}: {ruleset.name} ({ruleset.digest[:12]})")
    click.echo(ruleset.source, nl=not ruleset.source.endswith("\n"))


@click.command("recanonicalize")
@summary_option
@common_options
@pass_ctx
def recanonicalize_command(obj: Context, fmt: str) -> None:
    """Canonicalise again every stored raw URL that is under an older ruleset than the newest.

    After `linkfold rules load` stores a new ruleset version, raw URLs canonicalised under older versions
    are pending; each gets its canonical URL under the new rules (a new canonical row when the form is
    new; old rows are kept) and the move is recorded (old -> new, ruleset, run), so an earlier canonical
    URL can be traced forward. Resumable: a second run continues where an interrupted one stopped. The
    nightly job runs this step first.

    \b
    Example:
      linkfold rules load lab-rules.toml && linkfold recanonicalize
      linkfold recanonicalize -q --format json
    """
    from ..ingest.recanon import recanonicalize

    summary = recanonicalize(obj.engine(), settings=obj.settings, progress=obj.progress())
    report_summary(obj, summary, fmt)


@rules_group.command("suggest")
@click.option("--outlet", metavar="O", help="Only this outlet (its name, a host or a registered domain).")
@click.option("--min-support", type=click.IntRange(min=1), default=None, metavar="N",
              help="Least evidence for any proposal: URLs with text, URL pairs, followed URLs (default 10).")
@click.option("--out", "out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="Write the proposed rules file here (never over a file this command did not write).")
@click.option("--diff", is_flag=True, help="Show what would change against the ruleset in force: the rules, "
                                           "and how many stored URLs would change canonical form or article status.")
@common_options
@pass_ctx
def rules_suggest(obj: Context, outlet: str | None, min_support: int | None, out: Path | None, diff: bool) -> None:
    """Propose site rules from the stored evidence: article patterns, parameters to drop or keep,
    shortener, never-article and alias hosts, each with its evidence in a comment. Writes nothing to
    the registry: review the file, then `linkfold rules load FILE` and `linkfold recanonicalize` (the
    nightly job runs it first).

    \b
    Example:
      linkfold rules suggest --out suggested.toml --diff
      linkfold rules suggest --outlet northvale-herald.example --min-support 20 --out herald.toml
    """
    from ..suggest import DEFAULT_MIN_SUPPORT, suggest_rules_file

    if out is None and not diff:
        raise click.UsageError("give --out FILE, --diff, or both")
    result = suggest_rules_file(obj.engine(), out=out, outlet=outlet,
                                min_support=min_support or DEFAULT_MIN_SUPPORT, diff=diff,
                                sink_fan_in=obj.settings.sink_fan_in, cache_size=obj.settings.canon_cache_size,
                                progress=obj.progress())
    if result.diff is not None:
        for line in result.diff.lines():
            click.echo(line)
    for line in result.lines():
        obj.message(line)


rules_group.add_command(deprecated_command(rules_load, "add", "linkfold rules load"))


def register(cli: click.Group) -> None:
    cli.add_command(canonicalize_command)
    cli.add_command(rules_group)
    cli.add_command(recanonicalize_command)
