"""One executor for the heavy pure work of the stages, in three forms.

A stage hands the executor a pure function and batches of pure inputs (URLs, page bytes, texts) and gets
the results back, in the order of the batches, in the coordinating process: the only process that writes
to the database. So crash-safety and resuming stay the stages' own (a result not yet written is simply
computed again by the next run), and the three forms give identical results:

``inprocess``
    the calling process, one batch after the other (what every stage did before the executor);
``processes``
    a pool of worker processes on this machine (:mod:`concurrent.futures`), one per core by default;
``tcp://HOST:PORT``
    a Dask distributed cluster (its scheduler's address), for a lab's machines. Every worker needs the
    same linkfold installed; the functions travel by reference (module and name), the inputs by value.

``auto`` (the default) is ``processes`` on a machine with more than one core and ``inprocess`` on one,
and ``inprocess`` for a stage with little work (under :data:`AUTO_MIN_WORK` items): starting workers that
import the extraction library costs a second or two, more than a few dozen pages take.

At most ``window`` batches are in flight at once (twice the workers by default), so memory stays flat
however many batches a stage has; a result is yielded as soon as it and every batch before it are done.
Ctrl-C (or any exception in the consumer) cancels what is still queued and stops the workers.

The functions must be defined at module level in an importable module (a lambda or a closure cannot be
sent to another process), take one batch and return one result, and must not touch the database.
"""

from __future__ import annotations

import logging
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any, Protocol, TypeVar

from ..errors import ConfigError

log = logging.getLogger("linkfold")

In = TypeVar("In")
Out = TypeVar("Out")

FORMS = ("auto", "inprocess", "processes")

#: Below this many items of work, ``auto`` stays in process (see the module doc).
AUTO_MIN_WORK = 200


class Executor(Protocol):
    """Runs a pure function over batches; results come back in batch order."""

    #: ``inprocess``, ``processes`` or the cluster's address
    form: str
    #: how many batches can run at the same time
    workers: int

    def map(self, fn: Callable[[In], Out], batches: Iterable[In], *,
            window: int | None = None) -> Iterator[Out]: ...

    def close(self) -> None: ...


def cpu_count() -> int:
    """Cores this process may use (the scheduler's affinity mask where the platform tells it)."""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


class InProcess:
    """Batches one after the other in the calling process."""

    form = "inprocess"
    workers = 1

    def map(self, fn: Callable[[In], Out], batches: Iterable[In], *,
            window: int | None = None) -> Iterator[Out]:
        for batch in batches:
            yield fn(batch)

    def close(self) -> None:
        pass

    def __enter__(self) -> InProcess:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _ordered(submit: Callable[[In], Any], result: Callable[[Any], Out], cancel: Callable[[Any], None],
             batches: Iterable[In], window: int) -> Iterator[Out]:
    """Keep ``window`` submissions in flight and yield their results in submission order."""
    pending: deque[Any] = deque()
    try:
        for batch in batches:
            pending.append(submit(batch))
            if len(pending) >= window:
                yield result(pending.popleft())
        while pending:
            yield result(pending.popleft())
    finally:
        # Reached with work still pending only when the consumer stopped early or something raised
        # (Ctrl-C included): drop what has not started, so nothing runs on for a result nobody reads.
        for handle in pending:
            cancel(handle)


