"""The ``linkfold`` command: a thin shell over the library.

Each command parses its options, calls one library function and formats the result. Errors from the
library (:class:`linkfold.errors.LinkfoldError`) become one line on stderr and their exit code.
"""

from __future__ import annotations

import gc
import importlib
import logging
import sys
from collections.abc import Iterator, MutableMapping
from contextlib import contextmanager

import click

from . import __version__
from ._commands._common import Context, common_options
from .errors import LinkfoldError

log = logging.getLogger("linkfold")

# Command name -> the module under linkfold._commands that registers it, in the order of the pipeline.
# Modules are imported only when one of their commands runs (or for --help), so `linkfold lookup` in a
# script loop does not pay for the extraction library, numpy or the web framework at every start.
COMMANDS: dict[str, str] = {
    "db": "db", "settings": "db",
    "canonicalize": "canon", "rules": "canon", "recanonicalize": "canon",
    "datasets": "ingest", "rejects": "ingest", "lookup": "ingest", "export": "ingest",
    "follow": "follow", "redirects": "follow", "follow-report": "follow",
    "fetch": "content", "pages": "content", "documents": "content", "extract": "content",
    "dedupe": "dedupe", "decide": "dedupe", "clusters": "dedupe", "thresholds": "dedupe",
    "nightly": "jobs", "runs": "jobs",
    "outlets": "outlets",
    "exposure": "exposure", "pseudonymise": "exposure",
    "network": "network",
    "corpus": "corpus", "compare": "corpus",
    "serve": "api", "tokens": "api",
    "demo": "demo",
    # Old spellings, hidden from help; they warn and keep working for one release (docs/vocabulary.md).
    "ingest": "ingest", "import-pages": "content",
}


class _Group(click.Group):
    """Loads each command's module on first use and lists commands in pipeline order, not A–Z."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self._loaded: set[str] = set()

    def _load(self, module: str) -> None:
        if module not in self._loaded:
            self._loaded.add(module)
            importlib.import_module(f"{__package__}._commands.{module}").register(self)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        module = COMMANDS.get(cmd_name)
        if module is not None:
            self._load(module)
        return super().get_command(ctx, cmd_name)

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(COMMANDS)

    def load_all(self) -> MutableMapping[str, click.Command]:
        """Every command, registered (for help, docs and tests)."""
        for module in dict.fromkeys(COMMANDS.values()):
            self._load(module)
        return self.commands


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
    setup_logging(verbose=verbose, quiet=obj.quiet)
    ctx.call_on_close(obj.close)


class _StderrHandler(logging.StreamHandler):
    """The command's one log handler: its own class, so a second invocation in one process (tests, a
    script calling :func:`main`) replaces it instead of adding another."""


def setup_logging(*, verbose: int = 0, quiet: bool = False) -> None:
    """Log records of every library on stderr: warnings and worse by default, ``-v`` info, ``-vv`` debug.

    ``-q`` (without ``-v``) lets only errors through, whichever library logs them, and Python warnings
    (``warnings.warn`` in a dependency) go through logging too, so a cron job's mail stays empty unless
    something is wrong. The level is set on the handler, not on the loggers, so that what other code
    attached to them (pytest's log capture, a lab's own handler) still sees every record.
    """
    level = logging.ERROR if quiet and not verbose else max(logging.WARNING - 10 * verbose, logging.DEBUG)
    root = logging.getLogger()
    teardown_logging()
    _saved_root_level.append(root.level)
    handler = _StderrHandler(sys.stderr)
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    root.addHandler(handler)
    if verbose:
        root.setLevel(min(root.getEffectiveLevel(), level))
    logging.captureWarnings(True)


_saved_root_level: list[int] = []


def teardown_logging() -> None:
    """Undo :func:`setup_logging`: a script (or a test) that calls :func:`main` gets its process's logging
    back as it was, instead of a handler bound to a stream that may be gone and a changed root level."""
    root = logging.getLogger()
    for old in [h for h in root.handlers if isinstance(h, _StderrHandler)]:
        root.removeHandler(old)
    while _saved_root_level:
        root.setLevel(_saved_root_level.pop())
    logging.captureWarnings(False)


#: The cyclic garbage collector's first threshold while a command runs. A load allocates millions of
#: short-lived tuples, none in a cycle, and at the default (700) the collector ran every few dozen rows over
#: caches of a quarter of a million entries: 4-7% of a 1M-row load's CPU.
GC_THRESHOLD = 50000
#: The thread switch interval while a command runs, in seconds. The ingest writer thread needs the
#: interpreter after every round trip and every piece of a COPY, and the reading thread, which never
#: blocks, would otherwise keep it for the default 5 ms each time while the database waits. Measured on a
#: 1M-row load (bench/ingest_bench.py): 0.2 ms gave 96-102k rows/s against 84-87k.
SWITCH_INTERVAL = 0.0002


@contextmanager
def tuned_interpreter() -> Iterator[None]:
    """Raise the collector's first threshold and lower the thread switch interval, then restore both.

    These settings are process-wide, so only the command's own entry point changes them (:func:`main`):
    a lab's script or notebook that imports the library keeps its interpreter as it set it up, and may
    use this block around its own loads to get the command's speed.
    """
    saved_gc = gc.get_threshold()
    saved_switch = sys.getswitchinterval()
    gc.set_threshold(max(saved_gc[0], GC_THRESHOLD), *saved_gc[1:])
    sys.setswitchinterval(min(saved_switch, SWITCH_INTERVAL))
    try:
        yield
    finally:
        gc.set_threshold(*saved_gc)
        sys.setswitchinterval(saved_switch)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the process exit code."""
    try:
        with tuned_interpreter():
            return _run(argv)
    finally:
        teardown_logging()


def _run(argv: list[str] | None) -> int:
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
    except Exception as exc:
        # A concurrent writer's conflict that reached here without a retry of its own is still a known
        # condition of the database, not a bug: its own message and exit code (store/conflicts.py).
        from .store.conflicts import as_write_conflict

        conflict = as_write_conflict(exc)
        if conflict is None:
            raise
        click.echo(f"linkfold: error: {conflict}", err=True)
        return conflict.exit_code
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
