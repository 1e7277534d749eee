"""``favour:validate``: a favourability or posterior raster against known deposits."""

from __future__ import annotations

from contextlib import nullcontext

from qgis.core import (
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingOutputFile,
    QgsProcessingOutputNumber,
    QgsProcessingParameterBand,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
)

from ..core import validation as val
from ..raster.validation_jobs import validate
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded
from .evidence_weights import advanced
from .layers import VectorInput, features_copy_path, raster_layer_path

GROUP = "Validation and targets"
GROUP_ID = "validation"
CURVES = ("success", "prediction")


def parse_capture(text: str) -> list[float]:
    """Parse CAPTURE ("5, 10, 20") into numbers; the range is checked by the job."""
    items = [item.strip() for item in text.replace(";", ",").split(",") if item.strip()]
    try:
        return [float(item) for item in items]
    except ValueError:
        raise QgsProcessingException(f"CAPTURE: {text.strip()!r} is not a list of percentages "
                                     "(5, 10, 20)") from None


def add_bootstrap(algorithm) -> None:
    """Declare CAPTURE, RESAMPLES, SEED and LEVEL (advanced but CAPTURE)."""
    algorithm.addParameter(QgsProcessingParameterString(
        algorithm.CAPTURE, algorithm.tr("Top shares of the area for the capture efficiency (%)"),
        defaultValue=", ".join(f"{p:g}" for p in val.DEFAULT_CAPTURE)))
    algorithm.addParameter(advanced(QgsProcessingParameterNumber(
        algorithm.RESAMPLES, algorithm.tr("Bootstrap resamples"), QgsProcessingParameterNumber.Integer,
        val.DEFAULT_RESAMPLES)))
    algorithm.addParameter(advanced(QgsProcessingParameterNumber(
        algorithm.SEED, algorithm.tr("Bootstrap seed"), QgsProcessingParameterNumber.Integer,
        val.DEFAULT_SEED)))
    algorithm.addParameter(advanced(QgsProcessingParameterNumber(
        algorithm.LEVEL, algorithm.tr("Confidence level of the AUC interval"),
        QgsProcessingParameterNumber.Double, val.DEFAULT_LEVEL)))


def bootstrap_values(algorithm, parameters, context) -> dict:
    """Read CAPTURE, RESAMPLES, SEED and LEVEL as keyword arguments of a job."""
    return {"capture": parse_capture(algorithm.parameterAsString(parameters, algorithm.CAPTURE, context)),
            "resamples": algorithm.parameterAsInt(parameters, algorithm.RESAMPLES, context),
            "seed": algorithm.parameterAsInt(parameters, algorithm.SEED, context),
            "level": algorithm.parameterAsDouble(parameters, algorithm.LEVEL, context)}


def add_outputs(algorithm, json_label: str, csv_label: str) -> None:
    """Declare OUTPUT_JSON, OUTPUT_CSV (optional) and LINEAGE."""
    algorithm.addParameter(QgsProcessingParameterFileDestination(
        algorithm.OUTPUT_JSON, algorithm.tr(json_label), fileFilter="JSON files (*.json)"))
    algorithm.addParameter(QgsProcessingParameterFileDestination(
        algorithm.OUTPUT_CSV, algorithm.tr(csv_label), fileFilter="CSV files (*.csv)", optional=True,
        createByDefault=False))
    algorithm.addOutput(QgsProcessingOutputFile(algorithm.LINEAGE, algorithm.tr("Lineage record")))


