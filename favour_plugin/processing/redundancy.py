"""``favour:redundancy``: how alike the tree's leaf memberships are, before they are overlaid."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputNumber,
    QgsProcessingParameterFile,
    QgsProcessingParameterNumber,
)

from ..core import redundancy as red
from ..core.tree import Tree
from ..raster.redundancy_jobs import redundancy
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded
from .evidence_weights import advanced
from .validate import GROUP, GROUP_ID, add_outputs


class RedundancyAlgorithm(FavourAlgorithm):
    """Correlation of every pair of leaf memberships on a lattice of cells; alike pairs flagged."""

    TREE = "TREE"
    SAMPLE_CELLS = "SAMPLE_CELLS"
    THRESHOLD = "THRESHOLD"
    POSTERIOR = "POSTERIOR"
    OUTPUT_JSON = "OUTPUT_JSON"
    OUTPUT_CSV = "OUTPUT_CSV"
    LINEAGE = "LINEAGE"
    FLAGGED = "FLAGGED"

    NAME = "redundancy"
    DISPLAY = "Redundant proxies"
    GROUP = GROUP
    GROUP_ID = GROUP_ID
    HELP = (
        "Before overlay: evaluates every leaf of the tree on a regular lattice of cells (every k-th "
        "row and column, at most SAMPLE_CELLS cells), through the same evaluation as the map, and "
        "reports Pearson's r of every pair of leaf memberships over the cells where both are known. "
        "Pairs with |r| above THRESHOLD (0.8 by default; common practice, no source) are flagged: "
        "two proxies that rise and fall together say the same thing twice, and an overlay taking "
        "both weighs that criterion double. With POSTERIOR (a posterior raster from weights of "
        "evidence, or its lineage) the pairwise conditional-independence table of that posterior "
        "is added.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterFile(self.TREE, self.tr("Tree file"), extension="json"))
        self.addParameter(QgsProcessingParameterNumber(
            self.THRESHOLD, self.tr("Flag pairs with |r| above"), QgsProcessingParameterNumber.Double,
            red.DEFAULT_THRESHOLD))
        self.addParameter(QgsProcessingParameterFile(
            self.POSTERIOR, self.tr("Posterior from weights of evidence, or its lineage (optional)"),
            optional=True))
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.SAMPLE_CELLS, self.tr("Cells in the lattice, at most"), QgsProcessingParameterNumber.Integer,
            red.DEFAULT_SAMPLE)))
        add_outputs(self, "Redundancy result", "Table of pairs")
        self.addOutput(QgsProcessingOutputNumber(self.FLAGGED, self.tr("Pairs flagged")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, sample and correlate, return the flagged pairs."""
        tree_file = self.parameterAsFile(parameters, self.TREE, context)
        threshold = self.parameterAsDouble(parameters, self.THRESHOLD, context)
        posterior = self.parameterAsFile(parameters, self.POSTERIOR, context) or None
        sample = self.parameterAsInt(parameters, self.SAMPLE_CELLS, context)
        output_json = self.parameterAsFileOutput(parameters, self.OUTPUT_JSON, context)
        output_csv = self.parameterAsFileOutput(parameters, self.OUTPUT_CSV, context) or None
        note_temporary(feedback, output_json, output_csv)
        tree = run_guarded(Tree.load, tree_file)
        job = run_guarded(redundancy, tree, output_json, output_csv, sample, threshold, posterior,
                          tree_file=tree_file, feedback=ProcessingFeedback(feedback))
        for pair in job.result["pairs"]:
            shown = "undefined" if pair["r"] is None else f"{pair['r']:.3f}"
            feedback.pushInfo(f"{pair['leaf_a']} × {pair['leaf_b']}: r = {shown} on {pair['cells']} cells"
                              + (" — flagged" if pair["flagged"] else ""))
        return {self.OUTPUT_JSON: job.json_file, self.OUTPUT_CSV: job.csv_file,
                self.LINEAGE: job.lineage_file,
                self.FLAGGED: len(job.result["flagged"])}
