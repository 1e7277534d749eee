"""``favour:targets``: the top of a favourability raster as ranked target zones (GeoPackage)."""

from __future__ import annotations

from contextlib import nullcontext

from qgis.core import (
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingOutputFile,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFile,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterVectorDestination,
)

from ..raster.target_jobs import find_targets
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .layers import VectorInput, features_copy_path, raster_layer_path
from .validate import GROUP, GROUP_ID


class TargetsAlgorithm(FavourAlgorithm):
    """Threshold a favourability raster, turn the cells above into zones, rank them, say why."""

    INPUT = "INPUT"
    TOP_PERCENT = "TOP_PERCENT"
    THRESHOLD = "THRESHOLD"
    VALIDATION = "VALIDATION"
    MIN_AREA = "MIN_AREA"
    MERGE_DISTANCE = "MERGE_DISTANCE"
    COMPONENTS = "COMPONENTS"
    DEPOSITS = "DEPOSITS"
    NAME_FIELD = "NAME_FIELD"
    ROBUSTNESS = "ROBUSTNESS"
    OUTPUT = "OUTPUT"
    LINEAGE = "LINEAGE"
    ZONES = "ZONES"
    THRESHOLD_USED = "THRESHOLD_USED"

    NAME = "targets"
    DISPLAY = "Ranked targets"
    GROUP = GROUP
    GROUP_ID = GROUP_ID
    HELP = (
        "Cuts a favourability (or posterior) raster at the top TOP_PERCENT % of its valid cells (the "
        "exact k-th largest value; cells tied with it are in), or at a favourability THRESHOLD, or at "
        "the prediction–area crossing of a VALIDATION result, and turns the cells above into zones: "
        "cells sharing a side form one polygon (GDAL Polygonize); zones closer than MERGE_DISTANCE "
        "(map units, edge to edge) merge, each keeping its cells' footprint; zones under MIN_AREA km² "
        "are dropped. Zones are ranked by mean favourability, then peak. Each zone's attributes: rank, "
        "area (km²), mean and peak favourability, the mean μ of each COMPONENTS raster (a folder, as "
        "the evaluation writes with a node folder) with the components ordered strongest first (why "
        "the zone ranks), the known occurrences inside (DEPOSITS, with their names from NAME_FIELD or "
        "a field called 'name') and the mean Monte Carlo ROBUSTNESS. Written to a GeoPackage with "
        "Favour's style (also stored in the file) and a lineage.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterRasterLayer(self.INPUT, self.tr("Favourability raster")))
        self.addParameter(QgsProcessingParameterNumber(
            self.TOP_PERCENT, self.tr("Top of the area (% of the valid cells)"),
            QgsProcessingParameterNumber.Double, 10.0, minValue=0.001, maxValue=99.999))
        self.addParameter(QgsProcessingParameterNumber(
            self.THRESHOLD, self.tr("Or a favourability threshold (optional)"),
            QgsProcessingParameterNumber.Double, optional=True))
        self.addParameter(QgsProcessingParameterFile(
            self.VALIDATION, self.tr("Or a validation result: its prediction–area crossing (optional)"),
            extension="json", optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.MIN_AREA, self.tr("Minimum area of a zone (km²)"), QgsProcessingParameterNumber.Double, 0.0,
            minValue=0.0))
        self.addParameter(QgsProcessingParameterNumber(
            self.MERGE_DISTANCE, self.tr("Merge zones closer than (map units)"),
            QgsProcessingParameterNumber.Double, 0.0, minValue=0.0))
        self.addParameter(QgsProcessingParameterFile(
            self.COMPONENTS, self.tr("Folder of component rasters (optional)"),
            behavior=QgsProcessingParameterFile.Folder, optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.DEPOSITS, self.tr("Known occurrences (points, optional)"), [QgsProcessing.TypeVectorPoint],
            optional=True))
        self.addParameter(QgsProcessingParameterField(
            self.NAME_FIELD, self.tr("Name field of the occurrences (optional)"),
            parentLayerParameterName=self.DEPOSITS, optional=True))
        self.addParameter(QgsProcessingParameterRasterLayer(
            self.ROBUSTNESS, self.tr("Monte Carlo robustness raster (optional)"), optional=True))
        self.addParameter(QgsProcessingParameterVectorDestination(
            self.OUTPUT, self.tr("Targets (GeoPackage)"), QgsProcessing.TypeVectorPolygon))
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))
        self.addOutput(QgsProcessingOutputNumber(self.ZONES, self.tr("Number of zones")))
        self.addOutput(QgsProcessingOutputNumber(self.THRESHOLD_USED,
                                                 self.tr("Favourability threshold used")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._raster = raster_layer_path(self.parameterAsRasterLayer(parameters, self.INPUT, context),
                                         self.INPUT)
        robustness = self.parameterAsRasterLayer(parameters, self.ROBUSTNESS, context) \
            if parameters.get(self.ROBUSTNESS) else None
        self._robustness = raster_layer_path(robustness, self.ROBUSTNESS) if robustness else None
        self._deposits = (VectorInput.prepare(self, parameters, self.DEPOSITS, context)
                          if parameters.get(self.DEPOSITS) else None)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, find and rank the zones, return the GeoPackage."""
        top = self.parameterAsDouble(parameters, self.TOP_PERCENT, context)
        threshold = self.parameterAsDouble(parameters, self.THRESHOLD, context) \
            if parameters.get(self.THRESHOLD) not in (None, "") else None
        validation = self.parameterAsFile(parameters, self.VALIDATION, context) or None
        min_area = self.parameterAsDouble(parameters, self.MIN_AREA, context)
        merge = self.parameterAsDouble(parameters, self.MERGE_DISTANCE, context)
        components = self.parameterAsFile(parameters, self.COMPONENTS, context) or None
        name_field = self.parameterAsString(parameters, self.NAME_FIELD, context) or None
        output = self.parameterAsOutputLayer(parameters, self.OUTPUT, context)
        if not output.lower().endswith(".gpkg") or output.startswith(("ogr:", "memory:")):
            raise QgsProcessingException(f"OUTPUT: the targets are written to a GeoPackage file; give a "
                                         f"file name ending in .gpkg, not {output!r}")
        note_temporary(feedback, output)
        deposits = layer = None
        if self._deposits is not None:
            deposits, layer = self._deposits.resolve(self, parameters, context, feedback,
                                                     features_copy_path(output, "deposits"))
            if self._deposits.plain is None and name_field:
                feedback.pushWarning(f"NAME_FIELD: the occurrences were copied without their attributes, "
                                     f"so {name_field!r} cannot name them; save the layer to a file to "
                                     "keep the names")
                name_field = None
        with (self._deposits.kept_on_success() if self._deposits is not None else nullcontext()):
            result = run_guarded(find_targets, self._raster, output, top, threshold, validation, min_area,
                                 merge, components, deposits, layer, name_field, self._robustness,
                                 ProcessingFeedback(feedback))
        for row in result.rows[:10]:
            feedback.pushInfo(f"{row['rank']}. {row['area_km2']:.3f} km², mean {row['fav_mean']:.3f}, "
                              f"peak {row['fav_peak']:.3f}" + (f" [{row['why']}]" if row.get("why") else ""))
        style_on_load(context, result.output)
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file, self.ZONES: len(result.rows),
                self.THRESHOLD_USED: result.threshold["value"]}
