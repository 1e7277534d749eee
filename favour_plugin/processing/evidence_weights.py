"""``favour:evidenceweights``: the weights-of-evidence table of one evidence raster."""

from __future__ import annotations

import os
from contextlib import contextmanager, nullcontext

from qgis.core import (
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingOutputNumber,
    QgsProcessingParameterBand,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
)

from ..core import wofe
from ..raster.wofe_jobs import evidence_weights
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .layers import VectorInput, raster_layer_path

SMALL_COUNTS = ("none", "haldane")
GENERALISE = ("ternary", "binary")


def parse_breaks(text: str) -> list[float] | None:
    """Parse BREAKS ("100, 200, 300") into floats; empty means none."""
    items = [item.strip() for item in text.replace(";", ",").split(",") if item.strip()]
    if not items:
        return None
    try:
        return [float(item) for item in items]
    except ValueError:
        raise QgsProcessingException(f"BREAKS: {text.strip()!r} is not a list of numbers") from None


def advanced(parameter):
    """Mark a parameter as advanced and return it."""
    parameter.setFlags(parameter.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
    return parameter


class DepositParameters:
    """The DEPOSITS and optional STUDY_AREA parameters the weights-of-evidence algorithms share."""

    DEPOSITS = "DEPOSITS"
    STUDY_AREA = "STUDY_AREA"

    def add_deposit_parameters(self) -> None:
        """Declare DEPOSITS (points) and STUDY_AREA (polygons, optional)."""
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.DEPOSITS, self.tr("Known deposits (points)"), [QgsProcessing.TypeVectorPoint]))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.STUDY_AREA, self.tr("Study area (polygons, optional)"),
            [QgsProcessing.TypeVectorPolygon], optional=True))

    def prepare_deposits(self, parameters, context) -> None:
        """Look at both layers in the main thread (``prepareAlgorithm``)."""
        self._deposits = VectorInput.prepare(self, parameters, self.DEPOSITS, context)
        self._study = (VectorInput.prepare(self, parameters, self.STUDY_AREA, context)
                       if parameters.get(self.STUDY_AREA) else None)

    def resolve_deposits(self, parameters, context, feedback, output: str) -> dict:
        """Return the files to read as keyword arguments of a job, copies named after ``output``."""
        base = os.path.splitext(os.path.abspath(output))[0]
        deposits, layer = self._deposits.resolve(self, parameters, context, feedback,
                                                 base + ".deposits.gpkg")
        found = {"deposits": deposits, "deposits_layer": layer, "study_area": None,
                 "study_layer": None}
        if self._study is not None:
            found["study_area"], found["study_layer"] = self._study.resolve(
                self, parameters, context, feedback, base + ".study-area.gpkg")
        return found

    @contextmanager
    def deposits_kept_on_success(self):
        """Keep any feature copies if the job succeeds; bring back earlier ones if it fails."""
        with self._deposits.kept_on_success(), \
                (self._study.kept_on_success() if self._study is not None else nullcontext()):
            yield


