"""Running batch cases: in this process, on a local Dask cluster, or through a Dask scheduler.

:func:`batch_client` gives a ``distributed.Client``: by default on a
``LocalCluster`` of N single-threaded worker processes started here (the
engine steps a front on one thread, so one case per process uses a core),
or connected to an existing scheduler (``tcp://host:port``), or ``None``
(``workers=0``: cases run one after another in this process).

:func:`run_cases` submits every case as one task, hands each result to a
callback as it finishes, and returns the results in case order. A case
whose worker is lost while it runs (killed, out of memory) is submitted once
more; lost twice, it is reported failed. Ctrl+C sets the batch's cancel
event (running cases stop at their next check), cancels what has not
finished and raises :class:`BatchInterrupted` carrying every result so far;
finished cases' files are complete (each save is atomic).

References
----------
.. [1] M. Rocklin, "Dask: parallel computation with blocked algorithms and
   task scheduling", Proc. 14th Python in Science Conf. (2015) 130-136.
"""

from __future__ import annotations

import logging
import os
import uuid
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import replace
from typing import Any

from engine.batch.case import CaseResult, RunOptions, problem_result, run_case
from engine.batch.manifest import CaseProblem, CaseSpec

__all__ = ["BatchInterrupted", "batch_client", "run_cases", "default_workers", "LOST_TWICE"]

#: Error of a case whose worker was lost on both attempts.
LOST_TWICE = ("the worker running the case was lost on both attempts (killed, or out of memory); "
              "see the workers' logs")


class BatchInterrupted(KeyboardInterrupt):
    """Ctrl+C during a batch; ``results`` holds every case (unfinished ones cancelled)."""

    def __init__(self, results: list[CaseResult]) -> None:
        super().__init__("interrupted")
        self.results = results


