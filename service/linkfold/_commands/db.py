"""``linkfold db …`` and ``linkfold settings``."""

from __future__ import annotations

import click

from .. import store
from ..settings import describe_settings
from ._common import Context, common_options, format_option, pass_ctx, write_rows


@click.group("db")
def db_group() -> None:
    """Create, inspect and migrate the registry's schema.

    \b
    Example:
      linkfold db upgrade
      linkfold --db postgresql+psycopg://lab@dbhost/linkfold db current
    """


@db_group.command("upgrade")
@click.argument("revision", default="head")
@common_options
@pass_ctx
def db_upgrade(obj: Context, revision: str) -> None:
    """Migrate the schema forward to REVISION (default: head).

    \b
    Example:
      linkfold db upgrade
    """
    engine = obj.engine(check_schema=False)
    before = store.current_revision(engine)
    after = store.upgrade_schema(engine, revision)
    obj.message(f"schema of {store.display_url(engine)}: {before or 'empty'} -> {after}")


@db_group.command("downgrade")
@click.argument("revision")
@common_options
@pass_ctx
def db_downgrade(obj: Context, revision: str) -> None:
    """Migrate the schema back to REVISION ('base' removes every table).

    \b
    Example:
      linkfold db downgrade 0001
    """
    engine = obj.engine(check_schema=False)
    before = store.current_revision(engine)
    after = store.downgrade(engine, revision)
    obj.message(f"schema of {store.display_url(engine)}: {before} -> {after or 'base'}")


@db_group.command("current")
@common_options
@pass_ctx
def db_current(obj: Context) -> None:
    """Print the schema revision of the registry and whether it is at head.

    \b
    Example:
      linkfold db current
    """
    engine = obj.engine(check_schema=False)
    current = store.current_revision(engine)
    head = store.head_revision()
    state = "head" if current == head else ("empty" if current is None else f"behind head {head}")
    click.echo(f"{current or '-'} ({state})")


@db_group.command("refresh-finals")
@common_options
@pass_ctx
def db_refresh_finals(obj: Context) -> None:
    """Recompute what every followed link stands for (its final URL) from the stored follow outcomes.

    The follow stage and redirect imports keep this current as they write; this command is for a
    registry whose follow outcomes were changed by other means, or to check (it reports how many rows
    it changed, normally none).

    \b
    Example:
      linkfold db refresh-finals
    """
    from ..store.finals import recompute_finals

    changed = recompute_finals(obj.engine())
    obj.message(f"final URLs recomputed: {changed:,} row(s) changed")


@click.command("settings")
@format_option()
@common_options
@pass_ctx
def settings_command(obj: Context, fmt: str) -> None:
    """List every setting with its environment variable, current value and help.

    \b
    Example:
      linkfold settings --format jsonl
    """
    rows = []
    current = obj.settings
    for row in describe_settings():
        value = current[row["name"]]
        if row["name"] == "database_url":
            value = store.normalise_database_url(value)
        rows.append({**row, "value": value})
    write_rows(fmt, rows, ["name", "env", "value", "help"])


def register(cli: click.Group) -> None:
    cli.add_command(db_group)
    cli.add_command(settings_command)
