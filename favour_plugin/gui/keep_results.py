"""Favour results in a temporary folder, offered to be kept before the project lets them go.

A quick look (and any Favour output written to a temporary folder) lives only
as long as that folder: QGIS removes its processing folder when it closes, and
the system clears its own. When the project is about to drop its layers —
File › New, opening another project, QGIS closing — :class:`KeepResults` lists
the Favour layers whose files lie in a temporary folder and asks, through an
injectable callable, whether to keep them. *Keep* copies each one with its
lineage, style and statistics (a dock run's whole folder) into a new folder
``kept-YYYYMMDD-HHMMSS`` under the lasting results folder, never over anything;
*Discard* lets them go. Saving a project that holds such layers is noted in
the message bar.

Which signal, found on QGIS 3.22 (``tests/test_keep_results.py`` headless,
``scripts/dock_session.py`` in the desktop): ``QgsProject.removeAll`` fires
before any layer goes, with every layer still in the project, whenever a
project closes — ``QgsProject.clear``, ``QgsProject.read`` (another project
opened), ``removeAllMapLayers``, and in the desktop both *Project › New* and
*Exit* (which first ask QGIS's own questions, "temporary layers will be
lost" and "save the project?"); ``cleared`` follows once the layers are gone.
``aboutToBeCleared`` does not exist in 3.22; where a newer QGIS has it, it is
followed too, and each layer is asked about once. By the time ``removeAll``
fires from ``clear`` the project has already forgotten its file name, so the
project's folder is remembered when the project is read or saved.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass

from qgis.core import Qgis, QgsProject, QgsProviderRegistry, QgsRasterLayer
from qgis.PyQt.QtCore import QObject, pyqtSignal
from qgis.PyQt.QtWidgets import QMessageBox

from ..core.lineage import SUFFIX as LINEAGE_SUFFIX
from .common import notify, tr
from .output_folders import default_output, display_path, is_temporary, new_folder, temporary_roots
from .results import RUN_PROPERTY

#: Object name of the question's dialog (scripts find it by this name).
DIALOG_NAME = "FavourKeepResults"
#: How many results the question lists by name before "and N more".
LISTED = 8


@dataclass(frozen=True)
class TemporaryResult:
    """A Favour layer whose file lies in a temporary folder.

    Attributes
    ----------
    layer_id, name : str
        The project layer.
    path : str
        The layer's raster file (absolute).
    run_folder : str
        The dock's run folder holding the file ('' when it came from elsewhere).
    """

    layer_id: str
    name: str
    path: str
    run_folder: str = ""


#: The question: given the results and the folder copies would go to, keep them (True) or not.
Asker = Callable[[list, str], bool]


def layer_file(layer) -> str:
    """Return the file behind a layer ('' when it has none)."""
    parts = QgsProviderRegistry.instance().decodeUri(layer.providerType(), layer.source())
    path = parts.get("path") or ""
    return os.path.abspath(path) if path else ""


def sidecars(path: str) -> list[str]:
    """Return a raster file and the files Favour and QGIS keep beside it (those that exist)."""
    candidates = (path, path + LINEAGE_SUFFIX, os.path.splitext(path)[0] + ".qml", path + ".aux.xml")
    return [file for file in candidates if os.path.isfile(file)]


def _within(path: str, folder: str) -> bool:
    try:
        return os.path.commonpath([os.path.realpath(path), os.path.realpath(folder)]) == \
            os.path.realpath(folder)
    except ValueError:
        return False


def favour_result(layer) -> TemporaryResult | None:
    """Return the layer as a result if it is Favour's: a raster with a lineage beside it or run marks."""
    if not isinstance(layer, QgsRasterLayer):
        return None
    path = layer_file(layer)
    run = str(layer.customProperty(RUN_PROPERTY) or "")
    if not path or not (run or os.path.isfile(path + LINEAGE_SUFFIX)):
        return None
    folder = os.path.abspath(run) if run and os.path.isdir(run) and _within(path, run) else ""
    return TemporaryResult(layer.id(), layer.name(), path, folder)


