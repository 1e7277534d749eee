"""``favour:aggregatescores``: the experts' scores of one or two rounds, summarised and flagged."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputNumber,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from ..core.workshop import DEFAULT_THRESHOLD
from ..raster.workshop_jobs import aggregate_scores
from .base import run_guarded
from .workshop_base import WorkshopAlgorithm


class AggregateScoresAlgorithm(WorkshopAlgorithm):
    """Aggregate score sheets per node and item, flag disagreement, write the aggregate tree."""

    ROUND2 = "ROUND2"
    THRESHOLD = "THRESHOLD"
    OUTPUT_TABLE = "OUTPUT_TABLE"
    OUTPUT_TREE = "OUTPUT_TREE"
    FLAGGED = "FLAGGED"

    NAME = "aggregatescores"
    DISPLAY = "Aggregate expert scores"
    HELP = ("Reads the experts' score sheets (and, optionally, the re-scored sheets of a second round) "
            "and writes a table with, for every node and item, the mean, median, trimmed mean, the "
            "linear opinion pool with the expert weights (equal by default, or 'E1=2, E2=1'), the "
            "interquartile range and the coefficient of variation; items whose CV exceeds THRESHOLD are "
            "flagged for discussion. Optionally writes the tree with the aggregated weights and "
            "membership parameters (STATISTIC chooses which central value). A bad sheet is refused "
            "naming the file, row and column, and nothing is written.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.add_tree()
        self.add_sheets()
        self.add_sheets(self.ROUND2, "Second round's sheets", optional=True)
        self.addParameter(QgsProcessingParameterString(self.EXPERT_WEIGHTS, self.tr(
            "Expert weights (E1=2, E2=1; empty: equal)"), defaultValue="", optional=True))
        self.addParameter(QgsProcessingParameterEnum(self.STATISTIC, self.tr("Central value"),
                                                     options=list(self.STATISTICS), defaultValue="pool",
                                                     usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.THRESHOLD, self.tr("Flag items whose coefficient of variation exceeds"),
            QgsProcessingParameterNumber.Double, defaultValue=DEFAULT_THRESHOLD, minValue=0.0))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_TABLE, self.tr("Aggregate table"), "CSV files (*.csv)"))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_TREE, self.tr("Aggregated tree file"), "Favour tree files (*.json)", optional=True,
            createByDefault=False))
        self.addOutput(QgsProcessingOutputNumber(self.FLAGGED, self.tr("Items flagged for discussion")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, aggregate, return the outputs."""
        tree, tree_file = self.tree_from(parameters, context)
        sheets = self.sheets_from(parameters, context)
        round2 = self.sheets_from(parameters, context, self.ROUND2)
        weights = self.weights_from(parameters, context)
        statistic = self.parameterAsEnumString(parameters, self.STATISTIC, context)
        threshold = self.parameterAsDouble(parameters, self.THRESHOLD, context)
        table = self.parameterAsFileOutput(parameters, self.OUTPUT_TABLE, context)
        tree_out = self.parameterAsFileOutput(parameters, self.OUTPUT_TREE, context) or None
        result = run_guarded(aggregate_scores, tree, sheets, table, [round2] if round2 else [], weights,
                             statistic, threshold, tree_out, tree_file)
        for summary in result.latest.flagged:
            feedback.pushWarning(f"flagged for discussion: {summary.node}, {summary.item}: "
                                 f"CV {summary.cv:.2f}, IQR {summary.iqr:.4g}")
        return {self.OUTPUT_TABLE: result.table_file, self.OUTPUT_TREE: result.tree_file,
                self.FLAGGED: len(result.latest.flagged)}
