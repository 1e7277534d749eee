"""Value samples for the membership editor, fetched off the main thread and remembered.

:class:`SampleService` starts a task per proxy (file, band, layer, measure)
not yet sampled and emits :attr:`SampleService.ready` in the main thread when
it is done; samples are kept, so going back to a criterion shows its
histogram at once.
"""

from __future__ import annotations

import copy

from qgis.PyQt.QtCore import QObject, pyqtSignal

from ..core.tree import Tree
from . import tasks
from .common import tr
from .sampling import sample_key, sample_proxy


class SampleService(QObject):
    """Samples of proxy values by key; ``ready(key)`` or ``failed(key, message)`` when one arrives."""

    ready = pyqtSignal(object)
    failed = pyqtSignal(object, str)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self._samples: dict = {}
        self._errors: dict = {}
        self._pending: dict = {}

    def get(self, key):
        """Return the sample for ``key``, or None if it is not there (yet)."""
        return self._samples.get(key)

    def error(self, key) -> str | None:
        """Return why the sample for ``key`` could not be taken, if it failed."""
        return self._errors.get(key)

    def request(self, tree: Tree, path: str):
        """Return the sample of the leaf's proxy if known, else start taking it and return None."""
        key = sample_key(tree, path)
        if key in self._samples:
            return self._samples[key]
        if key not in self._pending and key not in self._errors:
            snapshot = copy.deepcopy(tree)
            task = tasks.FunctionTask(tr("Favour: sampling {name}").format(name=path), sample_proxy,
                                      (snapshot, path), lambda result, error: self._done(key, result,
                                                                                        error))
            self._pending[key] = task
            tasks.start(task)
        return None

    def forget(self) -> None:
        """Drop every sample and stop waiting for running ones (files may have changed)."""
        for task in self._pending.values():
            task.forget()
        self._pending.clear()
        self._samples.clear()
        self._errors.clear()

    def pending(self) -> int:
        """Return how many samples are being taken."""
        return len(self._pending)

    def _done(self, key, result, error) -> None:
        self._pending.pop(key, None)
        if error is not None:
            self._errors[key] = str(error)
            self.failed.emit(key, str(error))
            return
        self._samples[key] = result
        self.ready.emit(key)
