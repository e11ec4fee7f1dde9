"""The nightly job: every stage that has pending work, in pipeline order, under the registry lock.

Stages, in order: ``recanonicalize`` (raw URLs under an older ruleset) → ``follow`` (short links on the
ruleset's shortener hosts) → ``fetch`` → ``extract`` → ``dedupe``. Each stage is asked first how much is
pending and runs only when something is; the two that reach the network (follow, fetch) are skipped with
the reason when no ``contact`` is set, since the client refuses to send requests without one. Each stage
that runs is a child run of the nightly run (``runs.parent_id``) with its own counts; the lock's heartbeat
is renewed between stages.

Only one nightly job runs at a time: a second one gets :class:`~linkfold.errors.LockHeld` naming the
holder. Every stage is resumable on its own (marks, pending selections, one transaction per batch), so
a killed job is picked up by the next one, which first marks the runs the dead job left ``running`` as
``interrupted``. A stage that fails is recorded with its error and the later stages still run (they may
have work of their own); the nightly run is then ``failed``.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from types import ModuleType
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..errors import LinkfoldError
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store.locks import acquire_lock
from ..store.migrate import require_schema
from ..store.runs import (
    RunStatus,
    StageSummary,
    child_run_id,
    finish_run,
    process_gone,
    running_runs,
    start_run,
)

log = logging.getLogger("linkfold")

STAGES = ("recanonicalize", "follow", "fetch", "extract", "dedupe")


@dataclass
class StageOutcome:
    name: str
    status: str            # ok | failed | skipped | interrupted
    pending: int | None = None
    reason: str | None = None
    run_id: int | None = None
    counts: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        return {"status": self.status, "pending": self.pending, "reason": self.reason, "run_id": self.run_id,
                "counts": self.counts, "seconds": round(self.seconds, 3)}


@dataclass
class NightlySummary:
    run_id: int | None = None
    status: str = RunStatus.OK.value
    interrupted_earlier: list[int] = field(default_factory=list)
    stages: list[StageOutcome] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.status == RunStatus.OK.value

    def as_dict(self) -> dict[str, Any]:
        return {"run_id": self.run_id, "status": self.status, "stages": {s.name: s.as_dict() for s in self.stages},
                "interrupted_earlier": self.interrupted_earlier}

    def lines(self) -> list[str]:
        out = [f"nightly run {self.run_id}: {self.status}"]
        if self.interrupted_earlier:
            out.append(f"  marked {len(self.interrupted_earlier)} run(s) of a killed job interrupted: "
                       + ", ".join(map(str, self.interrupted_earlier)))
        for s in self.stages:
            what = s.reason if s.status in ("skipped", "failed") else _brief(s.counts)
            out.append(f"  {s.name:<15} {s.status:<8} {what or ''}".rstrip())
        return out


#: Counts by reason that a stage's line shows in full: pages without usable text (extract), URLs that
#: failed or were refused (follow, fetch), so that a nightly summary says why, not only how many.
BY_REASON = ("no_text", "failed", "refused", "refusals")


#: Numbers in a stage's ``as_dict()`` that are not counts of work done.
_NOT_COUNTS = frozenset({"run_id", "ruleset_version"})


def _brief(counts: dict[str, Any]) -> str:
    flat = [f"{k} {v:,}" for k, v in counts.items()
            if isinstance(v, int) and not isinstance(v, bool) and v and k not in _NOT_COUNTS]
    parts = [", ".join(flat[:6])] if flat else []
    for name in BY_REASON:
        by = counts.get(name)
        if isinstance(by, dict) and any(by.values()):
            parts.append(f"{name}: " + ", ".join(f"{k} {v:,}" for k, v in sorted(by.items()) if v))
    return "; ".join(parts)


# --- the stages -----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Stage:
    """A stage as the job runs it, through the surface every stage module offers: ``count_pending(engine,
    *, settings)`` and a run function (named ``run``) called as ``run(engine, settings=…, progress=…,
    parent_run=…)`` that returns a :class:`~linkfold.store.runs.StageSummary`. ``network``: the stage
    sends requests (it needs a contact).

    ``module`` imports the stage's module when the job runs, not when this one is imported (so ``linkfold
    runs`` does not load the extraction library), and the functions are looked up in it then, so a test
    can replace one in its module."""

    name: str
    network: bool
    module: Callable[[], ModuleType]
    run: str

    def pending(self, engine: Engine, settings: Settings) -> int:
        return int(self.module().count_pending(engine, settings=settings))

    def start(self, engine: Engine, settings: Settings, parent: int, progress: Progress) -> StageSummary:
        run = getattr(self.module(), self.run)
        return run(engine, settings=settings, progress=progress, parent_run=parent)


def _recanon() -> ModuleType:
    from ..ingest import recanon

    return recanon


def _follow() -> ModuleType:
    from ..follow import stage

    return stage


def _fetch() -> ModuleType:
    from ..content import fetching

    return fetching


def _extract() -> ModuleType:
    from ..content import extracting

    return extracting


def _dedupe() -> ModuleType:
    from ..dedupe import stage

    return stage


DEFAULT_STAGES = (
    Stage("recanonicalize", False, _recanon, "recanonicalize"),
    Stage("follow", True, _follow, "follow_links"),
    Stage("fetch", True, _fetch, "fetch_pages"),
    Stage("extract", False, _extract, "extract_pages"),
    Stage("dedupe", False, _dedupe, "run_dedupe"),
)


# --- runs left behind ------------------------------------------------------------------------------------------
def mark_interrupted(engine: Engine, *, own_run: int) -> list[int]:
    """Runs a killed job left ``running``: every nightly run (and its children) other than ours — we hold
    the lock, so no other nightly job is alive — and any run of a process on this host that is gone."""
    rows = running_runs(engine, other_than=own_run)
    nightly = {row["id"] for row in rows if row["stage"] == "nightly"}
    dead = [row["id"] for row in rows
            if row["id"] in nightly or row["parent_id"] in nightly or process_gone(row)]
    for run_id in sorted(dead):
        finish_run(engine, run_id, status=RunStatus.INTERRUPTED,
                   error="interrupted: its process ended without recording an end (found by a later nightly run)")
    return sorted(dead)


# --- the job ----------------------------------------------------------------------------------------------------
def run_nightly(engine: Engine, *, settings: Settings, progress: Progress = SILENT,
                stages: tuple[Stage, ...] = DEFAULT_STAGES, stale_after: float = 6 * 3600) -> NightlySummary:
    """Run every stage with pending work, in order, holding the registry lock (see the module doc)."""
    require_schema(engine)
    lock = acquire_lock(engine, "registry", stale_after=stale_after)
    summary = NightlySummary()
    try:
        run_id = start_run(engine, "nightly")
        summary.run_id = run_id
        lock.heartbeat(run_id)
        summary.interrupted_earlier = mark_interrupted(engine, own_run=run_id)
        try:
            # The stages run under the job's hold: a stage that takes the lock itself (dedupe) is not refused.
            with lock.lend():
                for stage in stages:
                    summary.stages.append(_one_stage(engine, settings, stage, run_id, progress))
                    lock.heartbeat(run_id)
        except KeyboardInterrupt:
            summary.status = RunStatus.INTERRUPTED.value
            finish_run(engine, run_id, status=RunStatus.INTERRUPTED, counts=summary.as_dict(),
                       error="interrupted (Ctrl-C)")
            raise
        failed = [s for s in summary.stages if s.status == "failed"]
        summary.status = (RunStatus.FAILED if failed else RunStatus.OK).value
        error = "; ".join(f"{s.name}: {s.reason}" for s in failed) or None
        finish_run(engine, run_id, status=summary.status, counts=summary.as_dict(), error=error)
    finally:
        lock.release()
    return summary


def _one_stage(engine: Engine, settings: Settings, stage: Stage, parent: int, progress: Progress) -> StageOutcome:
    if stage.network and not str(settings.contact or "").strip():
        reason = "no contact set (LINKFOLD_CONTACT); this stage would send requests"
        log.info("nightly: %s skipped: %s", stage.name, reason)
        return StageOutcome(stage.name, "skipped", reason=reason)
    try:
        pending = stage.pending(engine, settings)
    except (LinkfoldError, sa.exc.SQLAlchemyError) as exc:
        return StageOutcome(stage.name, "failed", reason=f"could not count pending work: {exc}")
    if pending == 0:
        return StageOutcome(stage.name, "skipped", pending=0, reason="nothing pending")
    started = time.monotonic()
    outcome = StageOutcome(stage.name, "ok", pending=pending)
    try:
        summary = stage.start(engine, settings, parent, progress)
        outcome.counts, outcome.run_id = summary.as_dict(), summary.run_id
    except KeyboardInterrupt:
        outcome.status = "interrupted"
        raise
    except Exception as exc:
        # Any failure of one stage is recorded and the next stages still run: they may have work of
        # their own, and every stage's writes are committed batch by batch.
        log.error("nightly: %s failed: %s", stage.name, exc, exc_info=not isinstance(exc, LinkfoldError))
        outcome.status, outcome.reason = "failed", f"{type(exc).__name__}: {exc}"
    finally:
        outcome.seconds = time.monotonic() - started
    if outcome.run_id is None:
        # A stage that failed returned no summary: its run, if it recorded one, is the newest child.
        outcome.run_id = child_run_id(engine, parent, stage.name)
    return outcome


__all__ = ["DEFAULT_STAGES", "STAGES", "NightlySummary", "Stage", "StageOutcome", "mark_interrupted", "run_nightly"]
