"""``favour:evaluatetree``: a tree file evaluated into a favourability raster with lineage."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputFile,
    QgsProcessingParameterFile,
    QgsProcessingParameterFolderDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
)

from ..raster.engine import evaluate_tree_file
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load


class EvaluateTreeAlgorithm(FavourAlgorithm):
    """Evaluate a criteria-tree file block by block into a favourability raster."""

    TREE = "TREE"
    OUTPUT = "OUTPUT"
    NODE_FOLDER = "NODE_FOLDER"
    MAX_CELLS = "MAX_CELLS"
    CLUSTER = "CLUSTER"
    LINEAGE = "LINEAGE"

    NAME = "evaluatetree"
    DISPLAY = "Evaluate criteria tree"
    HELP = ("Evaluates a Favour tree file (.json): each proxy layer is aligned to the tree's "
            "grid, turned into membership μ by its leaf's function, and combined up the tree "
            "by each node's operator. Writes the favourability raster (0 to 1), its style, and "
            "a lineage record (<output>.lineage.json) with the tree, every input's SHA-256, "
            "the grid, resampling, parameters and per-node statistics. Optionally writes one "
            "raster per component (source, pathway, trap, preservation) into a folder. "
            "MAX_CELLS above 0 makes a quick look: the grid's cells are enlarged by a whole "
            "factor until the grid has at most that many cells. CLUSTER runs the blocks on a Dask "
            "cluster ('local', or a scheduler's tcp://HOST:PORT); the cells are the same.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterFile(
            self.TREE, self.tr("Tree file"), extension="json"))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT, self.tr("Favourability")))
        self.addParameter(QgsProcessingParameterFolderDestination(
            self.NODE_FOLDER, self.tr("Folder for component rasters"), optional=True,
            createByDefault=False))
        cells = QgsProcessingParameterNumber(
            self.MAX_CELLS, self.tr("Quick look: at most this many cells (0 = the full grid)"),
            QgsProcessingParameterNumber.Integer, defaultValue=0, optional=True, minValue=0)
        cells.setFlags(cells.flags() | QgsProcessingParameterNumber.FlagAdvanced)
        self.addParameter(cells)
        self.add_compression()
        cluster = QgsProcessingParameterString(
            self.CLUSTER, self.tr("Run on a Dask cluster: 'local' or tcp://HOST:PORT (empty: this "
                                  "machine's threads)"), defaultValue="", optional=True)
        cluster.setFlags(cluster.flags() | QgsProcessingParameterString.FlagAdvanced)
        self.addParameter(cluster)
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, evaluate the tree, return the outputs."""
        tree_file = self.parameterAsFile(parameters, self.TREE, context)
        output = self.parameterAsOutputLayer(parameters, self.OUTPUT, context)
        node_folder = self.parameterAsString(parameters, self.NODE_FOLDER, context) or None
        note_temporary(feedback, output, node_folder)
        max_cells = self.parameterAsInt(parameters, self.MAX_CELLS, context) or None
        cluster = self.parameterAsString(parameters, self.CLUSTER, context).strip() or None
        result = run_guarded(evaluate_tree_file, tree_file, output, node_folder,
                             ProcessingFeedback(feedback), max_cells=max_cells,
                             compress=self.compression_from(parameters, context), cluster=cluster)
        style_on_load(context, result.output)
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file,
                self.NODE_FOLDER: node_folder}
