"""Problems shown at the node they belong to, found off the main thread while the user edits.

:class:`ProblemChecker` waits for edits to pause (a short debounce), then runs
:func:`~favour_plugin.raster.checks.input_problems` on a copy of the tree in a
task: the model's own problems plus missing files, bands, empty layers and
CRSs that differ from the grid. Results of an older tree are dropped. Marks for
proxies whose project layer was removed are added in the main thread (a
dictionary lookup per proxy).
"""

from __future__ import annotations

import copy

from qgis.core import QgsProject
from qgis.PyQt.QtCore import QObject, QTimer, pyqtSignal

from ..core.tree import Problem
from ..raster.checks import input_problems
from . import tasks
from .common import tr
from .layers import removed_layer_problems

DEBOUNCE_MS = 250


class ProblemChecker(QObject):
    """Keeps the problems of the controller's tree up to date; ``updated`` when they change."""

    updated = pyqtSignal()

    def __init__(self, controller, project: QgsProject | None = None, parent=None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.project = project or QgsProject.instance()
        self._found: list[Problem] = []
        self._generation = 0
        self._task = None
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(DEBOUNCE_MS)
        self._timer.timeout.connect(self._start)
        controller.changed.connect(self.schedule)
        self.project.layersRemoved.connect(self._layers_changed)
        self.project.layersAdded.connect(self._layers_changed)

    def disconnect_all(self) -> None:
        """Stop listening to the controller and the project (the dock is going away)."""
        self._timer.stop()
        for signal, slot in ((self.controller.changed, self.schedule),
                             (self.project.layersRemoved, self._layers_changed),
                             (self.project.layersAdded, self._layers_changed)):
            try:
                signal.disconnect(slot)
            except TypeError:
                pass
        if self._task is not None:
            self._task.forget()

    def schedule(self) -> None:
        """Check again once edits pause; what was found for the old tree no longer counts."""
        self._generation += 1
        if self.controller.tree is None:
            self._found = []
            self.updated.emit()
            return
        self._timer.start()

    def busy(self) -> bool:
        """Return True while a check is waiting or running."""
        return self._timer.isActive() or self._task is not None

    def problems(self) -> list[Problem]:
        """Return every known problem: inputs and model (from the last check) and removed layers."""
        return list(self._found) + removed_layer_problems(self.controller.tree, self.project)

    def by_node(self) -> dict[str, list[Problem]]:
        """Return the problems grouped by node path (the root's path for the tree's own)."""
        grouped: dict[str, list[Problem]] = {}
        root = self.controller.tree.root.name if self.controller.tree is not None else ""
        for problem in self.problems():
            grouped.setdefault(problem.node or root, []).append(problem)
        return grouped

    def _start(self) -> None:
        if self.controller.tree is None:
            return
        if self._task is not None:
            self._task.forget()
        generation = self._generation
        task = tasks.FunctionTask(tr("Favour: checking the tree"), input_problems,
                                  (copy.deepcopy(self.controller.tree),),
                                  lambda result, error: self._done(generation, result, error))
        self._task = task
        tasks.start(task)

    def _done(self, generation: int, result, error) -> None:
        self._task = None
        if generation != self._generation:
            return
        if error is not None:
            root = self.controller.tree.root.name if self.controller.tree is not None else ""
            result = [Problem(root, tr("the inputs could not be checked: {error}").format(error=error),
                              "warning")]
        self._found = list(result)
        self.updated.emit()

    def _layers_changed(self, *args) -> None:
        self.updated.emit()
