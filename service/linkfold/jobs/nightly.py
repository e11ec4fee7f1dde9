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
from datetime import UTC
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..errors import LinkfoldError
from ..progress import SILENT, Progress
from ..store import tables as t
from ..store.locks import acquire_lock
from ..store.runs import RunStatus, finish_run, observed, process_gone, recording_run, start_run

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
        return {"stages": {s.name: s.as_dict() for s in self.stages},
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


def _brief(counts: dict[str, Any]) -> str:
    flat = [f"{k} {v:,}" for k, v in counts.items() if isinstance(v, int) and not isinstance(v, bool) and v]
    parts = [", ".join(flat[:6])] if flat else []
    for name in BY_REASON:
        by = counts.get(name)
        if isinstance(by, dict) and any(by.values()):
            parts.append(f"{name}: " + ", ".join(f"{k} {v:,}" for k, v in sorted(by.items()) if v))
    return "; ".join(parts)


# --- the stages -----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Stage:
    name: str
    network: bool
    pending: Callable[[Engine, Any], int]
    run: Callable[[Engine, Any, int, Progress], dict[str, Any]]


def _recanon_pending(engine: Engine, settings: Any) -> int:
    from .recanon import count_pending

    return count_pending(engine)


def _recanon_run(engine: Engine, settings: Any, parent: int, progress: Progress) -> dict[str, Any]:
    from .recanon import recanonicalize

    with recording_run(engine, "recanonicalize", parent_id=parent) as run:
        summary = recanonicalize(engine, batch_size=settings.batch_size, cache_size=settings.canon_cache_size,
                                 run_id=run.id, progress=progress)
        run.counts = summary.counts()
    return summary.counts()


def _follow_pending(engine: Engine, settings: Any) -> int:
    from ..store import evidence as ev
    from ..store.rulesets import latest_ruleset

    with engine.begin() as conn:
        _version, rules = latest_ruleset(conn)
        hosts = frozenset(rules.shortener_hosts)
        if not hosts:
            return 0
        return ev.count_pending(conn, hosts=hosts)


def _follow_run(engine: Engine, settings: Any, parent: int, progress: Progress) -> dict[str, Any]:
    from ..follow import follow_links

    return follow_links(engine, settings=settings, progress=progress, parent_id=parent).as_dict()


def _fetch_pending(engine: Engine, settings: Any) -> int:
    from ..content.stage import count_pending

    return count_pending(engine)["fetch"]


def _fetch_run(engine: Engine, settings: Any, parent: int, progress: Progress) -> dict[str, Any]:
    from ..content.stage import fetch_pages

    return fetch_pages(engine, settings=settings, progress=progress, parent_id=parent).counts()


def _extract_pending(engine: Engine, settings: Any) -> int:
    from ..content.stage import count_pending

    return count_pending(engine)["extract"]


def _extract_run(engine: Engine, settings: Any, parent: int, progress: Progress) -> dict[str, Any]:
    from ..content.stage import extract_pages

    return extract_pages(engine, settings=settings, progress=progress, parent_id=parent).counts()


def _dedupe_pending(engine: Engine, settings: Any) -> int:
    from ..dedupe.stage import count_pending

    return count_pending(engine, settings=settings)


def _dedupe_run(engine: Engine, settings: Any, parent: int, progress: Progress) -> dict[str, Any]:
    from ..dedupe.stage import run_dedupe

    return run_dedupe(engine, settings=settings, parent_id=parent, progress=progress).as_dict()


DEFAULT_STAGES = (
    Stage("recanonicalize", False, _recanon_pending, _recanon_run),
    Stage("follow", True, _follow_pending, _follow_run),
    Stage("fetch", True, _fetch_pending, _fetch_run),
    Stage("extract", False, _extract_pending, _extract_run),
    Stage("dedupe", False, _dedupe_pending, _dedupe_run),
)


# --- runs left behind ------------------------------------------------------------------------------------------
def mark_interrupted(engine: Engine, *, own_run: int) -> list[int]:
    """Runs a killed job left ``running``: every nightly run (and its children) other than ours — we hold
    the lock, so no other nightly job is alive — and any run of a process on this host that is gone."""
    r = t.runs
    with engine.connect() as conn:
        rows = [dict(x) for x in conn.execute(
            sa.select(r.c.id, r.c.stage, r.c.status, r.c.parent_id, r.c.host, r.c.pid, r.c.started_at)
            .where(r.c.status == RunStatus.RUNNING.value, r.c.id != own_run)).mappings()]
    nightly = {row["id"] for row in rows if row["stage"] == "nightly"}
    dead = [row["id"] for row in rows
            if row["id"] in nightly or row["parent_id"] in nightly or process_gone(row)]
    for run_id in sorted(dead):
        finish_run(engine, run_id, status=RunStatus.INTERRUPTED,
                   error="interrupted: its process ended without recording an end (found by a later nightly run)")
    return sorted(dead)


# --- the job ----------------------------------------------------------------------------------------------------
def run_nightly(engine: Engine, *, settings: Any, progress: Progress = SILENT,
                stages: tuple[Stage, ...] = DEFAULT_STAGES, stale_after: float = 6 * 3600) -> NightlySummary:
    """Run every stage with pending work, in order, holding the registry lock (see the module doc)."""
    lock = acquire_lock(engine, "registry", stale_after=stale_after)
    summary = NightlySummary()
    try:
        run_id = start_run(engine, "nightly")
        summary.run_id = run_id
        lock.heartbeat(run_id)
        summary.interrupted_earlier = mark_interrupted(engine, own_run=run_id)
        try:
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


def _one_stage(engine: Engine, settings: Any, stage: Stage, parent: int, progress: Progress) -> StageOutcome:
    if stage.network and not str(settings.contact or "").strip():
        reason = "no contact set (LINKFOLD_CONTACT); this stage would send requests"
        log.info("nightly: %s skipped: %s", stage.name, reason)
        return StageOutcome(stage.name, "skipped", reason=reason)
    try:
        pending = int(stage.pending(engine, settings))
    except (LinkfoldError, sa.exc.SQLAlchemyError) as exc:
        return StageOutcome(stage.name, "failed", reason=f"could not count pending work: {exc}")
    if pending == 0:
        return StageOutcome(stage.name, "skipped", pending=0, reason="nothing pending")
    started = time.monotonic()
    outcome = StageOutcome(stage.name, "ok", pending=pending)
    try:
        outcome.counts = stage.run(engine, settings, parent, progress)
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
    outcome.run_id = _child_run(engine, parent, stage.name)
    return outcome


def _child_run(engine: Engine, parent: int, name: str) -> int | None:
    r = t.runs
    with engine.connect() as conn:
        return conn.execute(sa.select(sa.func.max(r.c.id)).where(r.c.parent_id == parent,
                                                                  r.c.stage == name)).scalar()


# --- the run log ------------------------------------------------------------------------------------------------
def list_runs(engine: Engine, *, limit: int = 20, stage: str | None = None,
              top_level: bool = True) -> list[dict[str, Any]]:
    """Runs, newest first: by default the top-level ones (a nightly run's stages are its children)."""
    r = t.runs
    q = sa.select(r).order_by(r.c.id.desc()).limit(limit)
    if top_level:
        q = q.where(r.c.parent_id.is_(None))
    if stage:
        q = q.where(r.c.stage == stage)
    with engine.connect() as conn:
        rows = [dict(x) for x in conn.execute(q).mappings()]
        ids = [x["id"] for x in rows]
        children: dict[int, int] = {}
        if ids:
            children = {int(p): int(n) for p, n in conn.execute(
                sa.select(r.c.parent_id, sa.func.count()).where(r.c.parent_id.in_(ids)).group_by(r.c.parent_id))}
    for x in rows:
        x["children"] = children.get(x["id"], 0)
        _times(x)
        observed(x)
    return rows


def _times(row: dict[str, Any]) -> None:
    for key in ("started_at", "finished_at"):
        if row.get(key) is not None and row[key].tzinfo is None:
            row[key] = row[key].replace(tzinfo=UTC)
    if row.get("started_at") and row.get("finished_at"):
        row["seconds"] = round((row["finished_at"] - row["started_at"]).total_seconds(), 3)


def show_run(engine: Engine, run_id: int) -> dict[str, Any]:
    """One run with its children (and theirs), counts and errors."""
    from ..errors import NotFound

    r = t.runs
    with engine.connect() as conn:
        row = conn.execute(sa.select(r).where(r.c.id == run_id)).mappings().first()
        if row is None:
            raise NotFound(f"no run {run_id}")
        out = observed(dict(row))
        _times(out)

        def children_of(pid: int) -> list[dict[str, Any]]:
            kids = [dict(x) for x in conn.execute(sa.select(r).where(r.c.parent_id == pid).order_by(r.c.id)).mappings()]
            for k in kids:
                _times(k)
                observed(k)
                k["children"] = children_of(k["id"])
            return kids

        out["children"] = children_of(run_id)
    return out


__all__ = ["DEFAULT_STAGES", "STAGES", "NightlySummary", "Stage", "StageOutcome", "list_runs", "mark_interrupted",
           "run_nightly", "show_run"]
