"""The bottom of the dock: where runs write (and why there), Quick look, Run, Cancel and the progress bar."""

from __future__ import annotations

from qgis.gui import QgsFileWidget
from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtWidgets import (
    QCheckBox,
    QGridLayout,
    QLabel,
    QProgressBar,
    QPushButton,
    QWidget,
)

from .common import icon, tr
from .output_folders import DefaultFolder, display_path, is_temporary


class RunBar(QWidget):
    """Run controls; they only emit what the user asked for.

    Signals
    -------
    run_requested(bool)
        Run (False) or quick look (True).
    cancel_requested()
    folder_changed(str)
    components_toggled(bool)
    """

    run_requested = pyqtSignal(bool)
    cancel_requested = pyqtSignal()
    folder_changed = pyqtSignal(str)
    components_toggled = pyqtSignal(bool)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        grid = QGridLayout(self)
        grid.setContentsMargins(4, 2, 4, 2)
        self.folder_widget = QgsFileWidget()
        self.folder_widget.setStorageMode(QgsFileWidget.GetDirectory)
        self.folder_widget.setDialogTitle(tr("Folder for the results"))
        self.components_box = QCheckBox(tr("Also write component rasters"))
        self.quick_button = QPushButton(icon("quick-look"), tr("Quick look"))
        self.quick_button.setToolTip(tr("Evaluate on a coarser grid (at most about a million cells) "
                                        "to see the map move while scores change."))
        self.run_button = QPushButton(icon("run"), tr("Run"))
        self.run_button.setToolTip(tr("Evaluate the tree on its full grid; the results join the "
                                      "project with their lineage."))
        self.cancel_button = QPushButton(icon("cancel"), tr("Cancel"))
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.progress.setTextVisible(True)
        self.status = QLabel()
        self.status.setWordWrap(True)
        #: Where the next run writes, and why there; that quick looks are temporary.
        self.destination = QLabel()
        self.destination.setWordWrap(True)
        self.destination.setTextInteractionFlags(Qt.TextSelectableByMouse)
        grid.addWidget(QLabel(tr("Results in")), 0, 0)
        grid.addWidget(self.folder_widget, 0, 1, 1, 3)
        grid.addWidget(self.destination, 1, 0, 1, 4)
        grid.addWidget(self.components_box, 2, 0, 1, 4)
        grid.addWidget(self.quick_button, 3, 0)
        grid.addWidget(self.run_button, 3, 1)
        grid.addWidget(self.cancel_button, 3, 2)
        grid.addWidget(self.progress, 3, 3)
        grid.addWidget(self.status, 4, 0, 1, 4)
        grid.setColumnStretch(3, 1)
        self.quick_button.clicked.connect(lambda: self.run_requested.emit(True))
        self.run_button.clicked.connect(lambda: self.run_requested.emit(False))
        self.cancel_button.clicked.connect(self.cancel_requested)
        self.folder_widget.fileChanged.connect(self.folder_changed)
        self.components_box.toggled.connect(self.components_toggled)
        self.set_running(False)

    def set_running(self, running: bool, text: str = "") -> None:
        """Enable Cancel during a run, Run and Quick look otherwise."""
        self.run_button.setEnabled(not running)
        self.quick_button.setEnabled(not running)
        self.cancel_button.setEnabled(running)
        if running:
            self.progress.setValue(0)
        if text:
            self.status.setText(text)

    def set_progress(self, percent: float) -> None:
        """Show the run's progress."""
        self.progress.setValue(int(percent))

    def show_options(self, folder: str, default: DefaultFolder, components: bool) -> None:
        """Show the chosen output folder (or the default), where the next run writes, and the option.

        Parameters
        ----------
        folder : str
            The folder the user chose ('' for none).
        default : DefaultFolder
            Where runs write when none is chosen, and why.
        components : bool
            Whether runs also write component rasters.
        """
        self.folder_widget.blockSignals(True)
        self.folder_widget.setFilePath(folder)
        self.folder_widget.lineEdit().setPlaceholderText(display_path(default.path))
        self.folder_widget.blockSignals(False)
        self.destination.setText(destination_text(folder, default))
        self.components_box.blockSignals(True)
        self.components_box.setChecked(components)
        self.components_box.blockSignals(False)


def destination_text(folder: str, default: DefaultFolder) -> str:
    """Say where the next run writes and why there, and that quick looks are temporary."""
    if folder and is_temporary(folder):
        where = tr("Each run writes a new folder in {folder} (your choice, a temporary folder: its "
                   "results go when it is emptied).").format(folder=display_path(folder))
    elif folder:
        where = tr("Each run writes a new folder in {folder} (your choice).").format(
            folder=display_path(folder))
    else:
        where = tr("Each run writes a new folder in {folder} (the default: {why}).").format(
            folder=display_path(default.path), why=default.describe())
    return where + " " + tr("Quick looks are temporary: they go when QGIS closes unless you keep them.")
