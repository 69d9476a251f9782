"""The screen's second thread: work started ahead, and lists of independent pieces
shared by both threads.

Some costly pieces of a measure's screen depend on the panel alone, not on the
summaries or on earlier sections: the dropout model and the within-wave ranks. The
screen starts them on a worker thread (``start``) while the calling thread builds the
summaries; the section that needs one takes it with ``computed``, which waits for it,
or computes it there and then when nothing was started (a serial run, a test's context).
Lists of independent pieces (the summaries' chunks, the structures' fits, the
replicate groups' refits) are worked through by both threads at once (``share``), each
result kept in its place, so whatever merges them merges in the same order.

The work is the same function of the same data either way, so the report is the same
byte for byte. Threads, not processes: the panel is shared without copying, and the
work is numpy on long arrays or batches of small matrices, which runs outside the
interpreter lock.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import Executor, ThreadPoolExecutor
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Callable, Iterable

WORKERS_VARIABLE = "PANELDIAG_WORKERS"

# the executor of the running screen; a worker thread sees None, so work on the
# worker never waits for the worker
_EXECUTOR: ContextVar[Executor | None] = ContextVar("paneldiag_executor", default=None)


# unit-waves from which a screen uses a second thread by default. Large panels spend
# their time in numpy on long arrays, outside the interpreter lock: 1M x 20 on an idle
# two-core machine took 14.0-15.0 s with two threads against 17.5-19.2 s serially
# (byte-identical reports). Small panels spend it in Python and small matrices, where a
# second thread only contends for the lock: the demo's grouped three-measure screen
# (19,200 unit-waves) took 27.7-29.4 s with two against 20.9-24.3 s with one.
THREADED_UNIT_WAVES = 2_000_000


def workers(n_unit_waves: int = 0) -> int:
    """Threads a screen of ``n_unit_waves`` uses: what the environment variable
    PANELDIAG_WORKERS says, else two on a machine with two or more cores when the panel
    has at least THREADED_UNIT_WAVES unit-waves, else one (everything on the calling
    thread, in order)."""
    text = os.environ.get(WORKERS_VARIABLE, "").strip()
    if text.isdigit():
        return max(1, int(text))
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") \
        else os.cpu_count() or 1
    return 2 if n_unit_waves >= THREADED_UNIT_WAVES and cores > 1 else 1


@contextmanager
def threads(n_workers: int):
    """Within this context, ``start`` and ``share`` use ``n_workers - 1`` worker
    threads beside the calling one (none when ``n_workers`` is 1)."""
    executor = ThreadPoolExecutor(n_workers - 1, "paneldiag") if n_workers > 1 else None
    token = _EXECUTOR.set(executor)
    try:
        yield executor
    finally:
        _EXECUTOR.reset(token)
        if executor is not None:
            executor.shutdown(cancel_futures=True)


def start(ctx, works: Iterable[Callable]) -> None:
    """Submit each ``work(ctx)`` to the worker; nothing in a serial run."""
    executor = _EXECUTOR.get()
    if executor is None:
        return
    for work in works:
        ctx.started[work] = executor.submit(work, ctx)


def computed(ctx, work: Callable):
    """``work(ctx)``: its result from the worker when it was started ahead."""
    future = getattr(ctx, "started", {}).get(work)
    return work(ctx) if future is None else future.result()


def share(fn: Callable, items: Iterable, give_up: Callable | None = None) -> list:
    """``[fn(item) for item in items]``, the items taken in turn by this thread and
    the worker (which joins once its earlier work is done). With ``give_up``, once a
    result satisfies it the items not yet taken are skipped (their places hold None):
    for lists that are useless as soon as one piece fails."""
    items = list(items)
    results = [None] * len(items)
    queue = iter(range(len(items)))
    lock = threading.Lock()
    failed = False

    def work_through():
        nonlocal failed
        while True:
            with lock:
                i = None if failed else next(queue, None)
            if i is None:
                return
            results[i] = fn(items[i])
            if give_up is not None and give_up(results[i]):
                failed = True

    executor = _EXECUTOR.get()
    if executor is None or len(items) < 2:
        work_through()
        return results

    helper = executor.submit(work_through)
    try:
        work_through()
    finally:
        if not helper.cancel():   # the worker took items: wait for its last one
            helper.result()
    return results
