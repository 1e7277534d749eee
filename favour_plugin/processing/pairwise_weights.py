"""``favour:pairwiseweights``: weights from a pairwise-comparison matrix, put into a node's children."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputNumber,
    QgsProcessingOutputString,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterString,
)

from ..core.tree import Tree
from ..raster.workshop_jobs import describe_pairwise, pairwise_job
from .base import run_guarded
from .workshop_base import WorkshopAlgorithm


class PairwiseWeightsAlgorithm(WorkshopAlgorithm):
    """Principal-eigenvector weights, λmax, CI and CR of a pairwise-comparison matrix."""

    MATRIX = "MATRIX"
    NODE = "NODE"
    OUTPUT_TREE = "OUTPUT_TREE"
    WEIGHTS = "WEIGHTS"
    LAMBDA_MAX = "LAMBDA_MAX"
    CI = "CI"
    CR = "CR"
    WORST = "WORST"

    NAME = "pairwiseweights"
    DISPLAY = "Pairwise-comparison weights"
    HELP = ("Reads a pairwise-comparison matrix (CSV: a header of names, then one row per name, "
            "cells on Saaty's 1–9 scale or their reciprocals such as 1/3) and gives the principal "
            "eigenvector weights, λmax, the consistency index CI = (λmax − n)/(n − 1) and ratio CR = "
            "CI/RI (Saaty 1980); CR of 0.10 or more is flagged and the most inconsistent judgement "
            "named. Given a tree and a node whose children the matrix names, writes the tree with those "
            "weights to a new tree file.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.addParameter(QgsProcessingParameterFile(self.MATRIX, self.tr("Comparison matrix (CSV)"),
                                                     extension="csv"))
        self.addParameter(QgsProcessingParameterFile(self.TREE, self.tr("Tree file (optional)"),
                                                     extension="json", optional=True))
        self.addParameter(QgsProcessingParameterString(self.NODE, self.tr(
            "Node whose children the matrix compares (its path)"), optional=True))
        self.addParameter(QgsProcessingParameterFileDestination(
            self.OUTPUT_TREE, self.tr("Tree file with the weights"), "Favour tree files (*.json)",
            optional=True, createByDefault=False))
        self.addOutput(QgsProcessingOutputString(self.WEIGHTS, self.tr("Weights")))
        for key, label in ((self.LAMBDA_MAX, "λmax"), (self.CI, "Consistency index"),
                           (self.CR, "Consistency ratio")):
            self.addOutput(QgsProcessingOutputNumber(key, self.tr(label)))
        self.addOutput(QgsProcessingOutputString(self.WORST, self.tr("Most inconsistent judgement")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, compute the weights, return them."""
        matrix = self.parameterAsFile(parameters, self.MATRIX, context)
        tree_file = self.parameterAsFile(parameters, self.TREE, context) or None
        node = self.parameterAsString(parameters, self.NODE, context).strip() or None
        output_tree = self.parameterAsFileOutput(parameters, self.OUTPUT_TREE, context) or None
        tree = run_guarded(Tree.load, tree_file) if tree_file else None
        job = run_guarded(pairwise_job, matrix, tree, node, output_tree, tree_file)
        for line in describe_pairwise(job, node).splitlines():
            feedback.pushInfo(line)
        r = job.result
        i, j = r.worst_pair
        return {self.WEIGHTS: "; ".join(f"{n}={w:.6g}" for n, w in zip(job.names, r.weights)),
                self.LAMBDA_MAX: r.lambda_max, self.CI: r.ci, self.CR: r.cr,
                self.WORST: f"{job.names[i]} against {job.names[j]}", self.OUTPUT_TREE: job.tree_file}
