"""``linkfold demo``: the pipeline as it stands, end to end, on the bundled fixtures."""

from __future__ import annotations

from pathlib import Path

import click

from ..demo import run_demo
from ._common import Context, common_options, pass_ctx


@click.command("demo")
@click.option("--workdir", type=click.Path(file_okay=False, path_type=Path), default=Path("linkfold-demo"),
              show_default=True, help="Folder for the demo's fresh SQLite registry: a new or empty folder, or one an earlier demo "
                   "made (only the demo's own files in it are replaced; any other folder is refused).")
@common_options
@pass_ctx
def demo_command(obj: Context, workdir: Path) -> None:
    """Run the whole pipeline on the invented fixtures into a fresh embedded registry and show the IDs.

    \b
    Example:
      linkfold demo
    """
    report = run_demo(workdir, settings=obj.settings, progress=obj.progress(), say=obj.message)
    for line in report.lines():
        click.echo(line)


def register(cli: click.Group) -> None:
    cli.add_command(demo_command)
