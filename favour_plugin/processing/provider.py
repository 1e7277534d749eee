"""The ``favour`` processing provider."""

from __future__ import annotations

import os

from qgis.core import QgsProcessingProvider
from qgis.PyQt.QtGui import QIcon

from ..about import VERSION

ICON = os.path.join(os.path.dirname(os.path.dirname(__file__)), "icons", "favour.svg")


class FavourProvider(QgsProcessingProvider):
    """Holds Favour's algorithms under the provider id ``favour``."""

    def id(self) -> str:
        """Return the provider id used in algorithm ids (``favour:evaluatetree``)."""
        return "favour"

    def name(self) -> str:
        """Return the name shown in the toolbox."""
        return "Favour"

    def longName(self) -> str:  # noqa: N802 (QGIS API name)
        """Return the name with the version."""
        return f"Favour {VERSION}"

    def icon(self) -> QIcon:
        """Return the provider's icon."""
        return QIcon(ICON)

    def loadAlgorithms(self) -> None:  # noqa: N802 (QGIS API name)
        """Add one instance of each algorithm."""
        from .algorithms import ALGORITHMS

        for algorithm in ALGORITHMS:
            self.addAlgorithm(algorithm())
