"""Where fence tasks run: in this process, in local worker processes, or on a dask cluster.

Every task carries only its own fence's arrays and its own seed, so the result of a run does
not depend on the executor or on the number of workers.
"""

from __future__ import annotations

import atexit
import os
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor
from typing import Any

from zonedesign import interrupts
from zonedesign.errors import InputError

EXECUTORS = ("local", "dask")
SCHEDULER_TIMEOUT = 10  # seconds to wait for a --scheduler address to answer


Executor = Callable[..., list[Any]]


def serial_executor(tasks: list[Any], fn: Callable[[Any], Any]) -> list[Any]:
    """Run tasks one after another in this process: `[fn(t) for t in tasks]`."""
    out = []
    for t in tasks:
        interrupts.check()
        out.append(fn(t))
    return out


def _largest_first(tasks: list[Any]) -> list[int]:
    # the largest fence decides the wall time, so it starts first
    def size(t: Any) -> int:
        problem = getattr(t, "problem", None)
        return -(problem.n if problem is not None else 0)

    return sorted(range(len(tasks)), key=lambda i: (size(tasks[i]), i))


def make_executor(
    kind: str = "local",
    workers: int = 1,
    scheduler: str | None = None,
    on_done: Callable[[Any], None] | None = None,
) -> Callable[[list[Any]], list[Any]]:
    """An executor: `run(tasks, fn)` gives `[fn(t) for t in tasks]`, in task order.

    The caller passes its task function (design, redraw, a sweep variant). Between tasks
    the run-wide stop flag is checked; on an interrupt the worker processes are ended at
    once, not waited for.
    """
    if kind not in EXECUTORS:
        raise InputError(f"--executor must be one of {', '.join(EXECUTORS)}, not {kind!r}")
    if workers < 1:
        raise InputError(f"--workers must be at least 1, not {workers}")
    if kind == "dask":
        return _dask_executor(workers, scheduler, on_done)
    return _local_executor(workers, on_done)


def _local_executor(workers: int, on_done: Callable[[Any], None] | None):
    def run(tasks: list[Any], fn: Callable[[Any], Any]) -> list[Any]:
        if workers == 1 or len(tasks) <= 1:
            out = []
            for t in tasks:
                interrupts.check()
                r = fn(t)
                if on_done:
                    on_done(r)
                out.append(r)
            return out
        order = _largest_first(tasks)
        results: list[Any] = [None] * len(tasks)
        n = min(workers, len(tasks), os.cpu_count() or 1)
        # workers ignore SIGINT: the parent takes the signal and ends them
        pool = ProcessPoolExecutor(max_workers=n, initializer=interrupts.quiet_worker)
        try:
            futures = {pool.submit(fn, tasks[i]): i for i in order}
            for fut in _as_completed(futures):
                interrupts.check()
                r = fut.result()
                results[futures[fut]] = r
                if on_done:
                    on_done(r)
        except BaseException:
            _end_pool(pool)
            raise
        pool.shutdown(wait=True)
        interrupts.check()
        return results

    return run


def _end_pool(pool: ProcessPoolExecutor) -> None:
    """Stop a pool without waiting for its running tasks (an interrupt, or a failed task)."""
    processes = list(getattr(pool, "_processes", {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        if proc.is_alive():
            proc.terminate()
    for proc in processes:
        proc.join(timeout=5)


def _as_completed(futures):
    from concurrent.futures import as_completed

    return as_completed(futures)


def _dask_executor(workers: int, scheduler: str | None, on_done: Callable[[Any], None] | None):
    try:
        from dask.distributed import Client, LocalCluster, as_completed
    except ImportError as exc:  # pragma: no cover - depends on the install
        raise InputError("--executor dask needs the dask extra: pip install 'zonedesign[dask]'") from exc

    state: dict[str, Any] = {}

    def client():
        # one cluster for the whole run: starting one per tier costs seconds each time
        if "client" not in state:
            if scheduler:
                try:
                    state["client"] = Client(scheduler, timeout=SCHEDULER_TIMEOUT)
                except (OSError, TimeoutError, ValueError) as exc:
                    raise InputError(
                        f"--scheduler {scheduler}: no dask scheduler answered within "
                        f"{SCHEDULER_TIMEOUT} s ({type(exc).__name__})"
                    ) from None
            else:
                state["cluster"] = LocalCluster(
                    n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None
                )
                state["client"] = Client(state["cluster"])
            atexit.register(close)
        return state["client"]

    def close() -> None:
        if "client" in state:
            state.pop("client").close()
        if "cluster" in state:
            state.pop("cluster").close()

    def run(tasks: list[Any], fn: Callable[[Any], Any]) -> list[Any]:
        interrupts.check()
        c = client()
        order = _largest_first(tasks)
        # each task is submitted on its own: a worker receives one fence's arrays only
        futures = [c.submit(fn, tasks[i], pure=False) for i in order]
        where = {f.key: i for f, i in zip(futures, order)}
        results: list[Any] = [None] * len(tasks)
        try:
            for fut in as_completed(futures):
                interrupts.check()
                r = fut.result()
                results[where[fut.key]] = r
                if on_done:
                    on_done(r)
        except BaseException:
            c.cancel(futures, force=True)
            raise
        interrupts.check()
        return results

    run.close = close  # type: ignore[attr-defined]
    return run
