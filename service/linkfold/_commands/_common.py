"""What every command shares: the context, shared options, and output helpers.

Machine-readable output (JSON lines, tables) goes to stdout; progress and messages go to stderr.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import date, datetime
from typing import Any

import click
from sqlalchemy.engine import Engine

from ..progress import SILENT, Progress, StderrProgress
from ..settings import Settings, load_settings


@dataclass
class Context:
    """Per-invocation state: resolved settings and a lazily opened registry."""

    overrides: dict[str, Any] = field(default_factory=dict)
    quiet: bool = False
    _settings: Settings | None = None
    _engine: Engine | None = None

    @property
    def settings(self) -> Settings:
        if self._settings is None:
            self._settings = load_settings(self.overrides)
        return self._settings

    def engine(self, *, check_schema: bool = True) -> Engine:
        """The registry engine; by default refuses a schema that is not at head."""
        from ..store import ensure_schema, make_engine

        if self._engine is None:
            self._engine = make_engine(self.settings.database_url, busy_timeout=self.settings.busy_timeout)
        if check_schema:
            ensure_schema(self._engine)
        return self._engine

    def progress(self) -> Progress:
        return SILENT if self.quiet else StderrProgress()

    def message(self, text: str) -> None:
        """A line for a person, on stderr, unless --quiet."""
        if not self.quiet:
            click.echo(text, err=True)

    def problem(self, text: str) -> None:
        """A line about something wrong with the input (file, line, reason), on stderr even under --quiet:
        -q silences progress and summaries, not what a person has to fix."""
        click.echo(text, err=True)

    def close(self) -> None:
        if self._engine is not None:
            self._engine.dispose()


pass_ctx = click.make_pass_decorator(Context)


def db_option(func: Callable) -> Callable:
    """``--db URL`` on every command, so it can come before or after the command name."""

    def store(ctx: click.Context, _param: click.Parameter, value: str | None) -> str | None:
        if value is not None:
            ctx.ensure_object(Context).overrides["database_url"] = value
        return value

    return click.option("--db", "db", metavar="URL", expose_value=False, callback=store, is_eager=True,
                        help="Registry database URL (default: LINKFOLD_DATABASE_URL, else "
                             "sqlite:///linkfold.db).")(func)


def quiet_option(func: Callable) -> Callable:
    def store(ctx: click.Context, _param: click.Parameter, value: bool) -> bool:
        if value:
            ctx.ensure_object(Context).quiet = True
        return value

    return click.option("--quiet", "-q", is_flag=True, expose_value=False, callback=store,
                        help="No progress or messages on stderr; results only.")(func)


def common_options(func: Callable) -> Callable:
    return db_option(quiet_option(func))


def _json_default(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, set | frozenset | tuple):
        return list(value)
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def to_json(obj: Any) -> str:
    return json.dumps(obj, ensure_ascii=False, default=_json_default, sort_keys=False)


def write_jsonl(rows: Iterable[Mapping[str, Any]]) -> int:
    out = sys.stdout
    n = 0
    for row in rows:
        out.write(to_json(row) + "\n")
        n += 1
    out.flush()
    return n


def write_table(rows: Sequence[Mapping[str, Any]], columns: Sequence[str]) -> None:
    """A plain aligned table on stdout, for people; JSON lines are the choice for scripts."""
    if not rows:
        return
    cells = [[("" if r.get(c) is None else str(r.get(c))) for c in columns] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(columns)]
    click.echo("  ".join(c.ljust(w) for c, w in zip(columns, widths, strict=True)).rstrip())
    for row in cells:
        click.echo("  ".join(v.ljust(w) for v, w in zip(row, widths, strict=True)).rstrip())


def write_csv(rows: Iterable[Mapping[str, Any]], columns: Sequence[str]) -> int:
    """CSV on stdout (RFC 4180: CRLF line ends, a header), cells as ``_tabular.csv_cell`` writes them."""
    import csv

    from .._tabular import csv_cell

    writer = csv.writer(sys.stdout, lineterminator="\r\n")
    writer.writerow(columns)
    n = 0
    for row in rows:
        writer.writerow([csv_cell(row.get(c)) for c in columns])
        n += 1
    sys.stdout.flush()
    return n


# --- the output option ---------------------------------------------------------------------------------
#: The values of ``--format`` on every listing and every stage command (docs/vocabulary.md). ``--format``
#: always names what a command WRITES; what it reads is ``--input-format``.
OUTPUT_FORMATS = ("table", "json", "jsonl", "csv")

#: Old values of ``--format`` / ``--summary`` that still work for one release, and what they became.
_OLD_FORMAT_VALUES = {"text": "table"}


class _OutputFormat(click.Choice):
    """A choice of output format that still takes the old ``text`` (now ``table``), with a warning, and
    the values in ``also_accept`` (an old meaning the command sorts out itself) without listing them."""

    def __init__(self, choices: Sequence[str], also_accept: Sequence[str] = ()) -> None:
        super().__init__(list(choices))
        self.also_accept = tuple(also_accept)

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        if isinstance(value, str) and value in self.also_accept:
            return value
        if isinstance(value, str) and value in _OLD_FORMAT_VALUES and value not in self.choices:
            new = _OLD_FORMAT_VALUES[value]
            warn_deprecated(f"--format {new}")
            value = new
        return super().convert(value, param, ctx)


def format_option(choices: Sequence[str] = OUTPUT_FORMATS, default: str = "table",
                  help: str | None = None, also_accept: Sequence[str] = ()) -> Callable:
    """``--format``: the one output option. Listings and stage summaries take :data:`OUTPUT_FORMATS`; a
    command that writes files of its own kinds (export, exposure, network) passes its own ``choices``."""
    text = help or ("table: for people (a stage's summary goes to stderr); json: one JSON document; jsonl: "
                    "JSON lines; csv: RFC 4180 with a header.")
    return click.option("--format", "fmt", type=_OutputFormat(choices, also_accept), default=default,
                        show_default=True, help=text)


def summary_option(func: Callable | None = None, *, also_accept: Sequence[str] = ()) -> Any:
    """A stage command's output option: ``--format`` (:data:`OUTPUT_FORMATS`), and the old ``--summary
    text|json`` accepted for one release."""
    if func is None:
        return lambda f: summary_option(f, also_accept=also_accept)

    def old(ctx: click.Context, _param: click.Parameter, value: str | None) -> str | None:
        if value is not None:
            warn_deprecated("--format")
            ctx.meta["linkfold.old_summary"] = _OLD_FORMAT_VALUES.get(value, value)
        return value

    func = click.option("--summary", "old_summary", type=click.Choice(["text", "json"]), default=None,
                        hidden=True, expose_value=False, callback=old)(func)
    return format_option(also_accept=also_accept)(func)


def output_format(fmt: str) -> str:
    """The format asked for, the old ``--summary`` counting when ``--format`` was left at its default."""
    ctx = click.get_current_context(silent=True)
    old = ctx.meta.get("linkfold.old_summary") if ctx is not None else None
    if old is not None and ctx is not None and \
            ctx.get_parameter_source("fmt") in (None, click.core.ParameterSource.DEFAULT):
        return str(old)
    return fmt


def write_rows(fmt: str, rows: Iterable[Mapping[str, Any]], columns: Sequence[str]) -> int:
    """A listing on stdout in the format asked for; returns the rows written. ``table`` and ``json`` hold
    the rows in memory (a table needs its widths, a JSON array its end); ``jsonl`` and ``csv`` stream."""
    if fmt == "jsonl":
        return write_jsonl(rows)
    if fmt == "csv":
        return write_csv(rows, columns)
    listed = list(rows)
    if fmt == "json":
        click.echo(json.dumps(listed, ensure_ascii=False, default=_json_default))
    else:
        write_table(listed, columns)
    return len(listed)


def report_summary(obj: Context, summary: Any, fmt: str) -> None:
    """A stage's summary as every stage command gives it: ``as_dict()`` on stdout in the format asked for
    (the API answers the same ``as_dict()``), and ``lines()`` on stderr unless ``-q``."""
    write_summary(obj, fmt, summary.as_dict(), summary.lines())


def write_summary(obj: Context, fmt: str, data: Mapping[str, Any], lines: Iterable[str]) -> None:
    """A stage's summary: ``table`` is its ``lines`` on stderr for people (none under -q); the other
    formats put ``data`` on stdout for scripts (json and jsonl alike: one object on one line; csv: one row
    under a header, nested counts flattened to ``a.b`` columns) and still tell people on stderr."""
    fmt = output_format(fmt)
    if fmt in ("json", "jsonl"):
        click.echo(to_json(data))
    elif fmt == "csv":
        flat = _flatten(data)
        write_csv([flat], list(flat))
    for line in lines:
        obj.message(line)


def _flatten(data: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in data.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            out.update(_flatten(value, f"{name}."))
        elif isinstance(value, list | tuple):
            out[name] = to_json(list(value))
        else:
            out[name] = value
    return out


# --- deprecated spellings --------------------------------------------------------------------------------
#: Every old spelling that still works for one release -> what replaces it. docs/vocabulary.md lists the
#: same pairs (a test compares them); the old spellings go in the next release.
DEPRECATIONS: dict[str, str] = {
    "linkfold ingest": "linkfold datasets load",
    "linkfold ingest --format": "linkfold datasets load --input-format",
    "linkfold import-pages": "linkfold pages load",
    "linkfold follow --import": "linkfold redirects load",
    "linkfold follow --import … --format": "linkfold redirects load --input-format",
    "linkfold rules add": "linkfold rules load",
    "--summary text|json": "--format table|json",
    "--format text": "--format table",
}


def warn_deprecated(new: str) -> None:
    """The one deprecation line, on stderr, unless -q: -q promises an empty stderr when nothing went
    wrong, and scripts written against the old spelling (it is still a working spelling this release)
    rely on that promise. Every run without -q shows the line."""
    ctx = click.get_current_context(silent=True)
    obj = ctx.find_object(Context) if ctx is not None else None
    if obj is not None and obj.quiet:
        return
    click.echo(f"deprecated: use {new} instead (the old spelling goes in the next release)", err=True)


def deprecated_command(command: click.Command, old_name: str, new: str) -> click.Command:
    """A hidden copy of ``command`` under its old name that warns, then does the same thing."""
    import copy
    import functools

    alias = copy.copy(command)
    alias.name = old_name
    alias.hidden = True
    alias.help = f"Deprecated: use `{new}` instead (the old spelling goes in the next release)."
    alias.short_help = None
    original = command.callback
    if original is not None:
        @functools.wraps(original)
        def callback(*args: Any, **kwargs: Any) -> Any:
            warn_deprecated(new)
            return original(*args, **kwargs)

        alias.callback = callback
    return alias
