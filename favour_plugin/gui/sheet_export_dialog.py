"""The dialog that asks where and for whom to write score sheets; the workshop view writes them.

It asks for a folder, the experts (a number of anonymous ids, or ids given
by name), the format, and whether the sheets are the next round's (each
expert's own values with the group's spread). It only gathers the answers:
:meth:`~.workshop_view.WorkshopView.export_sheets` writes.
"""

from __future__ import annotations

from qgis.gui import QgsFileWidget
from qgis.PyQt.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QSpinBox,
)

from ..core.sheets import xlsx_available
from .common import icon, tr


class SheetExportDialog(QDialog):
    """Ask for the folder, experts, format and round of the sheets to write.

    Parameters
    ----------
    folder : str
        The folder offered first.
    next_round : int
        The round the sheets would be when they carry the group's spread
        (0 when no round has been read: only first-round sheets can be written).
    experts : tuple of str
        The experts of the last round read (the default ids of a next round).
    """

    def __init__(self, folder: str, next_round: int = 0, experts: tuple = (), parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle(tr("Export score sheets"))
        self.setWindowIcon(icon("export-sheets"))
        form = QFormLayout(self)
        self.folder = QgsFileWidget()
        self.folder.setStorageMode(QgsFileWidget.GetDirectory)
        self.folder.setFilePath(folder)
        self.count = QSpinBox()
        self.count.setRange(1, 99)
        self.count.setValue(max(len(experts), 4))
        self.ids = QLineEdit(", ".join(experts))
        self.ids.setPlaceholderText(tr("anonymous: E1, E2, …"))
        self.format = QComboBox()
        self.format.addItem("CSV (UTF-8)", "csv")
        if xlsx_available():
            self.format.addItem("XLSX", "xlsx")
        self.next_round = QCheckBox(tr("Next round: each expert's own values with the group's median "
                                       "and IQR"))
        self.next_round.setEnabled(bool(next_round))
        self.next_round.setChecked(bool(next_round))
        form.addRow(tr("Folder"), self.folder)
        form.addRow(tr("Experts"), self.count)
        form.addRow(tr("or their ids"), self.ids)
        form.addRow(tr("Format"), self.format)
        form.addRow(self.next_round)
        note = QLabel(tr("First-round sheets start from the tree's current values. Sheets are never "
                         "written over: choose a folder without them."))
        note.setWordWrap(True)
        form.addRow(note)
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        form.addRow(buttons)
        self.resize(480, 0)

    def experts(self):
        """Return the ids typed (a list), else the number of anonymous experts."""
        ids = [part.strip() for part in self.ids.text().split(",") if part.strip()]
        return ids or self.count.value()
