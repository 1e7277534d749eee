"""``favour:combine``: several μ rasters combined by one fuzzy operator.

Each input becomes an ``identity`` leaf (its values must already be μ in
[0, 1]) of an in-memory tree whose root holds the operator; the tree goes
through the one evaluation path. The grid is the first input's; the engine
aligns the others to it and says so.
"""

from __future__ import annotations

import math
import os

from qgis.core import (
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingOutputFile,
    QgsProcessingParameterEnum,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
)

from ..core.overlay import NODATA_RULES, OPERATOR_TYPES
from ..core.tree import FORMAT, VERSION, Tree
from ..raster.engine import evaluate_tree
from .base import FavourAlgorithm, ProcessingFeedback, note_temporary, run_guarded, style_on_load
from .layers import raster_layer_path
from .membership import node_name


def parse_weights(text: str, count: int) -> list[float]:
    """Parse WEIGHTS (``"2, 1, 0.5"``) into ``count`` finite non-negative floats.

    Raises
    ------
    QgsProcessingException
        A weight that is not a finite number >= 0, a count that does not match
        the inputs, or weights that sum to 0; the message names WEIGHTS.
    """
    items = [item.strip() for item in text.replace(";", ",").split(",") if item.strip()]
    if len(items) != count:
        raise QgsProcessingException(
            f"WEIGHTS: {len(items)} weight(s) given for {count} input(s); give one per input, "
            "in the order of INPUTS")
    weights = []
    for item in items:
        try:
            value = float(item)
        except ValueError:
            raise QgsProcessingException(f"WEIGHTS: {item!r} is not a number") from None
        if not math.isfinite(value) or value < 0:
            raise QgsProcessingException(f"WEIGHTS: each weight must be a finite number >= 0, "
                                         f"got {item!r}")
        weights.append(value)
    if sum(weights) <= 0:
        raise QgsProcessingException("WEIGHTS: at least one weight must be positive")
    return weights


def unique_names(labels: list[str]) -> list[str]:
    """Return node names for ``labels``, made unique among siblings with " (2)", " (3)"..."""
    names: list[str] = []
    for label in labels:
        base = node_name(label)
        name, n = base, 1
        while name in names:
            n += 1
            name = f"{base} ({n})"
        names.append(name)
    return names


class CombineAlgorithm(FavourAlgorithm):
    """Combine membership rasters with one fuzzy overlay operator."""

    INPUTS = "INPUTS"
    OPERATOR = "OPERATOR"
    GAMMA = "GAMMA"
    WEIGHTS = "WEIGHTS"
    NODATA_RULE = "NODATA_RULE"
    OUTPUT = "OUTPUT"
    LINEAGE = "LINEAGE"

    NAME = "combine"
    DISPLAY = "Combine memberships"
    HELP = ("Combines membership rasters (values already in 0 to 1) cell by cell with one "
            "operator. and: the smallest μ. or: the largest. product: μ multiplied together "
            "(never above the smallest). sum: 1 minus the product of (1 − μ) (never below the "
            "largest). gamma: sum^γ × product^(1 − γ), γ = GAMMA between 0 (the product) and 1 "
            "(the sum). weighted_mean: WEIGHTS, one per input in order (empty: equal weights). "
            "NODATA_RULE propagate makes a cell nodata where any input is; ignore combines the "
            "inputs present there. The output takes the first input's grid; other inputs are "
            "resampled onto it, with a warning. Band 1 of each raster is read.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterMultipleLayers(
            self.INPUTS, self.tr("Membership rasters (μ in 0 to 1)"), QgsProcessing.TypeRaster))
        self.addParameter(QgsProcessingParameterEnum(
            self.OPERATOR, self.tr("Operator"), options=list(OPERATOR_TYPES),
            defaultValue="gamma", usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterNumber(
            self.GAMMA, self.tr("γ (gamma operator only)"), QgsProcessingParameterNumber.Double,
            defaultValue=0.9, minValue=0.0, maxValue=1.0))
        self.addParameter(QgsProcessingParameterString(
            self.WEIGHTS, self.tr("Weights, comma-separated (weighted_mean only)"), optional=True))
        self.addParameter(QgsProcessingParameterEnum(
            self.NODATA_RULE, self.tr("Where an input is nodata"), options=list(NODATA_RULES),
            defaultValue="propagate", usesStaticStrings=True))
        self.addParameter(QgsProcessingParameterRasterDestination(self.OUTPUT, self.tr("Combined")))
        self.add_compression()
        self.addOutput(QgsProcessingOutputFile(self.LINEAGE, self.tr("Lineage record")))

    def prepareAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Find the files behind the layers in the main thread, where layers may be touched."""
        layers = self.parameterAsLayerList(parameters, self.INPUTS, context)
        if not layers:
            raise QgsProcessingException(f"{self.INPUTS}: give at least one membership raster")
        self._paths = [raster_layer_path(layer, self.INPUTS) for layer in layers]
        self._names = unique_names([layer.name() for layer in layers])
        return True

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, evaluate the one-level tree, return the outputs."""
        kind = self.parameterAsEnumString(parameters, self.OPERATOR, context)
        rule = self.parameterAsEnumString(parameters, self.NODATA_RULE, context)
        gamma = self.parameterAsDouble(parameters, self.GAMMA, context)
        weights_text = self.parameterAsString(parameters, self.WEIGHTS, context).strip()
        output = self.parameterAsOutputLayer(parameters, self.OUTPUT, context)
        note_temporary(feedback, output)
        if kind not in OPERATOR_TYPES:
            raise QgsProcessingException(
                f"{self.OPERATOR}: {kind!r} is not an operator; use one of {', '.join(OPERATOR_TYPES)}")
        if rule not in NODATA_RULES:
            raise QgsProcessingException(
                f"{self.NODATA_RULE}: {rule!r} is not a rule; use one of {', '.join(NODATA_RULES)}")
        if kind == "gamma" and not 0.0 <= gamma <= 1.0:
            raise QgsProcessingException(f"{self.GAMMA}: γ must lie in [0, 1], got {gamma!r}")
        progress = ProcessingFeedback(feedback)
        weights = [1.0] * len(self._paths)
        if kind == "weighted_mean":
            if weights_text:
                weights = parse_weights(weights_text, len(self._paths))
            else:
                progress.info(f"{self.WEIGHTS} is empty: every input weighs the same")
        elif weights_text:
            progress.warning(f"{self.WEIGHTS} is used only by weighted_mean; ignored for {kind}")

        operator: dict = {"type": kind}
        if kind == "gamma":
            operator["gamma"] = gamma
        if rule != "propagate":
            operator["nodata"] = rule
        children = []
        for path, name, weight in zip(self._paths, self._names, weights):
            child = {"name": name, "proxy": {"path": path, "band": 1},
                     "membership": {"type": "identity"}}
            if weight != 1.0:
                child["weight"] = weight
            children.append(child)
        doc = {"format": FORMAT, "version": VERSION,
               "name": f"{kind} of {len(children)} membership raster(s)",
               "root": {"name": "Combined", "operator": operator, "children": children}}
        tree = run_guarded(Tree.from_dict, doc)
        progress.info(f"the output takes the grid of {os.path.basename(self._paths[0])}")
        result = run_guarded(evaluate_tree, tree, output, None, progress, job="combine",
                             compress=self.compression_from(parameters, context))
        style_on_load(context, result.output)
        return {self.OUTPUT: result.output, self.LINEAGE: result.lineage_file}