def temporary_results(project: QgsProject | None = None, roots: list[str] | None = None) -> list:
    """Return the project's Favour layers whose files lie in a temporary folder, in the layers panel's order.

    Parameters
    ----------
    project : QgsProject, optional
        Default: the current project.
    roots : list of str, optional
        The temporary folders (default: :func:`~.output_folders.temporary_roots`).
    """
    project = project or QgsProject.instance()
    roots = temporary_roots() if roots is None else roots
    ordered = [node.layer() for node in project.layerTreeRoot().findLayers() if node.layer() is not None]
    seen = {layer.id() for layer in ordered}
    ordered += [layer for layer_id, layer in project.mapLayers().items() if layer_id not in seen]
    found = []
    for layer in ordered:
        result = favour_result(layer)
        if result is not None and is_temporary(result.path, roots):
            found.append(result)
    return found


def _stamp() -> str:
    """Return the local time as kept folders name it: ``YYYYMMDD-HHMMSS``."""
    return _dt.datetime.now().strftime("%Y%m%d-%H%M%S")


def keep_results(results: list, base: str) -> str:
    """Copy results into a new folder ``base/kept-YYYYMMDD-HHMMSS`` and return it; nothing is overwritten.

    A result from a dock run is kept with its whole run folder (the
    favourability, component rasters, lineage and styles); another with its
    lineage, ``.qml`` style and ``.aux.xml`` beside it. The originals are
    left as they are.

    Raises
    ------
    OSError
        A folder cannot be made or a file cannot be copied.
    """
    kept = new_folder(base, f"kept-{_stamp()}")
    runs_done: set[str] = set()
    for result in results:
        if result.run_folder:
            if result.run_folder in runs_done:
                continue
            runs_done.add(result.run_folder)
            target = new_folder(kept, os.path.basename(result.run_folder.rstrip(os.sep)))
            shutil.copytree(result.run_folder, target, dirs_exist_ok=True)  # target is new and empty
            continue
        files = sidecars(result.path)
        target = kept
        if any(os.path.lexists(os.path.join(kept, os.path.basename(f))) for f in files):
            target = new_folder(kept, os.path.splitext(os.path.basename(result.path))[0])
        for file in files:
            shutil.copy2(file, os.path.join(target, os.path.basename(file)))
    return kept


def ask_with_dialog(results: list, folder: str, parent=None) -> bool:
    """Ask in a message box whether to keep ``results`` (copies into ``folder``); True for Keep."""
    lines = [f"• {r.name} — {display_path(r.path)}" for r in results[:LISTED]]
    if len(results) > LISTED:
        lines.append(tr("… and {n} more").format(n=len(results) - LISTED))
    box = QMessageBox(parent)
    box.setObjectName(DIALOG_NAME)
    box.setIcon(QMessageBox.Warning)
    box.setWindowTitle(tr("Favour: keep results from a temporary folder?"))
    if len(results) == 1:
        text = tr("The project holds a Favour result in a temporary folder. It will be lost, with its "
                  "lineage, when the folder is emptied; QGIS empties its own when it closes.")
    else:
        text = tr("The project holds {n} Favour results in a temporary folder. They will be lost, with "
                  "their lineage, when the folder is emptied; QGIS empties its own when it closes.").format(
            n=len(results))
    box.setText(text)
    if len(results) == 1:
        what = tr("Keep copies it, with its lineage and style, into a new folder in {folder}; "
                  "Discard lets it go.")
    else:
        what = tr("Keep copies them, with their lineage and styles, into a new folder in {folder}; "
                  "Discard lets them go.")
    box.setInformativeText("\n".join(lines) + "\n\n" + what.format(folder=display_path(folder)))
    box.setDetailedText("\n".join(r.path for r in results))
    keep = box.addButton(tr("Keep"), QMessageBox.AcceptRole)
    discard = box.addButton(tr("Discard"), QMessageBox.DestructiveRole)
    box.setDefaultButton(keep)
    box.setEscapeButton(discard)
    box.exec_()
    return box.clickedButton() is keep


