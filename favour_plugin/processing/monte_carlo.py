"""``favour:montecarlo``: N realisations drawn from the workshop, evaluated in one streamed pass."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputFile,
    QgsProcessingParameterEnum,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
)

from ..core.uncertainty import MODES
from ..raster.ensemble_jobs import MC_OUTPUTS, monte_carlo
from .base import ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .workshop_base import WorkshopAlgorithm


class MonteCarloAlgorithm(WorkshopAlgorithm):
    """Mean, spread, percentiles and robustness of favourability over realisations from the experts."""

    REALISATIONS = "REALISATIONS"
    SEED = "SEED"
    MODE = "MODE"
    TOP_PERCENT = "TOP_PERCENT"
    CLUSTER = "CLUSTER"
    OUTPUT_MEAN = "OUTPUT_MEAN"
    OUTPUT_STD = "OUTPUT_STD"
    OUTPUT_P10 = "OUTPUT_P10"
    OUTPUT_P50 = "OUTPUT_P50"
    OUTPUT_P90 = "OUTPUT_P90"
    OUTPUT_ROBUSTNESS = "OUTPUT_ROBUSTNESS"
    LINEAGE = "LINEAGE"

    NAME = "montecarlo"
    DISPLAY = "Monte Carlo from the workshop"
    HELP = ("Draws N realisations of the tree from the experts' score sheets (seeded): in 'experts' "
            "mode each node's weights and each leaf's membership come from one expert drawn with the "
            "expert weights; in 'ranges' mode within that expert's stated range. All realisations are "
            "evaluated in one streamed pass over the layers and summarised per cell: mean, standard "
            "deviation, 10th, 50th and 90th percentiles, and robustness, the fraction of realisations "
            "in which the cell is in that realisation's top TOP_PERCENT % of the area. The seed, N and "
            "every realisation's values go into the lineage.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.add_tree()
        self.add_sheets()
        self.addParameter(QgsProcessingParameterNumber(self.REALISATIONS, self.tr("Realisations"),
                                                       QgsProcessingParameterNumber.Integer, 200, minValue=1))
        self.addParameter(QgsProcessingParameterNumber(self.SEED, self.tr("Seed"),
                                                       QgsProcessingParameterNumber.Integer, 1, minValue=0))
        self.addParameter(QgsProcessingParameterEnum(self.MODE, self.tr("Draw from"), options=list(MODES),
                                                     defaultValue="experts", usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterEnum(self.STATISTIC, self.tr(
            "Central value for items an expert left blank"), options=list(self.STATISTICS),
            defaultValue="pool", usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterString(self.EXPERT_WEIGHTS, self.tr(
            "Expert weights (E1=2, E2=1; empty: equal)"), defaultValue="", optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.TOP_PERCENT, self.tr("Top area for robustness (% of the area)"),
            QgsProcessingParameterNumber.Double, 10.0, minValue=0.001, maxValue=99.999))
        for key, name in self._outputs():
            self.addParameter(QgsProcessingParameterRasterDestination(key, self.tr(MC_OUTPUTS[name])))
        self.add_compression()
        cluster = QgsProcessingParameterString(
            self.CLUSTER, self.tr("Run on a Dask cluster: 'local' or tcp://HOST:PORT (empty: this "
                                  "machine's threads)"), defaultValue="", optional=True)
        cluster.setFlags(cluster.flags() | QgsProcessingParameterString.FlagAdvanced)
        self.addParameter(cluster)
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def _outputs(self):
        return ((self.OUTPUT_MEAN, "mean"), (self.OUTPUT_STD, "std"), (self.OUTPUT_P10, "p10"),
                (self.OUTPUT_P50, "p50"), (self.OUTPUT_P90, "p90"), (self.OUTPUT_ROBUSTNESS, "robustness"))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, run the Monte Carlo, return the rasters."""
        tree, tree_file = self.tree_from(parameters, context)
        sheets = self.sheets_from(parameters, context)
        n = self.parameterAsInt(parameters, self.REALISATIONS, context)
        seed = self.parameterAsInt(parameters, self.SEED, context)
        mode = self.parameterAsEnumString(parameters, self.MODE, context)
        statistic = self.parameterAsEnumString(parameters, self.STATISTIC, context)
        weights = self.weights_from(parameters, context)
        top = self.parameterAsDouble(parameters, self.TOP_PERCENT, context)
        outputs = {name: self.parameterAsOutputLayer(parameters, key, context)
                   for key, name in self._outputs()}
        note_temporary(feedback, *outputs.values())
        cluster = self.parameterAsString(parameters, self.CLUSTER, context).strip() or None
        result = run_guarded(monte_carlo, tree, sheets, outputs, n, seed, mode, weights, statistic, top,
                             ProcessingFeedback(feedback), tree_file=tree_file,
                             compress=self.compression_from(parameters, context), cluster=cluster)
        for path in result.files.values():
            style_on_load(context, path)
        found = {key: result.files[name] for key, name in self._outputs()}
        return {**found, self.LINEAGE: result.lineage_file}