class ProcessPool:
    """A pool of worker processes on this machine."""

    form = "processes"

    def __init__(self, workers: int | None = None) -> None:
        self.workers = max(1, workers or cpu_count())
        self._pool: ProcessPoolExecutor | None = None

    def _started(self) -> ProcessPoolExecutor:
        if self._pool is None:
            import multiprocessing

            # forkserver, not fork: the coordinating process holds database connections and, during a
            # load, a writer thread; a forked copy of either is unsafe. Workers start from a clean
            # server process and import what the functions need once.
            context = multiprocessing.get_context("forkserver")
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=context)
        return self._pool

    def map(self, fn: Callable[[In], Out], batches: Iterable[In], *,
            window: int | None = None) -> Iterator[Out]:
        pool = self._started()

        def submit(batch: In) -> Future[Out]:
            return pool.submit(fn, batch)

        return _ordered(submit, lambda f: f.result(), lambda f: f.cancel(), batches,
                        window or 2 * self.workers)

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def __enter__(self) -> ProcessPool:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class DaskCluster:
    """A Dask distributed cluster, reached at its scheduler's address (``tcp://HOST:PORT``)."""

    def __init__(self, address: str, *, timeout: float = 30.0) -> None:
        try:
            from distributed import Client
        except ImportError as exc:  # an optional dependency: say how to get it
            raise ConfigError("a Dask cluster needs the 'distributed' package: "
                              "pip install 'linkfold[cluster]'") from exc
        self.form = address
        try:
            self._client = Client(address, timeout=timeout, set_as_default=False)
        except OSError as exc:
            raise ConfigError(f"cannot reach the Dask scheduler at {address}: {exc}") from exc
        workers = self._client.scheduler_info().get("workers", {})
        self.workers = max(1, sum(int(w.get("nthreads", 1)) for w in workers.values()))
        log.info("executor: Dask cluster at %s with %d worker threads", address, self.workers)

    def map(self, fn: Callable[[In], Out], batches: Iterable[In], *,
            window: int | None = None) -> Iterator[Out]:
        client = self._client

        def submit(batch: In) -> Any:
            # pure=False: two equal batches are two tasks (Dask would otherwise merge them by hash,
            # which is right for values but costs a hash of every batch's bytes).
            return client.submit(fn, batch, pure=False)

        return _ordered(submit, lambda f: f.result(), lambda f: f.cancel(), batches,
                        window or 2 * self.workers)

    def close(self) -> None:
        self._client.close()

    def __enter__(self) -> DaskCluster:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


@dataclass(frozen=True)
class ExecutorChoice:
    """What ``make_executor`` was asked for, after ``auto`` is decided (for summaries and logs)."""

    form: str
    workers: int


def choose(spec: str = "auto", *, workers: int = 0) -> ExecutorChoice:
    """Decide the form without starting anything: ``auto`` → ``processes`` on more than one core."""
    spec = (spec or "auto").strip()
    if spec.startswith("tcp://") or spec.startswith("tls://"):
        return ExecutorChoice(spec, workers)
    if spec not in FORMS:
        raise ConfigError(f"executor: {spec!r} is not one of {', '.join(FORMS)} or a tcp://HOST:PORT address")
    if workers < 0:
        raise ConfigError("executor workers: must be 0 (every core) or a positive number")
    cores = workers or cpu_count()
    if spec == "auto":
        spec = "processes" if cores > 1 else "inprocess"
    return ExecutorChoice(spec, 1 if spec == "inprocess" else cores)


def make_executor(spec: str = "auto", *, workers: int = 0,
                  timeout: float = 30.0) -> InProcess | ProcessPool | DaskCluster:
    """An executor for ``spec``: ``auto``, ``inprocess``, ``processes`` or a Dask scheduler's address.

    ``workers`` caps the local pool (0: one per core); ``timeout`` is how long a scheduler is waited for.
    Use it as a context manager so the workers stop.
    """
    choice = choose(spec, workers=workers)
    if choice.form == "inprocess":
        return InProcess()
    if choice.form == "processes":
        return ProcessPool(choice.workers)
    return DaskCluster(choice.form, timeout=timeout)


def executor_for(settings: Any, *, work: int, min_work: int = AUTO_MIN_WORK) -> InProcess | ProcessPool | DaskCluster:
    """The executor the settings ``executor`` and ``workers`` choose for ``work`` items (a stage's pending
    count). ``auto`` stays in process for less than ``min_work``; an explicit form is always honoured."""
    spec = str(getattr(settings, "executor", "auto") or "auto") if settings is not None else "auto"
    workers = int(getattr(settings, "workers", 0) or 0) if settings is not None else 0
    if spec == "auto" and work < min_work:
        return InProcess()
    return make_executor(spec, workers=workers)


__all__ = ["AUTO_MIN_WORK", "DaskCluster", "Executor", "ExecutorChoice", "InProcess", "ProcessPool", "choose", "cpu_count",
           "executor_for", "make_executor"]
