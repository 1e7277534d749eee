"""One evaluation of the tree through ``favour:evaluatetree``, as a QGIS task with progress and cancel.

:class:`RunJob` writes a copy of the tree (absolute paths) to a file of its
own, runs the algorithm in a ``QgsProcessingAlgRunnerTask`` and reports back
in the main thread with a :class:`RunOutcome`. Its folder is made beforehand by
:func:`run_folder`. The engine writes nothing under the final names unless it
succeeds; on failure or cancel the job also removes the run folder if it is
empty, so nothing partial is left behind.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil
import tempfile
from dataclasses import dataclass

from qgis.core import QgsApplication, QgsProcessingAlgRunnerTask, QgsProcessingContext, QgsProcessingFeedback
from qgis.PyQt import sip
from qgis.PyQt.QtCore import QObject, pyqtSignal

from ..core.tree import Tree
from .common import tr
from .output_folders import new_folder

ALGORITHM = "favour:evaluatetree"
OUTPUT_NAME = "favourability.tif"
COMPONENT_FOLDER = "components"
#: Cell budget of a quick look: the demo's 1.08 million cells are coarsened by 2.
QUICK_LOOK_CELLS = 1_000_000

# Jobs whose task is running: QGIS's task holds raw pointers to their context and feedback.
_RUNNING: set = set()


@dataclass
class RunOutcome:
    """How a run ended: its output files, or why there are none."""

    ok: bool
    cancelled: bool
    quick: bool
    folder: str
    output: str | None = None
    node_folder: str | None = None
    lineage: str | None = None
    message: str = ""


class ErrorKeepingFeedback(QgsProcessingFeedback):
    """Processing feedback that keeps the errors the algorithm reports, for the message bar."""

    def __init__(self) -> None:
        super().__init__()
        self.errors: list[str] = []

    def reportError(self, error, fatalError=False):  # noqa: N802, N803 (QGIS API names)
        """Keep an error message."""
        self.errors.append(error)
        super().reportError(error, fatalError)


def _stamp() -> str:
    """Return the local time as run folders name it: ``YYYYMMDD-HHMMSS``."""
    return _dt.datetime.now().strftime("%Y%m%d-%H%M%S")


def run_folder(base: str, quick: bool = False) -> str:
    """Make and return a new folder under ``base`` for one run: ``run-YYYYMMDD-HHMMSS`` (or ``quick-…``).

    The folder is made atomically (``-2``, ``-3`` … when the name is taken,
    see :func:`~.output_folders.new_folder`), so two runs never share one.

    Raises
    ------
    OSError
        The folder cannot be made.
    """
    return new_folder(base, f"{'quick' if quick else 'run'}-{_stamp()}")


class RunJob(QObject):
    """Evaluate a tree into ``folder`` in the background.

    Signals
    -------
    progress_changed(float)
        Percentage done.
    finished(RunOutcome)
        Emitted once, in the main thread.
    """

    progress_changed = pyqtSignal(float)
    finished = pyqtSignal(object)

    def __init__(self, tree: Tree, folder: str, component_rasters: bool = False, quick: bool = False,
                 parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.tree = tree
        self.folder = os.path.abspath(folder)
        self.component_rasters = component_rasters and not quick
        self.quick = quick
        self.task = None
        self.context = None
        self.feedback = None
        self._work = None
        self.outcome: RunOutcome | None = None

    @property
    def running(self) -> bool:
        """True from :meth:`start` until :attr:`finished` is emitted."""
        return self.task is not None

    def start(self) -> None:
        """Write the tree file for the run and hand the algorithm's task to QGIS.

        Raises
        ------
        RuntimeError
            The algorithm is not registered (the provider did not load).
        """
        algorithm = QgsApplication.processingRegistry().algorithmById(ALGORITHM)
        if algorithm is None:
            raise RuntimeError(tr("the algorithm {id} is not available; is the Favour provider "
                                  "loaded?").format(id=ALGORITHM))
        self._work = tempfile.mkdtemp(prefix="favour-run-")
        tree_file = os.path.join(self._work, "tree.favour.json")
        self.tree.save(tree_file)
        parameters = {"TREE": tree_file, "OUTPUT": os.path.join(self.folder, OUTPUT_NAME)}
        if self.component_rasters:
            parameters["NODE_FOLDER"] = os.path.join(self.folder, COMPONENT_FOLDER)
        if self.quick:
            parameters["MAX_CELLS"] = QUICK_LOOK_CELLS
        self.context = QgsProcessingContext()
        self.feedback = ErrorKeepingFeedback()
        self.feedback.progressChanged.connect(self.progress_changed)
        self.task = QgsProcessingAlgRunnerTask(algorithm, parameters, self.context, self.feedback)
        self.task.executed.connect(self._executed)
        _RUNNING.add(self)
        QgsApplication.taskManager().addTask(self.task)

    def cancel(self) -> None:
        """Ask the run to stop; :attr:`finished` follows with ``cancelled`` set."""
        if self.feedback is not None:
            self.feedback.cancel()
        if self.task is not None and not sip.isdeleted(self.task):
            self.task.cancel()

    def _executed(self, ok: bool, results: dict) -> None:
        cancelled = self.feedback.isCanceled()
        self.task = None
        _RUNNING.discard(self)
        if self._work:
            shutil.rmtree(self._work, ignore_errors=True)
        if ok and not cancelled:
            node_folder = results.get("NODE_FOLDER") or None
            self.outcome = RunOutcome(True, False, self.quick, self.folder, results.get("OUTPUT"),
                                      node_folder if self.component_rasters else None,
                                      results.get("LINEAGE"))
        else:
            remove_empty_folders(self.folder)
            message = tr("cancelled; no output was written") if cancelled else \
                "\n".join(self.feedback.errors) or tr("the evaluation failed")
            self.outcome = RunOutcome(False, cancelled, self.quick, self.folder, message=message)
        self.finished.emit(self.outcome)


def remove_empty_folders(folder: str) -> None:
    """Remove ``folder`` and the folders under it that hold no file (never a file)."""
    if not os.path.isdir(folder):
        return
    for here, _, _ in sorted(os.walk(folder), key=lambda entry: -len(entry[0])):
        try:
            os.rmdir(here)
        except OSError:
            pass  # not empty: keep it and what is in it
