"""What every Favour algorithm shares: translation, help, feedback, errors and styling.

Algorithms stay thin: read every parameter, call core and raster, return the
outputs. :class:`ProcessingFeedback` bridges QGIS feedback to Favour's, and
:func:`run_guarded` turns Favour's errors into ``QgsProcessingException``.
Outputs are styled in the main thread by :class:`StyleLoader`, a layer
post-processor kept alive in ``_POST_PROCESSORS`` until QGIS has used it.
"""

from __future__ import annotations

import os
import tempfile

from qgis.core import (
    QgsProcessingAlgorithm,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProcessingLayerPostProcessorInterface,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingUtils,
)
from qgis.PyQt.QtCore import QCoreApplication, QDir

from ..core.errors import CancelledError, FavourError, FavourWarning
from ..core.feedback import Feedback
from ..core.lineage import CAUTION, lineage_path, read_lineage
from ..raster.style import style_path
from ..raster.writer import COMPRESSIONS

# Post-processors must outlive processAlgorithm: QGIS holds only a raw pointer.
_POST_PROCESSORS: set = set()


class ProcessingFeedback(Feedback):
    """Favour feedback that reports into a ``QgsProcessingFeedback``."""

    def __init__(self, feedback: QgsProcessingFeedback | None) -> None:
        super().__init__()
        self.feedback = feedback or QgsProcessingFeedback()

    def set_progress(self, fraction: float) -> None:
        """Report progress as a percentage."""
        self.feedback.setProgress(100.0 * max(0.0, min(1.0, fraction)))

    def info(self, text: str) -> None:
        """Show a note in the log."""
        self.feedback.pushInfo(text)

    def warning(self, text: str, category: type[FavourWarning] = FavourWarning) -> None:
        """Show a warning in the log and record it for the lineage."""
        super().warning(text, category)
        push = getattr(self.feedback, "pushWarning", None)  # QGIS >= 3.20
        if push is not None:
            push(text)
        else:
            self.feedback.reportError(text, False)

    def is_cancelled(self) -> bool:
        """Return True once the user pressed Cancel."""
        return self.feedback.isCanceled()


def temporary_roots() -> list[str]:
    """Return the folders whose contents do not outlast QGIS or the machine's next clean-up.

    QGIS's processing temporary folder (it may be set apart from the
    system's) and the system's temporary folder as Python and Qt see it.
    """
    roots = []
    for folder in (QgsProcessingUtils.tempFolder(), tempfile.gettempdir(), QDir.tempPath()):
        if folder:
            real = os.path.realpath(folder)
            if real not in roots:
                roots.append(real)
    return roots


def is_temporary(path: str, roots: list[str] | None = None) -> bool:
    """Return True if ``path`` lies in (or is) one of ``roots`` (default: :func:`temporary_roots`)."""
    if not path:
        return False
    real = os.path.realpath(path)
    for root in temporary_roots() if roots is None else roots:
        root = os.path.realpath(root)
        try:
            if os.path.commonpath([real, root]) == root:
                return True
        except ValueError:  # different drives on Windows
            continue
    return False


def note_temporary(feedback: QgsProcessingFeedback, *paths: str | None) -> None:
    """Warn, before the work, about each output that would land in a temporary folder."""
    for path in paths:
        if path and is_temporary(path):
            message = (f"{path} is in a temporary folder, which is emptied when QGIS closes; "
                       "to keep the result and its lineage, choose a file in a folder of your own")
            push = getattr(feedback, "pushWarning", None)  # QGIS >= 3.20
            if push is not None:
                push(message)
            else:
                feedback.reportError(message, False)


def run_guarded(function, *args, **kwargs):
    """Call ``function``; re-raise Favour's errors as ``QgsProcessingException``."""
    try:
        return function(*args, **kwargs)
    except CancelledError as exc:
        raise QgsProcessingException(str(exc)) from None
    except FavourError as exc:
        raise QgsProcessingException(str(exc)) from None


