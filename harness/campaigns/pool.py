"""Batches of closed-loop work on Dask workers (or in this process), results in submission
order, and the progress line of a batched campaign."""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Iterator, Sequence
from functools import partial
from typing import Any


def progress_line(
    k: int, batches: int, done: int, total: int, unit: str, tally: str, t0: float
) -> str:
    """One progress line of a batched campaign: batches and ``unit`` done, a ``tally`` (for
    example "3 failing so far"), elapsed time, rate and time left."""
    el = time.perf_counter() - t0
    rate = done / el if el > 0 else 0.0
    left = f"about {(total - done) / rate:.0f} s left" if rate > 0 and done < total else "done"
    return (
        f"  batch {k + 1}/{batches} done: {done}/{total} {unit}, {tally}, {el:.0f} s, "
        f"{rate:.1f} {unit}/s, {left}"
    )


def one_thread(fn: Callable[[Any], Any], job: Any) -> Any:
    """``fn(job)`` with numba's parallel kernels on one thread (``numba.set_num_threads``
    holds for the calling thread only, the task's): a batch on a worker does not split over
    the cores the other workers use.  Not the ``NUMBA_NUM_THREADS`` variable: numba refuses
    to compile once its threads run if the variable then reads differently."""
    try:
        import numba
    except ImportError:  # pragma: no cover - without numba the kernels run as Python
        return fn(job)
    numba.set_num_threads(1)
    return fn(job)


CONNECT_S = 30.0  # longest wait for a scheduler's answer (s)


def _connect(address: str, client_type: Any) -> Any:
    """A client of the scheduler at ``address``, or OSError naming it: refused, timed out, or
    not a Dask scheduler at all (a service that accepts the connection and never answers
    would otherwise hold the handshake for ever)."""
    box: dict[str, Any] = {}

    def attempt() -> None:
        try:
            box["client"] = client_type(address, timeout=f"{CONNECT_S:g}s")
        except Exception as exc:  # noqa: BLE001 - reported below with its type
            box["error"] = exc

    t = threading.Thread(target=attempt, daemon=True)
    t.start()
    t.join(CONNECT_S + 5.0)
    if "client" in box:
        return box["client"]
    why = box.get("error")
    detail = f"{type(why).__name__}: {str(why)[:200]}" if why else f"no answer in {CONNECT_S:g} s"
    raise OSError(f"--scheduler {address}: no Dask scheduler answered there ({detail})")


def dask_map(
    fn: Callable[[Any], Any],
    jobs: Sequence[Any],
    workers: int,
    scheduler: str | None = None,
) -> Iterator[Any]:
    """``fn`` over ``jobs`` on Dask (``dask.distributed``), each result in the jobs' order.
    ``scheduler`` (``tcp://HOST:PORT``): an existing cluster; else an embedded
    ``LocalCluster`` of ``workers`` single-threaded processes, closed at the end; each job
    runs its plant on one thread (``one_thread``): the workers share the cores.  Dask
    re-runs the job of a worker lost mid-way on another (up to its ``allowed-failures``), so
    the results do not depend on where or how often a job ran: the jobs are deterministic."""
    import logging

    from distributed import Client, LocalCluster

    cluster = None
    if scheduler:
        client = _connect(scheduler, Client)
    else:
        cluster = LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            silence_logs=logging.ERROR,
        )
        client = Client(cluster)
    try:
        futures = client.map(partial(one_thread, fn), list(jobs), pure=False)
        for f in futures:
            yield f.result()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def where(workers: int, scheduler: str | None) -> str:
    """Where the batches run, for a campaign's first log line."""
    if scheduler:
        return f"the Dask scheduler at {scheduler}"
    return f"{workers} Dask worker(s)" if workers > 1 else "this process"


def batch_map(
    fn: Callable[[Any], Any],
    jobs: Sequence[Any],
    workers: int,
    scheduler: str | None = None,
    local: Callable[[Any], Any] | None = None,
) -> Iterator[Any]:
    """Where a campaign's batches run: on a Dask cluster (``scheduler``) or an embedded one
    (``workers`` > 1 and more than one batch), else in this process (``local``, default
    ``fn``)."""
    if scheduler or (workers > 1 and len(jobs) > 1):
        return dask_map(fn, jobs, workers, scheduler)
    return map(local or fn, jobs)
