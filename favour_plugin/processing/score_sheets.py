"""``favour:scoresheets``: one score sheet per expert for a tree, or the next round's sheets."""

from __future__ import annotations

from qgis.core import (
    QgsProcessingOutputString,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFolderDestination,
    QgsProcessingParameterString,
)

from ..raster.workshop_jobs import SHEET_FORMATS, write_score_sheets
from .base import run_guarded
from .workshop_base import WorkshopAlgorithm


class ScoreSheetsAlgorithm(WorkshopAlgorithm):
    """Write score sheets for a workshop."""

    EXPERTS = "EXPERTS"
    FORMAT = "FORMAT"
    PREVIOUS = "PREVIOUS"
    OUTPUT_FOLDER = "OUTPUT_FOLDER"
    FILES = "FILES"

    NAME = "scoresheets"
    DISPLAY = "Write score sheets"
    HELP = ("Writes one score sheet per expert for the tree: every node's importance (1–9) or "
            "weight, a confidence (low, medium, high) and, for each leaf, its membership parameters "
            "with room for a plausible range. EXPERTS is a number (anonymous ids E1, E2, …) or a "
            "comma-separated list of ids. Given the previous round's filled sheets (PREVIOUS), it "
            "writes the next round's sheets instead: each expert's own scores with the group's median, "
            "interquartile range and count beside them. Existing sheets are never written over.")

    def initAlgorithm(self, config=None):  # noqa: N802 (QGIS API name)
        """Declare the parameters and outputs."""
        self.add_tree()
        self.addParameter(QgsProcessingParameterString(self.EXPERTS, self.tr("Experts (a number or ids)"),
                                                       defaultValue="4"))
        self.addParameter(QgsProcessingParameterEnum(self.FORMAT, self.tr("Format"),
                                                     options=list(SHEET_FORMATS), defaultValue="csv",
                                                     usesStaticStrings=True))
        self.add_sheets(self.PREVIOUS, "Previous round's sheets (for the next round)", optional=True)
        self.addParameter(QgsProcessingParameterFolderDestination(self.OUTPUT_FOLDER,
                                                                  self.tr("Folder for the sheets")))
        self.addOutput(QgsProcessingOutputString(self.FILES, self.tr("Sheets written")))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 (QGIS API name)
        """Read the parameters, write the sheets, return their paths."""
        tree, _ = self.tree_from(parameters, context)
        experts_text = self.parameterAsString(parameters, self.EXPERTS, context).strip()
        fmt = self.parameterAsEnumString(parameters, self.FORMAT, context)
        previous = self.sheets_from(parameters, context, self.PREVIOUS) or None
        folder = self.parameterAsString(parameters, self.OUTPUT_FOLDER, context)
        experts = int(experts_text) if experts_text.isdigit() else \
            [e.strip() for e in experts_text.split(",") if e.strip()]
        files = run_guarded(write_score_sheets, tree, folder, experts, fmt, previous)
        for path in files:
            feedback.pushInfo(f"score sheet: {path}")
        return {self.OUTPUT_FOLDER: folder, self.FILES: "; ".join(files)}
