"""``linkfold nightly`` (the nightly job) and ``linkfold runs`` (the run log)."""

from __future__ import annotations

from typing import Any

import click

from ..errors import StageFailed
from ..jobs.nightly import run_nightly
from ..store.runs import list_runs, show_run
from ._common import (
    Context,
    common_options,
    format_option,
    pass_ctx,
    report_summary,
    summary_option,
    to_json,
    write_rows,
    write_table,
)


@click.command("nightly")
@click.option("--cluster", metavar="tcp://HOST:PORT", default=None,
              help="Run the heavy work (extraction) on this Dask scheduler's workers (setting executor).")
@summary_option
@common_options
@pass_ctx
def nightly_command(obj: Context, fmt: str, cluster: str | None) -> None:
    """Run every stage that has pending work, in order, under the registry lock.

    recanonicalize → follow (shortener hosts) → fetch → extract → dedupe. Follow and fetch are skipped
    when no contact is set. A second nightly job started while one runs says who holds the lock and
    exits with status 8. A killed job is resumed by the next one. Exit status 10 when a stage failed.

    \b
    Example:
      LINKFOLD_CONTACT=mailto:lab@university.example linkfold nightly
      linkfold nightly --cluster tcp://scheduler.lab.example:8786
      linkfold runs
    """
    settings = obj.settings.replace(executor=cluster) if cluster else obj.settings
    summary = run_nightly(obj.engine(), settings=settings, progress=obj.progress())
    report_summary(obj, summary, fmt)
    if not summary.ok:
        # Said even under -q: a cron job's mail must say which stage failed and why.
        failed = "; ".join(f"{s.name}: {s.reason}" for s in summary.stages if s.status == "failed")
        raise StageFailed(f"nightly run {summary.run_id} {summary.status}" + (f" ({failed})" if failed else "")
                          + f"; see linkfold runs show {summary.run_id}")


# status and error: the old names of state and detail, still given for one release (docs/vocabulary.md).
RUN_FIELDS = ("id", "stage", "state", "started_at", "seconds", "children", "host", "pid", "counts", "detail",
              "status", "error")


def _run_row(r: dict[str, Any]) -> dict[str, Any]:
    return {"id": r["id"], "stage": r["stage"], "state": r["state"], "started_at": r["started_at"],
            "seconds": r.get("seconds"), "children": r.get("children"), "host": r["host"], "pid": r["pid"],
            "counts": r["counts"], "detail": r["detail"], "status": r["state"], "error": r["detail"]}


@click.group("runs", invoke_without_command=True)
@click.option("--limit", type=click.IntRange(min=1), default=20, show_default=True, metavar="N")
@click.option("--stage", metavar="NAME", help="Only runs of this stage (nightly, dedupe, follow, ingest…).")
@click.option("--all", "all_runs", is_flag=True, help="Include the stages of nightly runs (child runs).")
@format_option()
@common_options
@click.pass_context
def runs_group(ctx: click.Context, limit: int, stage: str | None, all_runs: bool, fmt: str) -> None:
    """The run log: each run's stage, state, times and counts, newest first.

    \b
    Example:
      linkfold runs --limit 5
      linkfold runs --stage dedupe --all --format jsonl
      linkfold runs show 42
    """
    if ctx.invoked_subcommand is not None:
        return
    obj: Context = ctx.ensure_object(Context)
    rows = [_run_row(r) for r in list_runs(obj.engine(), limit=limit, stage=stage, top_level=not all_runs)]
    if fmt != "table":
        write_rows(fmt, rows, list(RUN_FIELDS))
        return
    for r in rows:
        r["started_at"] = r["started_at"].strftime("%Y-%m-%d %H:%M:%S") if r["started_at"] else ""
        r["detail"] = (r["detail"] or "")[:60]
    write_table(rows, ["id", "stage", "state", "started_at", "seconds", "children", "detail"])


@runs_group.command("show")
@click.argument("run_id", type=int)
@common_options
@pass_ctx
def runs_show(obj: Context, run_id: int) -> None:
    """One run with its child runs (a nightly run's stages), their counts and errors, as JSON.

    \b
    Example:
      linkfold runs show 42
    """
    click.echo(to_json(show_run(obj.engine(), run_id)))


def register(cli: click.Group) -> None:
    for command in (nightly_command, runs_group):
        cli.add_command(command)
