"""Plain functions run off the main thread as QGIS tasks, their results handed back in it.

A :class:`FunctionTask` calls a function that touches no widget and no
project (input checks, value samples); QGIS calls :meth:`FunctionTask.finished`
in the main thread, which passes the result or the error to a callback. Tasks
are kept alive in ``_LIVE`` until then (QGIS holds only the C++ side).
"""

from __future__ import annotations

from collections.abc import Callable

from qgis.core import QgsApplication, QgsTask

_LIVE: set = set()


class FunctionTask(QgsTask):
    """Run ``function(*args)`` in a worker thread; call ``on_done(result, error)`` in the main one.

    ``error`` is the exception the function raised (``result`` is then None).
    The callback is not called once :meth:`forget` has been called.
    """

    def __init__(self, description: str, function: Callable, args: tuple = (),
                 on_done: Callable | None = None) -> None:
        super().__init__(description, QgsTask.CanCancel)
        self.function = function
        self.args = args
        self.on_done = on_done
        self.result = None
        self.error: BaseException | None = None

    def run(self) -> bool:  # worker thread: no widget, no project
        """Call the function and keep its result or error."""
        try:
            self.result = self.function(*self.args)
        except Exception as exc:  # handed to the main thread, which reports it
            self.error = exc
            return False
        return True

    def finished(self, result: bool) -> None:  # main thread
        """Hand the result to the callback and let the task go."""
        _LIVE.discard(self)
        callback, self.on_done = self.on_done, None
        if callback is not None:
            callback(self.result, self.error)

    def forget(self) -> None:
        """Drop the callback: the caller no longer wants the result."""
        self.on_done = None


def start(task: QgsTask) -> QgsTask:
    """Keep ``task`` alive and hand it to the QGIS task manager."""
    _LIVE.add(task)
    QgsApplication.taskManager().addTask(task)
    return task


def live_tasks() -> int:
    """Return how many of Favour's tasks have not finished yet."""
    return len(_LIVE)
