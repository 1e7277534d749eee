"""The tree kept in the QGIS project: written when the project is saved, read when it is opened.

Entries live under the ``favour`` scope of the project file:

``tree``
    the tree as JSON, even half-finished. Layers inside the project's
    folder are stored relative to it (the folder can move with its data),
    layers elsewhere with absolute paths; on reading, relative paths are taken
    from the project's folder.
``tree_file``, ``output_folder``, ``component_rasters``
    the tree file it came from, where runs write, and whether they write
    component rasters.

An edit marks the project as changed. Clearing the project clears the dock.
"""

from __future__ import annotations

import copy
import os

from qgis.core import Qgis, QgsProject
from qgis.PyQt.QtCore import QObject

from ..core.errors import FavourError
from ..core.tree import Tree
from .common import notify, tr

SCOPE = "favour"


class ProjectStore(QObject):
    """Connects a controller to a QGIS project's write, read and clear signals."""

    def __init__(self, controller, project: QgsProject | None = None, iface=None, parent=None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.project = project or QgsProject.instance()
        self.iface = iface
        self._loading = False
        self._links = [(self.project.writeProject, self.write), (self.project.readProject, self.read),
                       (self.project.cleared, self.clear), (controller.changed, self._edited)]
        for signal, slot in self._links:
            signal.connect(slot)

    def disconnect_all(self) -> None:
        """Stop listening (the plugin is unloading)."""
        for signal, slot in self._links:
            try:
                signal.disconnect(slot)
            except TypeError:
                pass
        self._links = []

    def folder(self) -> str:
        """Return the project's folder ('' when the project has never been saved)."""
        return self.project.absolutePath()

    def write(self, *args) -> None:
        """Store the tree and the run options in the project (called as it is written)."""
        project, c = self.project, self.controller
        if c.tree is None:
            project.removeEntry(SCOPE, "tree")
        else:
            folder = self.folder()
            tree = copy.deepcopy(c.tree)  # layer ids stay: they belong to this project
            if folder:
                tree.anchor_paths(folder)
            else:
                tree.absolute_paths()
            project.writeEntry(SCOPE, "tree", tree.to_json())
        project.writeEntry(SCOPE, "tree_file", c.file_path or "")
        project.writeEntry(SCOPE, "output_folder", c.output_folder or "")
        project.writeEntryBool(SCOPE, "component_rasters", bool(c.component_rasters))

    def read(self, *args) -> None:
        """Show the tree stored in the project just opened (none: the dock stays empty).

        A stored tree that cannot be read (damaged JSON, wrong types, too deep
        or too large: see :meth:`Tree.from_draft_json`) is reported, and the
        dock stays empty rather than guessing. Nothing raises out of this slot.
        """
        project, c = self.project, self.controller
        text, found = project.readEntry(SCOPE, "tree", "")
        c.set_run_options(project.readEntry(SCOPE, "output_folder", "")[0],
                          project.readBoolEntry(SCOPE, "component_rasters", False)[0])
        tree_file = project.readEntry(SCOPE, "tree_file", "")[0] or None
        tree = None
        if found and text:
            try:
                tree = Tree.from_draft_json(text, base_dir=self.folder() or None,
                                            source="the tree stored in this project")
            except FavourError as exc:
                notify(self.iface, tr("The Favour dock stays empty: {error}").format(error=exc),
                       Qgis.Critical)
            except Exception as exc:  # a slot must not raise: PyQt would abort QGIS
                notify(self.iface, tr("The Favour dock stays empty: the tree stored in this project "
                                      "cannot be read: {error}").format(error=f"{type(exc).__name__}: {exc}"),
                       Qgis.Critical)
        self._loading = True
        try:
            c.reset(tree, os.path.abspath(tree_file) if tree_file else None)
        finally:
            self._loading = False
        project.setDirty(False)

    def clear(self) -> None:
        """Empty the dock: the project was closed or a new one started."""
        self._loading = True
        try:
            self.controller.set_run_options("", False)
            self.controller.reset(None)
        finally:
            self._loading = False

    def _edited(self) -> None:
        if not self._loading and self.controller.tree is not None:
            self.project.setDirty(True)

