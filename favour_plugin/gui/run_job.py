"""One evaluation of the tree through ``favour:evaluatetree``, as a QGIS task with progress and cancel.

:class:`RunJob` writes a copy of the tree (absolute paths) to a file of its
own, runs the algorithm through :class:`~.algorithm_job.AlgorithmJob` and
reports back in the main thread with a :class:`RunOutcome`. Its folder is
made beforehand by :func:`run_folder`. The engine writes nothing under the
final names unless it succeeds; on failure or cancel the job also removes the
run folder if it is empty, so nothing partial is left behind.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from qgis.PyQt.QtCore import QObject

from ..core.tree import Tree
from .algorithm_job import AlgorithmJob, stamped_folder

ALGORITHM = "favour:evaluatetree"
OUTPUT_NAME = "favourability.tif"
COMPONENT_FOLDER = "components"
#: Cell budget of a quick look: the demo's 1.08 million cells are coarsened by 2.
QUICK_LOOK_CELLS = 1_000_000


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


def run_folder(base: str, quick: bool = False) -> str:
    """Make and return a new folder under ``base`` for one run: ``run-YYYYMMDD-HHMMSS`` (or ``quick-…``).

    Raises
    ------
    OSError
        The folder cannot be made.
    """
    return stamped_folder(base, "quick" if quick else "run")


class RunJob(AlgorithmJob):
    """Evaluate a tree into ``folder`` in the background; :attr:`finished` carries a :class:`RunOutcome`."""

    failure_text = "the evaluation failed"

    def __init__(self, tree: Tree, folder: str, component_rasters: bool = False, quick: bool = False,
                 parent: QObject | None = None) -> None:
        super().__init__(ALGORITHM, folder, parent=parent)
        self.tree = tree
        self.component_rasters = component_rasters and not quick
        self.quick = quick

    def parameters(self) -> dict:
        """Return the evaluation's parameters: the tree's work file, the output, components, quick look."""
        parameters = {"TREE": self.tree_file(self.tree), "OUTPUT": os.path.join(self.folder, OUTPUT_NAME)}
        if self.component_rasters:
            parameters["NODE_FOLDER"] = os.path.join(self.folder, COMPONENT_FOLDER)
        if self.quick:
            parameters["MAX_CELLS"] = QUICK_LOOK_CELLS
        return parameters

    def outcome_for(self, ok: bool, cancelled: bool, results: dict, message: str = "") -> RunOutcome:
        """Return the run's :class:`RunOutcome`."""
        if not ok:
            return RunOutcome(False, cancelled, self.quick, self.folder, message=message)
        node_folder = results.get("NODE_FOLDER") or None
        return RunOutcome(True, False, self.quick, self.folder, results.get("OUTPUT"),
                          node_folder if self.component_rasters else None, results.get("LINEAGE"))
