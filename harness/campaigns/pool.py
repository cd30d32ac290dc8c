"""Batches of closed-loop work in worker processes, results in submission order."""

from __future__ import annotations

import multiprocessing as mp
import signal
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from typing import Any


def _worker_init() -> None:
    """A worker ends on SIGTERM at once (a handler inherited from an in-process CLI call
    would turn it into KeyboardInterrupt in the middle of a batch); Ctrl-C is the client's."""
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def ordered_map(fn: Callable[[Any], Any], jobs: Iterable[Any], workers: int) -> Iterator[Any]:
    """``fn`` over ``jobs`` on ``workers`` forked processes, yielding each result in the
    jobs' order as soon as it and those before it are done.  A worker that dies raises
    ``BrokenProcessPool`` here instead of leaving the client waiting for its batch for ever
    (as ``multiprocessing.Pool`` does)."""
    with ProcessPoolExecutor(
        workers, mp_context=mp.get_context("fork"), initializer=_worker_init
    ) as pool:
        yield from pool.map(fn, jobs)


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
