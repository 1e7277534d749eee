"""``favour:distancemembership``: distance to the nearest feature turned into membership μ.

The vector layer is measured onto the grid of a reference raster (distance in
map units of that grid's CRS from each cell to the nearest cell the features
touch) and μ follows from the chosen membership function, all in one leaf of
an in-memory tree evaluated by the one evaluation path. A layer that is not a
plain OGR file (a memory layer, a subset filter, selected features) is first
copied into a GeoPackage beside the output, which the lineage then records.
"""

from __future__ import annotations

import os

from qgis.core import (
    QgsProcessing,
    QgsProcessingOutputFile,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterRasterLayer,
)

from ..raster.engine import evaluate_tree
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .layers import VectorInput, features_copy_path, raster_layer_path
from .membership import MembershipParameters, node_name, one_leaf_tree


class DistanceMembershipAlgorithm(MembershipParameters, FavourAlgorithm):
    """Turn the distance to a vector layer's features into a membership μ raster."""

    INPUT = "INPUT"
    REFERENCE = "REFERENCE"
    OUTPUT = "OUTPUT"
    LINEAGE = "LINEAGE"

    NAME = "distancemembership"
    DISPLAY = "Distance to features to membership"
    HELP = ("Measures, on the grid of the reference raster, the distance from every cell to the "
            "nearest feature of the vector layer (lines, polygons or points; map units of the "
            "grid's CRS; 0 in cells the features touch) and turns it into membership μ with the "
            "chosen function, for example linear with LOWER the far distance (μ 0) and UPPER 0 "
            "(μ 1) for 'near is favourable'. The function parameters are those of 'Raster to "
            "membership'. A memory layer, a filtered layer or selected features are copied to "
            "<output>.features.gpkg first, so the lineage names a file that can be read again.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterFeatureSource(
            self.INPUT, self.tr("Features (lines, polygons or points)"),
            [QgsProcessing.TypeVectorAnyGeometry]))
        self.addParameter(QgsProcessingParameterRasterLayer(
            self.REFERENCE, self.tr("Reference raster (the output takes its grid)")))
        self.add_membership_parameters()
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Membership")))
        self.add_compression()
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread, where layers may be touched."""
        self._reference = raster_layer_path(
            self.parameterAsRasterLayer(parameters, self.REFERENCE, context), self.REFERENCE)
        self._features = VectorInput.prepare(self, parameters, self.INPUT, context)
        self._label = node_name(self._features.label, "features")
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, measure and score the distance, return the outputs."""
        spec = self.membership_spec(parameters, context)
        output = os.path.abspath(self.parameterAsOutputLayer(parameters, self.OUTPUT, context))
        note_temporary(feedback, output)
        path, layer_name = self._features.resolve(self, parameters, context, feedback,
                                                  features_copy_path(output))
        proxy = {"path": path, "measure": "distance"}
        if layer_name:
            proxy["layer"] = layer_name
        leaf = {"name": f"Distance to {self._label}", "proxy": proxy, "membership": spec}
        tree = one_leaf_tree(f"Distance membership of {self._label}", "Distance membership", leaf,
                             grid={"reference": self._reference})
        with self._features.kept_on_success():
            result = run_guarded(evaluate_tree, tree, output, None, ProcessingFeedback(feedback),
                                 job="distance-membership",
                                 compress=self.compression_from(parameters, context))
        style_on_load(context, result.output)
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file}