class StyleLoader(QgsProcessingLayerPostProcessorInterface):
    """Load the ``.qml`` written beside an output and note its lineage in the layer metadata."""

    def __init__(self, path: str) -> None:
        super().__init__()
        self.path = path

    def postProcessLayer(self, layer, context, feedback):  # noqa: N802 (QGIS API name)
        """Style the layer and add a history line pointing at its lineage."""
        try:
            if layer is None or not layer.isValid():
                return
            qml = style_path(self.path)
            if os.path.exists(qml):
                layer.loadNamedStyle(qml)
                layer.triggerRepaint()
            if os.path.exists(lineage_path(self.path)):
                try:
                    record = read_lineage(self.path)
                    tool = record.get("tool") or {}
                    history = (f"{tool.get('name', 'Favour')} {tool.get('version', '')}, "
                               f"{record.get('job', '')}, {record.get('created', '')}; "
                               f"lineage: {lineage_path(self.path)}")
                    tree = record.get("tree")
                    name = tree.get("name", "") if isinstance(tree, dict) else ""
                except (FavourError, AttributeError, TypeError) as exc:
                    history, name = f"lineage {lineage_path(self.path)} cannot be read: {exc}", ""
                metadata = layer.metadata()
                metadata.addHistoryItem(history)
                metadata.setAbstract(f"{name}\n\n{CAUTION}".strip())
                layer.setMetadata(metadata)
        finally:
            _POST_PROCESSORS.discard(self)


def style_on_load(context, output: str) -> None:
    """Ask QGIS to style ``output`` with its ``.qml`` when it loads the layer at the end."""
    if context.willLoadLayerOnCompletion(output):
        processor = StyleLoader(output)
        _POST_PROCESSORS.add(processor)
        context.layerToLoadOnCompletionDetails(output).setPostProcessor(processor)


class FavourAlgorithm(QgsProcessingAlgorithm):
    """Base of Favour's algorithms: subclasses set ``NAME``, ``DISPLAY``, ``GROUP``, ``HELP``."""

    COMPRESSION = "COMPRESSION"
    COMPRESSION_CHOICES = ("default", *COMPRESSIONS)

    def add_compression(self) -> None:
        """Declare COMPRESSION (advanced): how the rasters are compressed, the fast default first."""
        parameter = QgsProcessingParameterEnum(
            self.COMPRESSION, self.tr("Compression of the rasters written (default: ZSTD level 1, "
                                      "or DEFLATE level 1 where GDAL lacks ZSTD)"),
            options=list(self.COMPRESSION_CHOICES), defaultValue="default", usesStaticStrings=True)
        parameter.setFlags(parameter.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(parameter)

    def compression_from(self, parameters, context) -> str | None:
        """Return the compression chosen (None for the default)."""
        choice = self.parameterAsEnumString(parameters, self.COMPRESSION, context)
        return None if choice in ("", "default") else choice

    NAME = ""
    DISPLAY = ""
    GROUP = "Favourability"
    GROUP_ID = "favourability"
    HELP = ""

    def tr(self, text: str) -> str:
        """Translate ``text`` in the algorithm's context."""
        return QCoreApplication.translate(type(self).__name__, text)

    def createInstance(self):  # noqa: N802 (QGIS API name)
        """Return a fresh instance (QGIS runs each execution on its own)."""
        return type(self)()

    def name(self) -> str:
        """Return the stable id within the provider."""
        return self.NAME

    def displayName(self) -> str:  # noqa: N802 (QGIS API name)
        """Return the translated display name."""
        return self.tr(self.DISPLAY)

    def group(self) -> str:
        """Return the translated group name."""
        return self.tr(self.GROUP)

    def groupId(self) -> str:  # noqa: N802 (QGIS API name)
        """Return the stable group id."""
        return self.GROUP_ID

    def shortHelpString(self) -> str:  # noqa: N802 (QGIS API name)
        """Return the help shown beside the dialog, with the usual caution."""
        return self.tr(self.HELP) + "\n\n" + self.tr(CAUTION)
