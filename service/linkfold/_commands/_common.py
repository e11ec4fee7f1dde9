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


def format_option(choices: tuple[str, ...] = ("table", "jsonl"), default: str = "table") -> Callable:
    return click.option("--format", "fmt", type=click.Choice(choices), default=default, show_default=True,
                        help="Output format: a table for people, JSON lines for scripts.")


def summary_option(func: Callable) -> Callable:
    """``--summary text|json`` on every command that runs a stage: one option, one meaning."""
    return click.option("--summary", "summary_format", type=click.Choice(["text", "json"]), default="text",
                        show_default=True, help="text: the summary on stderr for people; json: one JSON object "
                                                "on stdout for scripts.")(func)


def report_summary(obj: Context, summary: Any, summary_format: str) -> None:
    """A stage's summary as every stage command gives it: ``as_dict()`` as one JSON object on stdout with
    ``--summary json``, and ``lines()`` on stderr unless ``-q`` (the API answers the same ``as_dict()``)."""
    if summary_format == "json":
        click.echo(to_json(summary.as_dict()))
    for line in summary.lines():
        obj.message(line)
