"""``favour:reproduce``: evaluate an output's lineage again and compare every cell.

Differing cells are a finding, reported in the outputs and the log, not an
error; a raster without a lineage record is an error.
"""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputBoolean,
    QgsProcessingOutputNumber,
    QgsProcessingOutputString,
    QgsProcessingParameterFile,
)

from ..raster.engine import reproduce
from .base import FavourAlgorithm, ProcessingFeedback, run_guarded


def describe_changes(changes: list[dict]) -> str:
    """Return the changed inputs as ``path (node: change)`` joined by ``"; "``."""
    return "; ".join(f"{c['path']} ({c.get('node') or 'tree file'}: {c['change']})" for c in changes)


class ReproduceAlgorithm(FavourAlgorithm):
    """Run the job recorded in an output's lineage again and compare the cells."""

    INPUT = "INPUT"
    IDENTICAL = "IDENTICAL"
    DIFFERING_CELLS = "DIFFERING_CELLS"
    CHANGED_INPUTS = "CHANGED_INPUTS"

    NAME = "reproduce"
    DISPLAY = "Reproduce from lineage"
    HELP = ("Reads the lineage record beside a raster Favour wrote (<raster>.lineage.json), "
            "evaluates the recorded tree again on the recorded grid and compares every cell with "
            "the raster. Reports whether all cells are identical, how many differ, and which "
            "input files (with their tree node) no longer match the size and SHA-256 the "
            "lineage recorded. Differences are reported, not treated as a failure. If the raster "
            "itself is missing it is rebuilt from the lineage.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameter and outputs."""
        self.addParameter(QgsProcessingParameterFile(
            self.INPUT, self.tr("Raster written by Favour (with its .lineage.json)"),
            fileFilter="GeoTIFF (*.tif *.tiff *.TIF *.TIFF)"))
        self.addOutput(QgsProcessingOutputBoolean(self.IDENTICAL, self.tr("All cells identical")))
        self.addOutput(QgsProcessingOutputNumber(self.DIFFERING_CELLS, self.tr("Differing cells")))
        self.addOutput(QgsProcessingOutputString(self.CHANGED_INPUTS, self.tr("Changed inputs")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Reproduce the raster, log the summary, return the outcome."""
        path = self.parameterAsFile(parameters, self.INPUT, context)
        progress = ProcessingFeedback(feedback)
        outcome = run_guarded(reproduce, path, progress)
        for line in outcome.summary().splitlines():
            if outcome.identical or outcome.rebuilt:
                progress.info(line)
            else:
                progress.warning(line)
        return {self.IDENTICAL: bool(outcome.identical),
                self.DIFFERING_CELLS: int(outcome.differing_cells),
                self.CHANGED_INPUTS: describe_changes(outcome.changed_inputs)}