def default_workers() -> int:
    """Worker processes by default: the cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@contextmanager
def batch_client(*, workers: int | None = None, scheduler: str | None = None,
                 timeout: float = 30.0) -> Iterator[Any]:
    """A Dask client for a batch (closed, and a local cluster shut down, on leaving).

    Parameters
    ----------
    workers : int, optional
        Worker processes of the local cluster (default :func:`default_workers`);
        0 runs cases in this process (the context gives ``None``).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:port``); ``workers``
        is then not used.
    timeout : float
        Seconds to wait for the scheduler.

    Raises
    ------
    ValueError
        ``workers`` below 0, or the scheduler cannot be reached.
    """
    if scheduler:
        from distributed import Client

        try:
            client = Client(scheduler, timeout=timeout, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise ValueError(f"--scheduler {scheduler}: cannot connect ({' '.join(str(exc).split())})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = default_workers() if workers is None else int(workers)
    if n < 0:
        raise ValueError(f"workers: expected 0 (this process) or more worker processes, got {workers!r}")
    if n == 0:
        yield None
        return
    import dask
    from distributed import Client, LocalCluster

    # A lost worker fails its task at once; run_cases resubmits it once itself. The scheduler's
    # HTTP routes (and dashboard, when bokeh is installed) take a free loopback port, not 8787.
    # Workers keep glibc's own malloc thresholds: Dask's MALLOC_TRIM_THRESHOLD_ also turns off the
    # dynamic mmap threshold, which makes every array of a step a fresh mmap whose pages fault in
    # again (DEVELOPERS.md, Batches).
    # No statistical profiler either (it samples the case's stack every 10 ms for a dashboard).
    with dask.config.set({"distributed.scheduler.allowed-failures": 0,
                          "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
                          "distributed.worker.profile.enabled": False}):
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                               scheduler_port=0, dashboard_address="127.0.0.1:0", silence_logs=logging.CRITICAL)
    try:
        client = Client(cluster, set_as_default=False)
        try:
            client.run(_import_engine)  # once per worker, before the first case's clock starts
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


def _import_engine() -> None:
    """Import what a case needs (a worker's first case would otherwise pay for it); one thread per worker.

    Dask already gives each worker one BLAS thread; the fronts' tree queries would still start two
    threads each, and two workers on two cores then slowed each other (1.12 times the time in cases).
    """
    import engine.batch.case  # noqa: F401
    import engine.io  # noqa: F401
    import engine.nodes.layout
    import engine.session  # noqa: F401

    engine.nodes.layout.TREE_WORKERS = 1


def run_cases(cases: Sequence[CaseSpec | CaseProblem], options: RunOptions, *, client: Any = None,
              on_result: Callable[[CaseResult], None] | None = None, retries: int = 1,
              runner: Callable[[CaseSpec | CaseProblem, RunOptions], CaseResult] = run_case) -> list[CaseResult]:
    """Run every case; return the results in case order.

    Parameters
    ----------
    cases : sequence of CaseSpec or CaseProblem
        Problems are reported failed without running.
    options : RunOptions
        Output folder, force, operator.
    client : distributed.Client, optional
        Where to run (None: here, one case after another).
    on_result : callable, optional
        Called with each result as it arrives (progress display).
    retries : int
        Times a case whose worker was lost is submitted again.
    runner : callable
        The function a worker runs per case (:func:`engine.batch.case.run_case`).

    Raises
    ------
    BatchInterrupted
        Ctrl+C; carries every result (unfinished cases cancelled).
    """
    report = on_result or (lambda result: None)
    results: list[CaseResult | None] = [None] * len(cases)
    todo: list[int] = []
    for i, case in enumerate(cases):
        if isinstance(case, CaseProblem):
            results[i] = problem_result(case, case.error)
            report(results[i])
        else:
            todo.append(i)
    if client is None:
        _run_here(cases, todo, options, results, report, runner)
    else:
        _run_on_cluster(client, cases, todo, options, results, report, retries, runner)
    return [r for r in results if r is not None]


def _cancelled_rest(cases: Sequence[Any], results: list[CaseResult | None]) -> list[CaseResult]:
    return [r if r is not None else problem_result(cases[i], "not run: the batch was interrupted", status="cancelled")
            for i, r in enumerate(results)]


def _run_here(cases: Sequence[Any], todo: list[int], options: RunOptions, results: list[CaseResult | None],
              report: Callable[[CaseResult], None], runner: Callable[..., CaseResult]) -> None:
    try:
        for i in todo:
            results[i] = runner(cases[i], options)
            report(results[i])
    except KeyboardInterrupt:
        raise BatchInterrupted(_cancelled_rest(cases, results)) from None


def _run_on_cluster(client: Any, cases: Sequence[Any], todo: list[int], options: RunOptions,
                    results: list[CaseResult | None], report: Callable[[CaseResult], None], retries: int,
                    runner: Callable[..., CaseResult]) -> None:
    from distributed import Event, as_completed
    from distributed.scheduler import KilledWorker

    batch = uuid.uuid4().hex[:12]
    options = replace(options, cancel_event=f"isotide-batch-{batch}-cancel")
    attempts = [0] * len(cases)
    pending: dict[Any, int] = {}

    def submit(i: int) -> Any:
        attempts[i] += 1
        future = client.submit(runner, cases[i], options, key=f"isotide-case-{batch}-{i}-{attempts[i]}", pure=False)
        pending[future] = i
        return future

    finished = as_completed([submit(i) for i in todo], loop=client.loop)
    try:
        for future in finished:
            i = pending.pop(future)
            if future.status == "finished":
                result = replace(future.result(), attempts=attempts[i])
            elif future.status == "cancelled":
                result = problem_result(cases[i], "the task was cancelled on the cluster", status="cancelled")
            else:
                exc = future.exception()
                if isinstance(exc, KilledWorker) and attempts[i] <= retries:
                    finished.add(submit(i))
                    future.release()
                    continue
                error = LOST_TWICE if isinstance(exc, KilledWorker) else f"{type(exc).__name__}: {exc}"
                result = replace(problem_result(cases[i], error), attempts=attempts[i])
            future.release()
            results[i] = result
            report(result)
    except KeyboardInterrupt:
        try:
            Event(options.cancel_event, client=client).set()
            client.cancel(list(pending))
        except Exception:  # noqa: BLE001 - the client may already be closing; the cases are cancelled anyway
            pass
        raise BatchInterrupted(_cancelled_rest(cases, results)) from None
