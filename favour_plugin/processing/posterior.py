"""``favour:posterior``: posterior probability and its uncertainty from generalised evidence."""

from __future__ import annotations

from qgis.core import (
    QgsProcessing,
    QgsProcessingOutputNumber,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
)

from ..core import wofe
from ..raster.wofe_jobs import posterior
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .evidence_weights import DepositParameters, advanced
from .layers import raster_layer_path


class PosteriorAlgorithm(DepositParameters, FavourAlgorithm):
    """Combine generalised evidence into the posterior probability per unit cell."""

    EVIDENCE = "EVIDENCE"
    TABLES = "TABLES"
    UNIT_AREA = "UNIT_AREA"
    S_P_RULE = "S_P_RULE"
    OUTPUT_PROBABILITY = "OUTPUT_PROBABILITY"
    OUTPUT_STD = "OUTPUT_STD"
    OUTPUT_REPORT = "OUTPUT_REPORT"
    OBSERVED = "OBSERVED"
    PREDICTED = "PREDICTED"
    RATIO = "RATIO"
    CI_P_VALUE = "CI_P_VALUE"

    NAME = "posterior"
    DISPLAY = "Posterior probability"
    GROUP = "Weights of evidence"
    GROUP_ID = "weightsofevidence"
    HELP = (
        "Adds the weights of generalised evidence rasters (binary at a cut, or pooled classes, as "
        "written by 'Weights of evidence table') to the prior logit of the known deposits and "
        "writes the posterior probability of a deposit per unit cell and its standard deviation "
        "(variance of the weights plus, where a layer is nodata, the missing-data variance; "
        "S_P_RULE chooses s(P) ≈ P(1−P)·s(logit) or P·s(logit)). TABLES, one per raster in the "
        "same order, brings weights counted elsewhere (an analogue district); without them each "
        "layer's weights are counted here. The report (HTML) gives the prior, the weights, the "
        "observed deposits n against the predicted T = Σ N·P with n/T (below about 0.85 is a "
        "warning sign) and the one-tailed Agterberg–Cheng test, and the pairwise chi-square of "
        "the layers on deposit counts. The first raster's grid is the output grid.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterMultipleLayers(
            self.EVIDENCE, self.tr("Generalised evidence rasters"), QgsProcessing.TypeRaster))
        self.addParameter(QgsProcessingParameterMultipleLayers(
            self.TABLES, self.tr("Weights tables, one per raster (optional)"), QgsProcessing.TypeFile,
            optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.UNIT_AREA, self.tr("Unit cell (km²)"), QgsProcessingParameterNumber.Double,
            defaultValue=1.0, minValue=1e-9))
        self.add_deposit_parameters()
        self.addParameter(advanced(QgsProcessingParameterEnum(
            self.S_P_RULE, self.tr("s(P) from s(logit)"), options=list(wofe.S_P_RULES),
            defaultValue="delta", usesStaticStrings=True)))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_PROBABILITY, self.tr("Posterior probability")))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_STD, self.tr("Standard deviation of the posterior")))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_REPORT, self.tr("Report"), fileFilter="HTML files (*.html)", optional=True))
        self.add_compression()
        self.addOutput(QgsProcessingOutputNumber(self.OBSERVED, self.tr("Observed deposits n")))
        self.addOutput(QgsProcessingOutputNumber(self.PREDICTED, self.tr("Predicted deposits T")))
        self.addOutput(QgsProcessingOutputNumber(self.RATIO, self.tr("n / T")))
        self.addOutput(QgsProcessingOutputNumber(self.CI_P_VALUE, self.tr("Agterberg–Cheng p-value")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._evidence = [raster_layer_path(layer, self.EVIDENCE) for layer in
                          self.parameterAsLayerList(parameters, self.EVIDENCE, context)]
        self.prepare_deposits(parameters, context)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, compute the posterior, return the outputs."""
        tables = (self.parameterAsFileList(parameters, self.TABLES, context)
                  if parameters.get(self.TABLES) else None)
        unit = self.parameterAsDouble(parameters, self.UNIT_AREA, context)
        rule = self.parameterAsEnumString(parameters, self.S_P_RULE, context)
        probability = self.parameterAsOutputLayer(parameters, self.OUTPUT_PROBABILITY, context)
        spread = self.parameterAsOutputLayer(parameters, self.OUTPUT_STD, context)
        report = self.parameterAsFileOutput(parameters, self.OUTPUT_REPORT, context) or None
        note_temporary(feedback, probability, spread, report)
        inputs = self.resolve_deposits(parameters, context, feedback, probability)
        with self.deposits_kept_on_success():
            result = run_guarded(
                posterior, self._evidence, output_probability=probability, output_std=spread,
                output_report=report, tables=tables, unit_area_km2=unit, s_p_rule=rule,
                feedback=ProcessingFeedback(feedback), compress=self.compression_from(parameters, context),
                **inputs)
        overall = result.checks["overall"]
        feedback.pushInfo(f"n = {overall['observed']}, T = {overall['predicted']:.4g}, "
                          f"n/T = {overall['ratio']:.3f}, Agterberg–Cheng p = {overall['p_value']:.3g}")
        for path in (result.probability_file, result.std_file):
            style_on_load(context, path)
        return {self.OUTPUT_PROBABILITY: result.probability_file, self.OUTPUT_STD: result.std_file,
                self.OUTPUT_REPORT: result.report_file, self.OBSERVED: overall["observed"],
                self.PREDICTED: overall["predicted"], self.RATIO: overall["ratio"],
                self.CI_P_VALUE: overall["p_value"]}
