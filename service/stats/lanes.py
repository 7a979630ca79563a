"""Two lanes of partial sums, so that one pass over the data uses two cores.

numpy releases the GIL inside ``np.dot`` (which hands ``A.T`` times ``A`` to BLAS ``dsyrk`` and
``X`` times ``b`` to ``dgemv``) and inside most ufunc loops, so two threads summing disjoint
row ranges of each block run largely in parallel. (The ``@`` operator does not for
matrix-matrix products: numpy 2.4's matmul keeps the GIL in that BLAS call, and two threads
of ``A.T @ A`` take as long as one. The passes therefore call ``np.dot``.) Every pass keeps
exactly :data:`LANES` partial sums: lane ``k`` always takes the ``k``-th row range that
:func:`lane_slices` gives for a block, and the lanes are added in lane order at the end. The
result is therefore the same bit for bit whether one thread or two do the work, and however the
operating system schedules them.

Measured on 1,000,000 rows (one full pass with the information; one thread, two threads):
3 terms 21.7, 17.6 ms; 9 terms 40.8, 27.9 ms; 21 terms 79.3, 50.7 ms; 41 terms 144, 88 ms;
200,000 x 101 terms 92, 49 ms. With fewer than :data:`PARALLEL_MIN_TERMS` terms a pass is a
stream of tiny numpy calls and the GIL hand-offs between them cost more than the second core
gives, so such passes stay on one thread; the lanes, and so the sums, stay the same.

The work of lane 0 runs in the calling thread and that of lane 1 in one shared worker thread
(created on first use, re-created after ``fork``). Several passes running at once (a server
fitting two models) share that worker; each caller waits only for its own lane.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor

__all__ = [
    "LANES",
    "PARALLEL_MIN_TERMS",
    "lane_slices",
    "pass_threads",
    "run_lanes",
    "set_pass_threads",
]

LANES = 2
PARALLEL_MIN_TERMS = 4  # fewer terms: one thread is faster (module docstring)
MIN_LANE_ROWS = 8192  # a block shorter than 2 x this stays in lane 0: splitting would cost more

_PREFIX = "riskfit-lane"
_lock = threading.Lock()
_pool: ThreadPoolExecutor | None = None
_threads = 2 if (os.cpu_count() or 1) >= 2 else 1


def _forget_pool() -> None:
    global _pool
    _pool = None


os.register_at_fork(after_in_child=_forget_pool)


def pass_threads() -> int:
    """Threads a pass uses (1 or 2); the sums do not depend on it."""
    return _threads


def set_pass_threads(n: int) -> None:
    """Use ``n`` threads per pass (1 runs both lanes in the caller; values > 2 act as 2)."""
    global _threads
    if n < 1:
        raise ValueError(f"pass threads must be >= 1, not {n}")
    _threads = min(int(n), LANES)


def lane_slices(m: int, align: int) -> list[slice]:
    """Row ranges of a block of ``m`` rows, one per lane that gets work (1 or 2 slices).

    The split point is a multiple of ``align`` (the chunk size of the fused pass), so that the
    chunks of a lane are the same whatever the number of threads.
    """
    if m < 2 * MIN_LANE_ROWS:
        return [slice(0, m)]
    mid = max(align, (m // 2) // align * align)
    return [slice(0, mid), slice(mid, m)]


def _worker() -> ThreadPoolExecutor:
    global _pool
    with _lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(max_workers=LANES - 1, thread_name_prefix=_PREFIX)
        return _pool


def run_lanes(tasks: Sequence[Callable[[], None]], *, n_terms: int = PARALLEL_MIN_TERMS) -> None:
    """Run ``tasks[k]`` for lane ``k``; returns when all are done.

    With two threads (and at least :data:`PARALLEL_MIN_TERMS` terms), lane 1 runs in the worker
    while lane 0 runs here. An exception is re-raised after every lane has stopped, lane 0's
    first (its rows come first).
    """
    nested = threading.current_thread().name.startswith(_PREFIX)  # never wait on ourselves
    if len(tasks) == 1 or _threads == 1 or nested or n_terms < PARALLEL_MIN_TERMS:
        for task in tasks:
            task()
        return
    futures: list[Future[None]] = [_worker().submit(task) for task in tasks[1:]]
    first: BaseException | None = None
    try:
        tasks[0]()
    except BaseException as exc:  # re-raised below, after the other lanes
        first = exc
    for fut in futures:
        other = fut.exception()
        if first is None and other is not None:
            first = other
    if first is not None:
        raise first
