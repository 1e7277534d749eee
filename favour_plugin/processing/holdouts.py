"""``favour:holdouts``: leave-one-out and spatially blocked hold-outs of weights of evidence."""

from __future__ import annotations

from qgis.core import (
    QgsProcessing,
    QgsProcessingOutputNumber,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
)

from ..raster.holdout_jobs import SCHEMES, holdouts
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded
from .evidence_weights import DepositParameters
from .layers import raster_layer_path
from .validate import GROUP, GROUP_ID, add_bootstrap, add_outputs, bootstrap_values


class HoldoutsAlgorithm(DepositParameters, FavourAlgorithm):
    """Score each deposit in the posterior made without it, or without its block of deposits."""

    EVIDENCE = "EVIDENCE"
    UNIT_AREA = "UNIT_AREA"
    BLOCK_SIZE = "BLOCK_SIZE"
    CAPTURE = "CAPTURE"
    RESAMPLES = "RESAMPLES"
    SEED = "SEED"
    LEVEL = "LEVEL"
    OUTPUT_JSON = "OUTPUT_JSON"
    OUTPUT_CSV = "OUTPUT_CSV"
    LINEAGE = "LINEAGE"
    AUC_SUCCESS = "AUC_SUCCESS"
    AUC_LEAVE_ONE_OUT = "AUC_LEAVE_ONE_OUT"
    AUC_BLOCKS = "AUC_BLOCKS"

    NAME = "holdouts"
    DISPLAY = "Hold-outs for weights of evidence"
    GROUP = GROUP
    GROUP_ID = GROUP_ID
    HELP = (
        "Tests a weights-of-evidence posterior on deposits it was not built from. The evidence "
        "rasters, deposits, unit cell and study area are those of 'Posterior probability'. "
        "Leave-one-out: each deposit in turn is removed, the weights and the prior are counted again "
        "without it, and the deposit is placed among all cells of the map made without it. With "
        "BLOCK_SIZE (map units), the grid is cut into squares of that side and all deposits of a "
        "square are held out together, so that a deposit's neighbours cannot carry its evidence into "
        "the weights: where deposits cluster, leave-one-out still flatters the map. Reported for all "
        "deposits (the success-rate curve), leave-one-out and the blocks: the AUC with its bootstrap "
        "interval, the capture efficiency and the prediction–area crossing; the map is made again "
        "from the counts per combination of classes, without reading the rasters again. A hold-out "
        "that leaves a class without deposits makes no map; its deposits are reported, not scored.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterMultipleLayers(
            self.EVIDENCE, self.tr("Generalised evidence rasters"), QgsProcessing.TypeRaster))
        self.addParameter(QgsProcessingParameterNumber(
            self.UNIT_AREA, self.tr("Unit cell (km²)"), QgsProcessingParameterNumber.Double,
            defaultValue=1.0, minValue=1e-9))
        self.add_deposit_parameters()
        self.addParameter(QgsProcessingParameterNumber(
            self.BLOCK_SIZE, self.tr("Side of the hold-out blocks (map units, optional)"),
            QgsProcessingParameterNumber.Double, optional=True))
        add_bootstrap(self)
        add_outputs(self, "Hold-out result", "Table of curves")
        for key, label in ((self.AUC_SUCCESS, "AUC, all deposits"),
                           (self.AUC_LEAVE_ONE_OUT, "AUC, leave-one-out"), (self.AUC_BLOCKS, "AUC, blocks")):
            self.addOutput(QgsProcessingOutputNumber(key, self.tr(label)))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread."""
        self._evidence = [raster_layer_path(layer, self.EVIDENCE) for layer in
                          self.parameterAsLayerList(parameters, self.EVIDENCE, context)]
        self.prepare_deposits(parameters, context)
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, hold the deposits out, return the AUCs."""
        unit = self.parameterAsDouble(parameters, self.UNIT_AREA, context)
        given = parameters.get(self.BLOCK_SIZE)
        block = self.parameterAsDouble(parameters, self.BLOCK_SIZE, context) \
            if given is not None and given != "" else None
        options = bootstrap_values(self, parameters, context)
        output_json = self.parameterAsFileOutput(parameters, self.OUTPUT_JSON, context)
        output_csv = self.parameterAsFileOutput(parameters, self.OUTPUT_CSV, context) or None
        note_temporary(feedback, output_json, output_csv)
        inputs = self.resolve_deposits(parameters, context, feedback, output_json)
        with self.deposits_kept_on_success():
            job = run_guarded(holdouts, self._evidence, output_json=output_json, output_csv=output_csv,
                              unit_area_km2=unit, block_size=block, feedback=ProcessingFeedback(feedback),
                              **inputs, **options)
        result = job.result
        aucs = {}
        for key, label in SCHEMES.items():
            section = result.get(key)
            aucs[key] = section["auc"] if section else None
            if section and section["auc"] is not None:
                low, high = section["auc_ci"]
                feedback.pushInfo(f"{label}: {section['n_deposits']} deposit cells, AUC {section['auc']:.3f} "
                                  f"({low:.3f}–{high:.3f})")
        return {self.OUTPUT_JSON: job.json_file, self.OUTPUT_CSV: job.csv_file,
                self.LINEAGE: job.lineage_file,
                self.AUC_SUCCESS: aucs["success"], self.AUC_LEAVE_ONE_OUT: aucs["leave_one_out"],
                self.AUC_BLOCKS: aucs.get("blocks")}
