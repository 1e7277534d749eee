"""``favour:report``: one self-contained HTML report of a favourability map, readable offline."""

from __future__ import annotations

from contextlib import nullcontext

from qgis.core import (
    QgsProcessing,
    QgsProcessingOutputFile,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
)

from ..raster.report_jobs import write_report
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded
from .layers import VectorInput, features_copy_path, raster_layer_path
from .validate import GROUP, GROUP_ID


class ReportAlgorithm(FavourAlgorithm):
    """Maps, the tree, memberships, validation, targets, uncertainty and lineage in one HTML file."""

    INPUT = "INPUT"
    COMPONENTS = "COMPONENTS"
    VALIDATION = "VALIDATION"
    TARGETS = "TARGETS"
    MONTE_CARLO = "MONTE_CARLO"
    SENSITIVITY_TABLE = "SENSITIVITY_TABLE"
    SENSITIVITY_CHART = "SENSITIVITY_CHART"
    POSTERIOR = "POSTERIOR"
    DEPOSITS = "DEPOSITS"
    TITLE = "TITLE"
    OUTPUT = "OUTPUT"
    LINEAGE = "LINEAGE"
    FIGURES = "FIGURES"

    NAME = "report"
    DISPLAY = "Report"
    GROUP = GROUP
    GROUP_ID = GROUP_ID
    HELP = (
        "Writes one self-contained HTML file (figures embedded, no script, readable offline) that a "
        "team lead can read: the favourability map with the known occurrences and the targets, the "
        "component maps (COMPONENTS, a folder as the evaluation writes it), the criteria tree as a "
        "diagram with each node's operator, weight and rationale (from the raster's lineage), every "
        "membership curve, the weights of evidence of a POSTERIOR raster, the VALIDATION result's "
        "curves and prediction–area plot, the TARGETS table with why each zone ranks, the Monte "
        "Carlo maps (MONTE_CARLO rasters) and the sensitivity table and chart, and the lineage: every "
        "input with its SHA-256, the versions and the seed. A lineage is written beside the report.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterRasterLayer(self.INPUT, self.tr("Favourability raster")))
        self.addParameter(QgsProcessingParameterFile(
            self.COMPONENTS, self.tr("Folder of component rasters (optional)"),
            behavior=QgsProcessingParameterFile.Folder, optional=True))
        self.addParameter(QgsProcessingParameterFile(
            self.VALIDATION, self.tr("Validation result (optional)"), extension="json", optional=True))
        self.addParameter(QgsProcessingParameterFile(
            self.TARGETS, self.tr("Targets GeoPackage (optional)"), extension="gpkg", optional=True))
        self.addParameter(QgsProcessingParameterMultipleLayers(
            self.MONTE_CARLO, self.tr("Monte Carlo rasters (optional)"), QgsProcessing.TypeRaster,
            optional=True))
        self.addParameter(QgsProcessingParameterFile(
            self.SENSITIVITY_TABLE, self.tr("Sensitivity table (optional)"), extension="csv", optional=True))
        self.addParameter(QgsProcessingParameterFile(
            self.SENSITIVITY_CHART, self.tr("Tornado chart (optional)"), extension="png", optional=True))
        self.addParameter(QgsProcessingParameterRasterLayer(
            self.POSTERIOR, self.tr("Posterior probability raster (optional)"), optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.DEPOSITS, self.tr("Known occurrences to draw (optional; default: the targets')"),
            [QgsProcessing.TypeVectorPoint], optional=True))
        self.addParameter(QgsProcessingParameterString(self.TITLE, self.tr("Title (optional)"),
                                                       optional=True))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT, self.tr("Report"), fileFilter="HTML files (*.html)"))
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))
        self.addOutput(QgsProcessingOutputNumber(self.FIGURES, self.tr("Figures in the report")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._raster = raster_layer_path(self.parameterAsRasterLayer(parameters, self.INPUT, context),
                                         self.INPUT)
        self._monte_carlo = [raster_layer_path(layer, self.MONTE_CARLO) for layer in
                             self.parameterAsLayerList(parameters, self.MONTE_CARLO, context)] \
            if parameters.get(self.MONTE_CARLO) else None
        posterior = self.parameterAsRasterLayer(parameters, self.POSTERIOR, context) \
            if parameters.get(self.POSTERIOR) else None
        self._posterior = raster_layer_path(posterior, self.POSTERIOR) if posterior else None
        self._deposits = (VectorInput.prepare(self, parameters, self.DEPOSITS, context)
                          if parameters.get(self.DEPOSITS) else None)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, write the report, return it."""
        files = {key: self.parameterAsFile(parameters, key, context) or None
                 for key in (self.COMPONENTS, self.VALIDATION, self.TARGETS, self.SENSITIVITY_TABLE,
                             self.SENSITIVITY_CHART)}
        title = self.parameterAsString(parameters, self.TITLE, context) or None
        output = self.parameterAsFileOutput(parameters, self.OUTPUT, context)
        note_temporary(feedback, output)
        deposits = layer = None
        if self._deposits is not None:
            deposits, layer = self._deposits.resolve(self, parameters, context, feedback,
                                                     features_copy_path(output, "deposits"))
        with (self._deposits.kept_on_success() if self._deposits is not None else nullcontext()):
            result = run_guarded(
                write_report, self._raster, output, files[self.COMPONENTS], files[self.VALIDATION],
                files[self.TARGETS], self._monte_carlo, files[self.SENSITIVITY_TABLE],
                files[self.SENSITIVITY_CHART], self._posterior, deposits, layer, title,
                ProcessingFeedback(feedback))
        feedback.pushInfo(f"{len(result.figures)} figures: {', '.join(result.figures)}")
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file,
                self.FIGURES: len(result.figures)}
