"""What the dock's modules share: translation, icons, colours and the message bar."""

from __future__ import annotations

from pathlib import Path

from qgis.core import Qgis, QgsMessageLog
from qgis.PyQt.QtCore import QCoreApplication
from qgis.PyQt.QtGui import QColor, QIcon

from ..raster.style import RAMP

ICON_FOLDER = Path(__file__).resolve().parent.parent / "icons"
CONTEXT = "FavourDock"
LOG_TAG = "Favour"

#: Colours of the dock, taken from the favourability ramp (raster/style.py RAMP).
SLATE, TEAL, SAGE, STRAW, RUST = (QColor(colour) for _, colour in RAMP)


def tr(text: str) -> str:
    """Translate ``text`` in the dock's context (format placeholders after translating)."""
    return QCoreApplication.translate(CONTEXT, text)


def icon(name: str) -> QIcon:
    """Return one of Favour's own icons (``icons/<name>.svg``)."""
    return QIcon(str(ICON_FOLDER / f"{name}.svg"))


def ramp_colour(mu: float) -> QColor:
    """Return the ramp's colour at μ in [0, 1], interpolated between its stops."""
    mu = min(1.0, max(0.0, float(mu)))
    for (v0, c0), (v1, c1) in zip(RAMP, RAMP[1:]):
        if mu <= v1:
            t = 0.0 if v1 == v0 else (mu - v0) / (v1 - v0)
            a, b = QColor(c0), QColor(c1)
            return QColor(round(a.red() + t * (b.red() - a.red())),
                          round(a.green() + t * (b.green() - a.green())),
                          round(a.blue() + t * (b.blue() - a.blue())))
    return QColor(RAMP[-1][1])


def notify(iface, text: str, level=Qgis.Info, duration: int = 6) -> None:
    """Show ``text`` in the QGIS message bar (or the log when there is no interface)."""
    bar = iface.messageBar() if iface is not None else None
    if bar is not None:
        bar.pushMessage(tr("Favour"), text, level, duration)
    QgsMessageLog.logMessage(text, LOG_TAG, level)
