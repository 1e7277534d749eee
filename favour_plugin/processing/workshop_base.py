"""What the workshop algorithms share: their group, the tree file and the score sheets."""

from __future__ import annotations

from qgis.core import QgsProcessing, QgsProcessingParameterFile, QgsProcessingParameterMultipleLayers

from ..core.tree import Tree
from ..core.workshop import STATISTICS
from ..raster.workshop_jobs import parse_expert_weights
from .base import FavourAlgorithm, run_guarded


class WorkshopAlgorithm(FavourAlgorithm):
    """Base of the workshop and uncertainty algorithms: TREE, and score sheets where used."""

    TREE = "TREE"
    SHEETS = "SHEETS"
    EXPERT_WEIGHTS = "EXPERT_WEIGHTS"
    STATISTIC = "STATISTIC"
    STATISTICS = STATISTICS
    GROUP = "Workshop and uncertainty"
    GROUP_ID = "workshop"

    def add_tree(self) -> None:
        """Declare the tree file parameter."""
        self.addParameter(QgsProcessingParameterFile(self.TREE, self.tr("Tree file"), extension="json"))

    def add_sheets(self, key: str | None = None, label: str = "Score sheets (CSV or XLSX)",
                   optional: bool = False) -> None:
        """Declare a list of score-sheet files."""
        self.addParameter(QgsProcessingParameterMultipleLayers(
            key or self.SHEETS, self.tr(label), QgsProcessing.TypeFile, optional=optional))

    def tree_from(self, parameters, context) -> tuple[Tree, str]:
        """Load the tree file; return the tree and its path."""
        path = self.parameterAsFile(parameters, self.TREE, context)
        return run_guarded(Tree.load, path), path

    def sheets_from(self, parameters, context, key: str | None = None) -> list[str]:
        """Return the sheet files given for ``key`` (none when the parameter is left empty)."""
        if not parameters.get(key or self.SHEETS):
            return []
        return [p for p in self.parameterAsFileList(parameters, key or self.SHEETS, context) if p]

    def weights_from(self, parameters, context) -> dict[str, float] | None:
        """Return the expert weights (None: equal)."""
        return run_guarded(parse_expert_weights, self.parameterAsString(parameters, self.EXPERT_WEIGHTS,
                                                                        context))
