"""The ``linkfold`` command: a thin shell over the library.

Each command parses its options, calls one library function and formats the result. Errors from the
library (:class:`linkfold.errors.LinkfoldError`) become one line on stderr and their exit code.
"""

from __future__ import annotations

import logging
import sys

import click

from . import __version__
from ._commands import api as api_commands
from ._commands import canon as canon_commands
from ._commands import content as content_commands
from ._commands import db as db_commands
from ._commands import dedupe as dedupe_commands
from ._commands import demo as demo_commands
from ._commands import follow as follow_commands
from ._commands import ingest as ingest_commands
from ._commands._common import Context, common_options
from .errors import LinkfoldError

log = logging.getLogger("linkfold")

COMMAND_MODULES = [db_commands, canon_commands, ingest_commands, follow_commands, content_commands, dedupe_commands, api_commands,
                   demo_commands]


class _Group(click.Group):
    """Lists commands in the order they were registered (the order of the pipeline), not A–Z."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(self.commands)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="linkfold")
@click.option("--verbose", "-v", count=True, help="More log output on stderr (-vv for debug).")
@common_options
@click.pass_context
def cli(ctx: click.Context, verbose: int) -> None:
    """linkfold: fold the many URLs of one news article onto one stable ID.

    \b
    Example:
      linkfold demo                       # the whole pipeline on the bundled fixtures
      linkfold --db postgresql+psycopg://lab@dbhost/linkfold db upgrade
    """
    obj = ctx.ensure_object(Context)
    level = logging.WARNING - 10 * verbose
    logging.basicConfig(level=max(level, logging.DEBUG), stream=sys.stderr,
                        format="%(levelname)s %(name)s: %(message)s")
    if obj.quiet:
        logging.getLogger("linkfold").setLevel(logging.ERROR)
    ctx.call_on_close(obj.close)


for _module in COMMAND_MODULES:
    _module.register(cli)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the process exit code."""
    try:
        cli.main(args=argv, prog_name="linkfold", standalone_mode=False)
    except LinkfoldError as exc:
        click.echo(f"linkfold: error: {exc}", err=True)
        return exc.exit_code
    except click.exceptions.Abort:
        click.echo("linkfold: interrupted; work committed before the interruption is kept", err=True)
        return 130
    except KeyboardInterrupt:
        click.echo("linkfold: interrupted; work committed before the interruption is kept", err=True)
        return 130
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except BrokenPipeError:
        # `linkfold lookup … | head`: the reader went away; that is not an error of ours.
        sys.stderr.close()
        return 0
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
