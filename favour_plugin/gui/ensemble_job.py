"""The workshop's uncertainty runs (``favour:montecarlo``, ``favour:sensitivity``) as QGIS tasks.

:class:`EnsembleJob` is to these algorithms what :class:`~.run_job.RunJob` is
to ``favour:evaluatetree``: it writes a copy of the tree (absolute paths) to a
file of its own, runs the algorithm in a ``QgsProcessingAlgRunnerTask`` with
progress and cancel, and reports back in the main thread with an
:class:`EnsembleOutcome`. Each run writes into a new folder of its own
(``montecarlo-YYYYMMDD-HHMMSS``, ``sensitivity-…``) under the dock's lasting
results folder, made by :func:`ensemble_folder`; a failed or cancelled run
leaves no empty folder behind.

:func:`monte_carlo_parameters` and :func:`sensitivity_parameters` build the
algorithms' parameters (their keys are the algorithms' parameter names), so
what the dock asks for is plain data, checked without running anything.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, field

from qgis.core import QgsApplication, QgsProcessingAlgRunnerTask, QgsProcessingContext
from qgis.PyQt import sip
from qgis.PyQt.QtCore import QObject, QTimer, pyqtSignal

from ..core.tree import Tree
from .common import tr
from .output_folders import new_folder
from .run_job import ErrorKeepingFeedback, remove_empty_folders

MONTE_CARLO = "favour:montecarlo"
SENSITIVITY = "favour:sensitivity"
#: Folder name stem of each kind of run.
STEMS = {MONTE_CARLO: "montecarlo", SENSITIVITY: "sensitivity"}
#: Monte Carlo output parameter → file name in the run folder, in the order the layers are listed.
MC_FILES = {
    "OUTPUT_MEAN": "mean.tif",
    "OUTPUT_STD": "std.tif",
    "OUTPUT_P10": "p10.tif",
    "OUTPUT_P50": "p50.tif",
    "OUTPUT_P90": "p90.tif",
    "OUTPUT_ROBUSTNESS": "robustness.tif",
}
SENSITIVITY_TABLE = "sensitivity.csv"
SENSITIVITY_CHART = "tornado.png"

# Jobs whose task is running: QGIS's task holds raw pointers to their context and feedback.
_RUNNING: set = set()


@dataclass
class EnsembleOutcome:
    """How an uncertainty run ended: the files it wrote (parameter name → path), or why none."""

    ok: bool
    cancelled: bool
    algorithm: str
    folder: str
    files: dict = field(default_factory=dict)
    lineage: str | None = None
    message: str = ""


def ensemble_folder(base: str, algorithm: str) -> str:
    """Make and return a new folder under ``base`` for one run (``montecarlo-YYYYMMDD-HHMMSS``, …).

    Raises
    ------
    OSError
        The folder cannot be made.
    """
    return new_folder(base, f"{STEMS[algorithm]}-{_dt.datetime.now().strftime('%Y%m%d-%H%M%S')}")


def monte_carlo_parameters(folder: str, sheets: Sequence[str], *, realisations: int = 200, seed: int = 1,
                           mode: str = "experts", statistic: str = "pool", expert_weights: str = "",
                           top_percent: float = 10.0) -> dict:
    """Return ``favour:montecarlo``'s parameters (all but TREE) writing into ``folder``."""
    parameters = {"SHEETS": [str(p) for p in sheets], "REALISATIONS": int(realisations), "SEED": int(seed),
                  "MODE": mode, "STATISTIC": statistic, "TOP_PERCENT": float(top_percent)}
    if expert_weights:
        parameters["EXPERT_WEIGHTS"] = expert_weights
    parameters.update({key: os.path.join(folder, name) for key, name in MC_FILES.items()})
    return parameters


def sensitivity_parameters(folder: str, *, fraction: float = 0.1, top_percent: float = 10.0,
                           deposits: str | None = None, chart: bool = True) -> dict:
    """Return ``favour:sensitivity``'s parameters (all but TREE) writing into ``folder``.

    ``deposits`` is the source of a point layer of known deposits (optional).
    """
    parameters = {"FRACTION": float(fraction), "TOP_PERCENT": float(top_percent),
                  "OUTPUT_TABLE": os.path.join(folder, SENSITIVITY_TABLE)}
    if deposits:
        parameters["DEPOSITS"] = deposits
    if chart:
        parameters["OUTPUT_CHART"] = os.path.join(folder, SENSITIVITY_CHART)
    return parameters


def algorithm_available(algorithm: str) -> bool:
    """Return True when the processing registry knows ``algorithm``."""
    return QgsApplication.processingRegistry().algorithmById(algorithm) is not None


class EnsembleJob(QObject):
    """Run one uncertainty algorithm on a tree into ``folder`` in the background.

    Signals
    -------
    progress_changed(float)
        Percentage done.
    finished(EnsembleOutcome)
        Emitted once, in the main thread.
    """

    progress_changed = pyqtSignal(float)
    finished = pyqtSignal(object)

    def __init__(self, algorithm: str, tree: Tree, folder: str, parameters: dict,
                 parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.algorithm = algorithm
        self.tree = tree
        self.folder = os.path.abspath(folder)
        self.parameters = dict(parameters)
        self.task = None
        self.context = None
        self.feedback = None
        self._work = None
        self.outcome: EnsembleOutcome | None = None

    @property
    def running(self) -> bool:
        """True from :meth:`start` until :attr:`finished` is emitted."""
        return self.task is not None

    def start(self) -> None:
        """Write the tree file for the run and hand the algorithm's task to QGIS.

        Raises
        ------
        RuntimeError
            The algorithm is not registered.
        """
        algorithm = QgsApplication.processingRegistry().algorithmById(self.algorithm)
        if algorithm is None:
            raise RuntimeError(tr("the algorithm {id} is not available in this version of Favour "
                                  "(or the Favour provider did not load)").format(id=self.algorithm))
        self._work = tempfile.mkdtemp(prefix="favour-ensemble-")
        tree_file = os.path.join(self._work, "tree.favour.json")
        self.tree.save(tree_file)
        parameters = {"TREE": tree_file, **self.parameters}
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
            files = {key: value for key, value in results.items()
                     if key.startswith("OUTPUT") and isinstance(value, str) and value
                     and os.path.exists(value)}
            self.outcome = EnsembleOutcome(True, False, self.algorithm, self.folder, files,
                                           results.get("LINEAGE"))
        else:
            remove_empty_folders(self.folder)
            message = tr("cancelled; no output was written") if cancelled else \
                "\n".join(self.feedback.errors) or tr("the run failed")
            self.outcome = EnsembleOutcome(False, cancelled, self.algorithm, self.folder, message=message)
        self.finished.emit(self.outcome)
        # The context holds the layers the algorithm opened (the deposits); let them go while QGIS
        # and GDAL are still up, not whenever Python collects the job (perhaps after GDAL is gone).
        QTimer.singleShot(0, self._release)

    def _release(self) -> None:
        self.context = None
        self.feedback = None
