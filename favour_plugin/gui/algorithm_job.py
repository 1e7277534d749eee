"""One run of a Favour processing algorithm as a QGIS task, with progress, cancel and a tidy end.

:class:`AlgorithmJob` is what the dock's runs share: it looks the algorithm
up, hands it to a ``QgsProcessingAlgRunnerTask`` and reports back in the
main thread. A subclass says what parameters it passes
(:meth:`~AlgorithmJob.parameters`) and how an ending reads
(:meth:`~AlgorithmJob.outcome_for`); :class:`~.run_job.RunJob`,
:class:`~.ensemble_job.EnsembleJob` and :class:`~.handover_job.HandoverJob`
are the three. Each run writes into a new folder of its own, made by
:func:`stamped_folder`; the algorithms put nothing under their final names
unless they succeed, and a failed or cancelled run leaves no empty folder.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil
import tempfile

from qgis.core import QgsApplication, QgsProcessingAlgRunnerTask, QgsProcessingContext, QgsProcessingFeedback
from qgis.PyQt import sip
from qgis.PyQt.QtCore import QObject, QTimer, pyqtSignal

from ..core.tree import Tree
from .common import tr
from .output_folders import new_folder

# Jobs whose task is running: QGIS's task holds raw pointers to their context and feedback.
_RUNNING: set = set()


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


def stamped_folder(base: str, stem: str) -> str:
    """Make and return a new folder ``STEM-YYYYMMDD-HHMMSS`` (local time) under ``base``.

    The folder is made atomically (``-2``, ``-3`` … when the name is taken,
    see :func:`~.output_folders.new_folder`), so two runs never share one.

    Raises
    ------
    OSError
        The folder cannot be made.
    """
    return new_folder(base, f"{stem}-{_stamp()}")


def remove_empty_folders(folder: str) -> None:
    """Remove ``folder`` and the folders under it that hold no file (never a file)."""
    if not os.path.isdir(folder):
        return
    for here, _, _ in sorted(os.walk(folder), key=lambda entry: -len(entry[0])):
        try:
            os.rmdir(here)
        except OSError:
            pass  # not empty: keep it and what is in it


def algorithm_available(algorithm: str) -> bool:
    """Return True when the processing registry knows ``algorithm``."""
    return QgsApplication.processingRegistry().algorithmById(algorithm) is not None


class AlgorithmJob(QObject):
    """Run one processing algorithm into ``folder`` in the background.

    Signals
    -------
    progress_changed(float)
        Percentage done.
    finished(outcome)
        Emitted once, in the main thread, with what :meth:`outcome_for` made.
    """

    progress_changed = pyqtSignal(float)
    finished = pyqtSignal(object)
    #: The message of a failure that reported no error of its own.
    failure_text = "the run failed"

    def __init__(self, algorithm: str, folder: str, project=None, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.algorithm = algorithm
        self.folder = os.path.abspath(folder)
        self.project = project
        self.task = None
        self.context = None
        self.feedback = None
        self.outcome = None
        self._work = None
        self._cancel_asked = False

    @property
    def running(self) -> bool:
        """True from :meth:`start` until :attr:`finished` is emitted."""
        return self.task is not None

    def parameters(self) -> dict:
        """Return the algorithm's parameters (called once, by :meth:`start`)."""
        raise NotImplementedError

    def outcome_for(self, ok: bool, cancelled: bool, results: dict, message: str = ""):
        """Return the outcome :attr:`finished` carries: ``results`` on success, else why there are none."""
        raise NotImplementedError

    def tree_file(self, tree: Tree) -> str:
        """Write ``tree`` to a work file of this run (removed when it ends); return its path."""
        self._work = tempfile.mkdtemp(prefix="favour-job-")
        path = os.path.join(self._work, "tree.favour.json")
        tree.save(path)
        return path

    def start(self) -> None:
        """Hand the algorithm's task to QGIS.

        Raises
        ------
        RuntimeError
            The algorithm is not registered (the Favour provider did not load).
        """
        algorithm = QgsApplication.processingRegistry().algorithmById(self.algorithm)
        if algorithm is None:
            raise RuntimeError(tr("the algorithm {id} is not available in this version of Favour "
                                  "(or the Favour provider did not load)").format(id=self.algorithm))
        parameters = self.parameters()
        self.context = QgsProcessingContext()
        if self.project is not None:
            self.context.setProject(self.project)
        self.feedback = ErrorKeepingFeedback()
        self.feedback.progressChanged.connect(self.progress_changed)
        self.task = QgsProcessingAlgRunnerTask(algorithm, parameters, self.context, self.feedback)
        self.task.executed.connect(self._executed)
        _RUNNING.add(self)
        QgsApplication.taskManager().addTask(self.task)

    def cancel(self) -> None:
        """Ask the run to stop; :attr:`finished` follows with ``cancelled`` set."""
        self._cancel_asked = True
        if self.feedback is not None:
            self.feedback.cancel()
        if self.task is not None and not sip.isdeleted(self.task):
            self.task.cancel()

    def _executed(self, ok: bool, results: dict) -> None:
        # QGIS also cancels a task whose parameters the algorithm refused before it started (a layer
        # that is not a file, say); that is a failure with the algorithm's message, not a cancel.
        cancelled = self._cancel_asked or (self.feedback.isCanceled() and not self.feedback.errors)
        self.task = None
        _RUNNING.discard(self)
        if self._work:
            shutil.rmtree(self._work, ignore_errors=True)
        if ok and not cancelled:
            self.outcome = self.outcome_for(True, False, dict(results))
        else:
            remove_empty_folders(self.folder)
            message = tr("cancelled; no output was written") if cancelled else \
                "\n".join(self.feedback.errors) or tr(self.failure_text)
            self.outcome = self.outcome_for(False, cancelled, {}, message)
        self.finished.emit(self.outcome)
        # The context holds the layers the algorithm opened (the deposits, say); let them go while
        # QGIS and GDAL are still up, not whenever Python collects the job.
        QTimer.singleShot(0, self._release)

    def _release(self) -> None:
        self.context = None
        self.feedback = None