class KeepResults(QObject):
    """Offers to keep temporary Favour layers before the project drops them; notes saves that hold them.

    Parameters
    ----------
    project : QgsProject
        The project followed.
    iface : QgisInterface, optional
        For the message bar and the dialog's parent.
    controller : TreeController, optional
        Its chosen results folder and tree file decide where kept copies go.
    asker : callable, optional
        ``asker(results, folder) -> bool``; default :func:`ask_with_dialog`.

    Signals
    -------
    kept(str)
        Copies were made in this folder.
    """

    kept = pyqtSignal(str)

    def __init__(self, project: QgsProject, iface=None, controller=None, asker: Asker | None = None,
                 parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.project = project
        self.iface = iface
        self.controller = controller
        self.asker = asker or self._dialog
        self.last_kept: str | None = None
        self._asked: set[str] = set()
        self._project_folder = ""
        self._remember_folder()
        self._links = [(project.removeAll, self.before_removal), (project.cleared, self._cleared),
                       (project.readProject, self._remember_folder), (project.projectSaved, self._saved)]
        if hasattr(project, "aboutToBeCleared"):  # QGIS 3.26 and later
            self._links.append((project.aboutToBeCleared, self.before_removal))
        for signal, slot in self._links:
            signal.connect(slot)

    def disconnect_all(self) -> None:
        """Stop following the project (the plugin is unloading)."""
        for signal, slot in self._links:
            try:
                signal.disconnect(slot)
            except TypeError:
                pass
        self._links = []

    def lasting_folder(self) -> str:
        """Return the lasting folder kept copies go under: the chosen results folder, else the default.

        A chosen folder that is itself temporary is passed over; the default
        is never temporary (see :func:`~.output_folders.default_output`).
        """
        chosen = getattr(self.controller, "output_folder", "") or ""
        if chosen and not is_temporary(chosen):
            return os.path.abspath(chosen)
        tree_file = getattr(self.controller, "file_path", None)
        return default_output(self.project, tree_file, project_folder=self._project_folder).path

    def before_removal(self, *args) -> None:
        """Ask about the temporary Favour layers still in the project; keep them if asked to."""
        try:
            found = [r for r in temporary_results(self.project) if r.layer_id not in self._asked]
            if not found:
                return
            self._asked.update(r.layer_id for r in found)
            folder = self.lasting_folder()
            if not self.asker(found, folder):
                return
            kept = keep_results(found, folder)
            self.last_kept = kept
            notify(self.iface, tr("Kept {n} Favour result(s), with their lineage, in {folder}.").format(
                n=len(found), folder=display_path(kept)), Qgis.Success, 0)
            self.kept.emit(kept)
        except Exception as exc:  # a slot must not raise: PyQt would abort QGIS
            notify(self.iface, tr("The Favour results were not kept: {error}").format(error=exc),
                   Qgis.Critical, 0)

    def _dialog(self, results: list, folder: str) -> bool:
        parent = self.iface.mainWindow() if self.iface is not None else None
        return ask_with_dialog(results, folder, parent)

    def _remember_folder(self, *args) -> None:
        if self.project.fileName():
            self._project_folder = self.project.absolutePath()

    def _cleared(self) -> None:
        self._asked.clear()
        self._project_folder = ""

    def _saved(self) -> None:
        """Say so when the project was saved holding Favour layers from a temporary folder."""
        try:
            self._remember_folder()
            found = temporary_results(self.project)
            if not found:
                return
            names = ", ".join(r.name for r in found[:LISTED]) + (" …" if len(found) > LISTED else "")
            notify(self.iface, tr(
                "The project was saved with {n} Favour layer(s) from a temporary folder ({names}); "
                "their files go when QGIS closes and the project will miss them. You will be offered "
                "to keep them when the project closes; a Run writes lasting results.").format(
                n=len(found), names=names), Qgis.Warning, 10)
        except Exception as exc:  # a slot must not raise
            notify(self.iface, tr("Favour could not check the saved project's results: {error}").format(
                error=exc), Qgis.Warning)
