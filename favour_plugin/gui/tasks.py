"""Plain functions run off the main thread as QGIS tasks, their results handed back in it.

A :class:`FunctionTask` calls a function that touches no widget and no
project (input checks, value samples); QGIS calls :meth:`FunctionTask.finished`
in the main thread, which passes the result or the error to a callback. Tasks
are kept alive in ``_LIVE`` until then (QGIS holds only the C++ side).
:class:`KeyedTasks` keeps the answers of one such function by its arguments
(filter choices, class counts), so each is computed once.
"""

from __future__ import annotations

from collections.abc import Callable

from qgis.core import QgsApplication, QgsTask
from qgis.PyQt.QtCore import QObject, pyqtSignal

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
            # Without its traceback: the frames would keep GDAL objects alive in a cycle with this
            # task, and the collector may free a dataset before its band (a crash in the bindings).
            exc.__traceback__ = exc.__context__ = exc.__cause__ = None
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


class KeyedTasks(QObject):
    """Answers of one plain function by its arguments, each computed once in a task and remembered.

    :meth:`request` returns the answer for its arguments if it is in, else
    starts ``function(*key)`` in a :class:`FunctionTask` and returns None;
    ``ready(key)`` or ``failed(key, message)`` follows in the main thread.
    A failure is remembered too (asked again only after :meth:`forget`).
    """

    ready = pyqtSignal(object)
    failed = pyqtSignal(object, str)

    def __init__(self, function: Callable, description: str, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.function = function
        self.description = description
        self._found: dict = {}
        self._errors: dict = {}
        self._pending: dict = {}

    def get(self, key: tuple):
        """Return the answer for ``key`` if it is in, else None."""
        return self._found.get(key)

    def error(self, key: tuple) -> str | None:
        """Return why the answer for ``key`` could not be had, if it could not."""
        return self._errors.get(key)

    def request(self, *key):
        """Return the answer for these arguments if known, else start computing it and return None."""
        if key in self._found:
            return self._found[key]
        if key not in self._pending and key not in self._errors:
            task = FunctionTask(self.description.format(*key), self.function, key,
                                lambda result, error: self._done(key, result, error))
            self._pending[key] = task
            start(task)
        return None

    def pending(self) -> int:
        """Return how many answers are being computed."""
        return len(self._pending)

    def forget(self) -> None:
        """Drop every answer and stop waiting for running tasks (files may have changed)."""
        for task in self._pending.values():
            task.forget()
        self._pending.clear()
        self._found.clear()
        self._errors.clear()

    def _done(self, key, result, error) -> None:
        self._pending.pop(key, None)
        if error is not None:
            self._errors[key] = str(error)
            self.failed.emit(key, str(error))
            return
        self._found[key] = result
        self.ready.emit(key)
