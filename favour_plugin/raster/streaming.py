"""Run a function over every window of a grid on a small pool of threads, results in order.

GDAL and numpy release the GIL while they decompress and compute, so one
thread per core keeps the cores busy. Each worker thread owns a
:class:`~favour_plugin.raster.sources.BlockReader` (a GDAL handle must not be
shared between threads); results come back in window order, so whatever the
caller writes never depends on timing or on the number of threads. Progress
is reported and cancel checked once per window.
"""

from __future__ import annotations

import os
import threading
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor

from ..core.feedback import Feedback
from .blocks import Window, count_windows, iter_windows
from .grid import Grid
from .sources import BlockReader


def machine_cores() -> int:
    """Return the cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


#: Worker threads per job: the machine's cores, at most 16 (two windows per thread are in
#: flight, so memory grows with the count; past 16 the disk, not the cores, sets the pace).
DEFAULT_THREADS = min(16, machine_cores())


def map_windows(work: Callable[[Window, BlockReader], object], grid: Grid, feedback: Feedback,
                threads: int | None = None, span: tuple[float, float] = (0.0, 1.0),
                items: Sequence | None = None) -> Iterator[tuple[Window, object]]:
    """Yield ``(window, work(window, reader))`` for every window of ``grid``, in order.

    At most two windows per thread are in flight, so memory stays bounded
    whatever the grid's size. Progress runs across ``span`` as results are
    yielded; a cancel raises :class:`~favour_plugin.core.errors.CancelledError`
    before the next result, and the pool is shut down however the loop ends.
    ``items`` replaces the grid's windows by other units of work (a group of
    sampled rows, say), passed to ``work`` in their place.
    """
    threads = threads or DEFAULT_THREADS
    local = threading.local()
    readers: list[BlockReader] = []
    lock = threading.Lock()

    def run(window: Window):
        reader = getattr(local, "reader", None)
        if reader is None:
            reader = local.reader = BlockReader()
            with lock:
                readers.append(reader)
        return window, work(window, reader)

    if items is None:
        total, windows = count_windows(grid.width, grid.height), iter_windows(grid.width, grid.height)
    else:
        total, windows = len(items), iter(items)
    pending: deque = deque()
    done = 0
    pool = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="favour-block")
    try:
        while True:
            while len(pending) < 2 * threads:
                window = next(windows, None)
                if window is None:
                    break
                pending.append(pool.submit(run, window))
            if not pending:
                break
            feedback.check_cancelled()
            yield pending.popleft().result()
            done += 1
            feedback.set_progress(span[0] + (span[1] - span[0]) * done / total)
    finally:
        for future in pending:
            future.cancel()
        pool.shutdown(wait=True)
        for reader in readers:
            reader.close()