class ValidateAlgorithm(FavourAlgorithm):
    """Success- or prediction-rate curve, AUC with its interval, capture efficiency, P–A crossing."""

    INPUT = "INPUT"
    BAND = "BAND"
    DEPOSITS = "DEPOSITS"
    HELD_OUT = "HELD_OUT"
    CURVE = "CURVE"
    CAPTURE = "CAPTURE"
    RESAMPLES = "RESAMPLES"
    SEED = "SEED"
    LEVEL = "LEVEL"
    OUTPUT_JSON = "OUTPUT_JSON"
    OUTPUT_CSV = "OUTPUT_CSV"
    LINEAGE = "LINEAGE"
    AUC = "AUC"
    AUC_LOW = "AUC_LOW"
    AUC_HIGH = "AUC_HIGH"
    N_DEPOSITS = "N_DEPOSITS"
    PA_PREDICTION = "PA_PREDICTION"
    PA_AREA = "PA_AREA"
    ND = "ND"

    NAME = "validate"
    DISPLAY = "Validate against known deposits"
    GROUP = GROUP
    GROUP_ID = GROUP_ID
    HELP = (
        "Ranks every valid cell of a favourability or posterior raster from the highest value down "
        "and places the known deposits in that ranking. Writes a JSON result and, on request, a CSV "
        "of the curves, each with its lineage. CURVE says whether the deposits built or calibrated "
        "the map (success-rate curve) or were kept out of it (prediction-rate curve); HELD_OUT adds "
        "a second set of held-out deposits with its own prediction-rate curve. Reported: the curve "
        "(cumulative % of deposits against cumulative % of area; cells sharing a value are crossed "
        "diagonally), the AUC (the chance that a deposit cell outranks a random cell, ties counted "
        "half) with a bootstrap interval over the deposits (RESAMPLES, SEED, LEVEL), the capture "
        "efficiency (% of deposits in the top CAPTURE % of the area) and the prediction–area "
        "crossing: P % of the deposits in (100 − P) % of the area, with Nd = P / (100 − P). "
        "Deposits off the grid, on nodata or sharing a cell are counted and reported; with fewer "
        "than about ten deposits the result says how weak the evidence is.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterRasterLayer(
            self.INPUT, self.tr("Favourability or posterior raster")))
        self.addParameter(QgsProcessingParameterBand(
            self.BAND, self.tr("Band"), defaultValue=1, parentLayerParameterName=self.INPUT, optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.DEPOSITS, self.tr("Known deposits (points)"), [QgsProcessing.TypeVectorPoint]))
        self.addParameter(QgsProcessingParameterEnum(
            self.CURVE, self.tr("The deposits built or calibrated the map (success) or were kept out "
                                "of it (prediction)"), options=list(CURVES), defaultValue="success",
            usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.HELD_OUT, self.tr("Held-out deposits (points, optional)"), [QgsProcessing.TypeVectorPoint],
            optional=True))
        add_bootstrap(self)
        add_outputs(self, "Validation result", "Table of curves")
        for key, label in ((self.AUC, "AUC"), (self.AUC_LOW, "AUC interval, low end"),
                           (self.AUC_HIGH, "AUC interval, high end"), (self.N_DEPOSITS, "Deposit cells used"),
                           (self.PA_PREDICTION, "P–A crossing: % of deposits"),
                           (self.PA_AREA, "P–A crossing: % of area"), (self.ND, "Normalised density Nd")):
            self.addOutput(QgsProcessingOutputNumber(key, self.tr(label)))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._raster = raster_layer_path(self.parameterAsRasterLayer(parameters, self.INPUT, context),
                                         self.INPUT)
        self._deposits = VectorInput.prepare(self, parameters, self.DEPOSITS, context)
        self._held_out = (VectorInput.prepare(self, parameters, self.HELD_OUT, context)
                          if parameters.get(self.HELD_OUT) else None)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, validate, return the figures."""
        band = self.parameterAsInt(parameters, self.BAND, context) or 1
        curve = self.parameterAsEnumString(parameters, self.CURVE, context)
        options = bootstrap_values(self, parameters, context)
        output_json = self.parameterAsFileOutput(parameters, self.OUTPUT_JSON, context)
        output_csv = self.parameterAsFileOutput(parameters, self.OUTPUT_CSV, context) or None
        note_temporary(feedback, output_json, output_csv)
        deposits, layer = self._deposits.resolve(self, parameters, context, feedback,
                                                 features_copy_path(output_json, "deposits"))
        held_out = held_layer = None
        if self._held_out is not None:
            held_out, held_layer = self._held_out.resolve(self, parameters, context, feedback,
                                                          features_copy_path(output_json, "held-out"))
        with self._deposits.kept_on_success(), \
                (self._held_out.kept_on_success() if self._held_out is not None else nullcontext()):
            job = run_guarded(validate, self._raster, deposits, output_json, output_csv, band, layer,
                              held_out, held_layer, curve=curve, feedback=ProcessingFeedback(feedback),
                              **options)
        result = job.result
        for section in result["sets"]:
            low, high = section["auc_ci"]
            feedback.pushInfo(f"{section['set']}: {section['curve']} curve, {section['n_deposits']} deposit "
                              f"cells, AUC {section['auc']:.3f} ({100 * options['level']:g} % interval "
                              f"{low:.3f}–{high:.3f}); P–A crossing {section['pa_crossing'][0]:.1f} % of "
                              f"the deposits in {section['pa_crossing'][1]:.1f} % of the area, Nd "
                              f"{section['nd']:.2f}")
        return {self.OUTPUT_JSON: job.json_file, self.OUTPUT_CSV: job.csv_file,
                self.LINEAGE: job.lineage_file,
                self.AUC: result["auc"], self.AUC_LOW: result["auc_ci"][0],
                self.AUC_HIGH: result["auc_ci"][1],
                self.N_DEPOSITS: result["n_deposits"], self.PA_PREDICTION: result["pa_crossing"][0],
                self.PA_AREA: result["pa_crossing"][1], self.ND: result["nd"]}
