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

import os
from collections.abc import Sequence
from dataclasses import dataclass, field

from qgis.PyQt.QtCore import QObject

from ..core.tree import Tree
from .algorithm_job import AlgorithmJob, stamped_folder

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
    return stamped_folder(base, STEMS[algorithm])


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


class EnsembleJob(AlgorithmJob):
    """Run one uncertainty algorithm on a tree into ``folder``.

    :attr:`finished` carries an :class:`EnsembleOutcome`.
    """

    def __init__(self, algorithm: str, tree: Tree, folder: str, parameters: dict,
                 parent: QObject | None = None) -> None:
        super().__init__(algorithm, folder, parent=parent)
        self.tree = tree
        self.given = dict(parameters)

    def parameters(self) -> dict:
        """Return the tree's work file and the parameters the job was given."""
        return {"TREE": self.tree_file(self.tree), **self.given}

    def outcome_for(self, ok: bool, cancelled: bool, results: dict, message: str = "") -> EnsembleOutcome:
        """Return the run's :class:`EnsembleOutcome`: the output files it wrote, or why none."""
        if not ok:
            return EnsembleOutcome(False, cancelled, self.algorithm, self.folder, message=message)
        files = {key: value for key, value in results.items()
                 if key.startswith("OUTPUT") and isinstance(value, str) and value and os.path.exists(value)}
        return EnsembleOutcome(True, False, self.algorithm, self.folder, files, results.get("LINEAGE"))
