"""Where runs write: a folder the user picks, else beside the project, else a temporary folder.

Full runs write to ``<folder>/run-YYYYMMDD-HHMMSS/`` so earlier results stay
as they were; quick looks to a temporary folder, each replacing the last.
"""

from __future__ import annotations

import os

from qgis.core import QgsProcessingUtils, QgsProject

RESULTS = "favour-results"
QUICK = "favour-quick-look"


def default_output_folder(project: QgsProject | None = None) -> str:
    """Return ``favour-results`` beside the project file, or in QGIS's temporary folder if unsaved."""
    project = project or QgsProject.instance()
    folder = project.absolutePath()
    return os.path.join(folder or QgsProcessingUtils.tempFolder(), RESULTS)


def quick_look_folder() -> str:
    """Return the folder quick looks write to (QGIS's temporary folder for this session)."""
    return os.path.join(QgsProcessingUtils.tempFolder(), QUICK)