class EvidenceWeightsAlgorithm(DepositParameters, FavourAlgorithm):
    """Count an evidence raster against known deposits and write its weights table."""

    EVIDENCE = "EVIDENCE"
    BAND = "BAND"
    METHOD = "METHOD"
    BREAKS = "BREAKS"
    UNIT_AREA = "UNIT_AREA"
    LEVEL = "LEVEL"
    SMALL_COUNTS = "SMALL_COUNTS"
    GENERALISE = "GENERALISE"
    OUTPUT_TABLE = "OUTPUT_TABLE"
    OUTPUT_GENERALISED = "OUTPUT_GENERALISED"
    BEST_CUT = "BEST_CUT"
    BEST_CONTRAST = "BEST_CONTRAST"
    BEST_STUDENTIZED = "BEST_STUDENTIZED"

    NAME = "evidenceweights"
    DISPLAY = "Weights of evidence table"
    GROUP = "Weights of evidence"
    GROUP_ID = "weightsofevidence"
    HELP = (
        "Counts an evidence raster against known deposit points in unit cells (UNIT_AREA, km²) "
        "and writes the weights table (CSV): for each class or threshold the area, the deposits, "
        "W+, W−, their standard deviations, the contrast C, s(C), the studentised contrast C/s(C), "
        "its two-sided p-value, whether it passes LEVEL, and a flag where a weight is undefined "
        "(no deposits on a class, or a class covering the whole area; never shown as infinity). "
        "METHOD: binary (1 present, 0 absent), categorical (each class against all others), "
        "ascending (pattern: value ≤ each threshold, e.g. distance corridors) or descending "
        "(value ≥ threshold, e.g. anomalies). BREAKS gives the thresholds of continuous ordered "
        "evidence; without them integer rasters use their own codes and continuous ones get 20 "
        "thresholds at quantiles of a sample. For ordered evidence the best cut is the threshold "
        "of largest contrast among those whose studentised contrast reaches LEVEL. "
        "OUTPUT_GENERALISED writes the best cut (1 on the pattern, 0 off) or the categorical "
        "classes pooled by the sign and significance of their weights, with its own table "
        "(<raster>.weights.csv) for the posterior. Deposits outside the grid, on nodata or outside "
        "the study area are counted and reported; several deposits in one cell count as one "
        "deposit cell. Deposits in another CRS are reprojected. SMALL_COUNTS 'haldane' adds 0.5 to "
        "the counts of rows with a zero count, only when asked.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterRasterLayer(self.EVIDENCE, self.tr("Evidence raster")))
        self.addParameter(QgsProcessingParameterBand(
            self.BAND, self.tr("Band"), defaultValue=1, parentLayerParameterName=self.EVIDENCE,
            optional=True))
        self.addParameter(QgsProcessingParameterEnum(
            self.METHOD, self.tr("Kind of evidence"), options=list(wofe.KINDS),
            defaultValue=wofe.KINDS[0], usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterString(
            self.BREAKS, self.tr("Thresholds for ordered evidence, comma-separated (optional)"),
            optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.UNIT_AREA, self.tr("Unit cell (km²)"), QgsProcessingParameterNumber.Double,
            defaultValue=1.0, minValue=1e-9))
        self.add_deposit_parameters()
        self.addParameter(advanced(QgsProcessingParameterNumber(
            self.LEVEL, self.tr("Studentised contrast needed for significance"),
            QgsProcessingParameterNumber.Double, defaultValue=wofe.DEFAULT_LEVEL, minValue=1e-6)))
        self.addParameter(advanced(QgsProcessingParameterEnum(
            self.SMALL_COUNTS, self.tr("Zero counts"), options=list(SMALL_COUNTS),
            defaultValue="none", usesStaticStrings=True)))
        self.addParameter(advanced(QgsProcessingParameterEnum(
            self.GENERALISE, self.tr("Pool categorical classes into"), options=list(GENERALISE),
            defaultValue="ternary", usesStaticStrings=True)))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_TABLE, self.tr("Weights table"), fileFilter="CSV files (*.csv)"))
        self.addParameter(QgsProcessingParameterRasterDestination(
            self.OUTPUT_GENERALISED, self.tr("Generalised evidence"), optional=True,
            createByDefault=False))
        self.add_compression()
        self.addOutput(QgsProcessingOutputNumber(self.BEST_CUT, self.tr("Best cut")))
        self.addOutput(QgsProcessingOutputNumber(self.BEST_CONTRAST, self.tr("Contrast at the best cut")))
        self.addOutput(QgsProcessingOutputNumber(
            self.BEST_STUDENTIZED, self.tr("Studentised contrast at the best cut")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._evidence = raster_layer_path(
            self.parameterAsRasterLayer(parameters, self.EVIDENCE, context), self.EVIDENCE)
        self.prepare_deposits(parameters, context)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, count and weigh the evidence, return the outputs."""
        band = self.parameterAsInt(parameters, self.BAND, context) or 1
        method = self.parameterAsEnumString(parameters, self.METHOD, context)
        breaks = parse_breaks(self.parameterAsString(parameters, self.BREAKS, context))
        unit = self.parameterAsDouble(parameters, self.UNIT_AREA, context)
        level = self.parameterAsDouble(parameters, self.LEVEL, context)
        small = self.parameterAsEnumString(parameters, self.SMALL_COUNTS, context)
        mode = self.parameterAsEnumString(parameters, self.GENERALISE, context)
        table = self.parameterAsFileOutput(parameters, self.OUTPUT_TABLE, context)
        generalised = self.parameterAsOutputLayer(parameters, self.OUTPUT_GENERALISED, context) or None
        note_temporary(feedback, table, generalised)
        inputs = self.resolve_deposits(parameters, context, feedback, table)
        with self.deposits_kept_on_success():
            result = run_guarded(
                evidence_weights, self._evidence, method=method, output_table=table, band=band,
                unit_area_km2=unit, breaks=breaks, level=level, **inputs,
                small_count=None if small == "none" else small, generalise_mode=mode,
                output_generalised=generalised, feedback=ProcessingFeedback(feedback),
                compress=self.compression_from(parameters, context))
        for row in result.table.rows:
            feedback.pushInfo(_row_text(row))
        best = result.best
        if result.generalised_file:
            style_on_load(context, result.generalised_file)
        return {self.OUTPUT_TABLE: result.table_file, self.OUTPUT_GENERALISED: result.generalised_file,
                self.BEST_CUT: best.threshold if best and best.found else None,
                self.BEST_CONTRAST: best.contrast if best and best.found else None,
                self.BEST_STUDENTIZED: best.studentized_contrast if best and best.found else None}


def _row_text(row: dict) -> str:
    """One table row as a log line."""
    def fmt(value):
        return "–" if value is None else f"{value:.4g}"
    text = (f"class {row['class']:g}: area {row['area_units']:.4g}, deposits {row['deposits']}, "
            f"W+ {fmt(row['w_plus'])}, W− {fmt(row['w_minus'])}, C {fmt(row['contrast'])}, "
            f"C/s(C) {fmt(row['studentized_contrast'])}")
    return text + (f" [{row['flag']}: {row['note']}]" if row["flag"] else "")
