"""``favour:sensitivity``: how the top area and the AUC move when each weight or criterion changes."""

from __future__ import annotations

from contextlib import nullcontext

from qgis.core import (
    QgsProcessing,
    QgsProcessingOutputFile,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
)

from ..raster.ensemble_jobs import sensitivity
from .base import ProcessingFeedback, note_temporary, run_guarded
from .layers import VectorInput, features_copy_path
from .workshop_base import WorkshopAlgorithm


class SensitivityAlgorithm(WorkshopAlgorithm):
    """One-at-a-time weight changes and leave-one-criterion-out, in one streamed pass."""

    FRACTION = "FRACTION"
    TOP_PERCENT = "TOP_PERCENT"
    DEPOSITS = "DEPOSITS"
    OUTPUT_TABLE = "OUTPUT_TABLE"
    OUTPUT_CHART = "OUTPUT_CHART"
    LINEAGE = "LINEAGE"

    NAME = "sensitivity"
    DISPLAY = "Sensitivity of the top area"
    HELP = ("Evaluates the tree with each weight raised and lowered by FRACTION (siblings unchanged) "
            "and with each criterion left out, all in one streamed pass, and reports for each change "
            "the cells that enter and leave the top TOP_PERCENT % of the area and their share of it; "
            "with known deposits, also the AUC of the success-rate curve and its change. Writes a "
            "table and a tornado chart.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.add_tree()
        self.addParameter(QgsProcessingParameterNumber(
            self.FRACTION, self.tr("Weight change (fraction, 0.1 for ±10 %)"),
            QgsProcessingParameterNumber.Double, 0.1, minValue=0.001, maxValue=0.999))
        self.addParameter(QgsProcessingParameterNumber(
            self.TOP_PERCENT, self.tr("Top area (% of the area)"), QgsProcessingParameterNumber.Double,
            10.0, minValue=0.001, maxValue=99.999))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.DEPOSITS, self.tr("Known deposits (points, optional)"), [QgsProcessing.TypeVectorPoint],
            optional=True))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_TABLE, self.tr("Sensitivity table"), "CSV files (*.csv)"))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_CHART, self.tr("Tornado chart"), "PNG images (*.png)", optional=True))
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Look at the deposits layer in the main thread."""
        self._deposits = (VectorInput.prepare(self, parameters, self.DEPOSITS, context)
                          if parameters.get(self.DEPOSITS) else None)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, run the variants, return the table and chart."""
        tree, tree_file = self.tree_from(parameters, context)
        fraction = self.parameterAsDouble(parameters, self.FRACTION, context)
        top = self.parameterAsDouble(parameters, self.TOP_PERCENT, context)
        table = self.parameterAsFileOutput(parameters, self.OUTPUT_TABLE, context)
        chart = self.parameterAsFileOutput(parameters, self.OUTPUT_CHART, context) or None
        note_temporary(feedback, table, chart)
        deposits = layer = None
        if self._deposits is not None:
            deposits, layer = self._deposits.resolve(self, parameters, context, feedback,
                                                     features_copy_path(table, "deposits"))
        with (self._deposits.kept_on_success() if self._deposits is not None else nullcontext()):
            result = run_guarded(sensitivity, tree, table, chart, fraction, top, deposits, layer,
                                 ProcessingFeedback(feedback), tree_file=tree_file)
        for row in result.rows[1:]:
            if row["top_area_change_percent"] is not None:
                feedback.pushInfo(f"{row['label']}: {row['top_area_change_percent']:.1f} % of the top area "
                                  "changes")
        return {self.OUTPUT_TABLE: result.files["table"], self.OUTPUT_CHART: result.files.get("chart"),
                self.LINEAGE: result.lineage_file}
