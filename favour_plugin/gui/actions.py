"""The dock's toolbar: its actions, icons and tooltips, with no behaviour of their own."""

from __future__ import annotations

from qgis.PyQt.QtCore import Qt
from qgis.PyQt.QtGui import QKeySequence
from qgis.PyQt.QtWidgets import QAction, QMenu, QToolBar, QToolButton

from ..core.tree import COMPONENTS
from .common import icon, tr


class DockActions:
    """Creates the toolbar's actions; the dock connects them."""

    def __init__(self, parent, undo_stack) -> None:
        def make(name: str, text: str, tip: str, shortcut=None) -> QAction:
            action = QAction(icon(name), text, parent)
            action.setToolTip(tip)
            if shortcut is not None:
                action.setShortcut(QKeySequence(shortcut))
                action.setShortcutContext(Qt.WidgetWithChildrenShortcut)
            parent.addAction(action)
            return action

        self.new = make("new-model", tr("New model"), tr("Start a model with the four components"))
        self.open = make("open-tree", tr("Open tree file…"), tr("Open a Favour tree file (.json)"))
        self.save = make("save-tree", tr("Save tree file"), tr("Save the tree to its file"),
                         QKeySequence.Save)
        self.save_as = make("save-tree", tr("Save tree file as…"), tr("Save the tree to a new file"))
        self.undo = undo_stack.createUndoAction(parent, tr("Undo"))
        self.undo.setIcon(icon("undo"))
        self.undo.setShortcut(QKeySequence.Undo)
        self.undo.setShortcutContext(Qt.WidgetWithChildrenShortcut)
        self.redo = undo_stack.createRedoAction(parent, tr("Redo"))
        self.redo.setIcon(icon("redo"))
        self.redo.setShortcut(QKeySequence.Redo)
        self.redo.setShortcutContext(Qt.WidgetWithChildrenShortcut)
        parent.addAction(self.undo)
        parent.addAction(self.redo)
        self.add_criterion = make("add-criterion", tr("Add criterion"),
                                  tr("Add a criterion, to be scored from a layer"))
        self.add_group = make("add-group", tr("Add group of criteria"),
                              tr("Add a criterion that combines criteria of its own"))
        self.add_component = make("add-component", tr("Add component"),
                                  tr("Add a component of the mineral system under the root"))
        self.component_menu = QMenu(parent)
        self.component_actions = {}
        for kind in (*COMPONENTS, None):
            action = self.component_menu.addAction(tr(kind.capitalize()) if kind else tr("Other"))
            self.component_actions[kind] = action
        self.add_component.setMenu(self.component_menu)
        self.add_layer = make("add-layer", tr("Add layer"),
                              tr("Score a project layer as a criterion (or drag one onto the tree)"))
        self.layer_menu = QMenu(parent)
        self.add_layer.setMenu(self.layer_menu)
        self.remove = make("remove", tr("Remove"), tr("Remove the node and everything under it"))
        self.up = make("move-up", tr("Move up"), tr("Move the node up among its siblings"))
        self.down = make("move-down", tr("Move down"), tr("Move the node down among its siblings"))
        self.pairwise = make("pairwise", tr("Pairwise weights…"),
                             tr("Weigh the criteria under the selected node by comparing them two at a time"))
        self.why_here = make("why-here", tr("Why here?"),
                             tr("Click a cell on the map to see every node's value there, read from the "
                                "layers through the model"))
        self.why_here.setCheckable(True)

    def toolbar(self, parent) -> QToolBar:
        """Return a toolbar holding the actions in their groups."""
        bar = QToolBar(parent)
        bar.setIconSize(bar.iconSize() * 0.75)
        for group in ((self.new, self.open, self.save), (self.undo, self.redo),
                      (self.add_component, self.add_group, self.add_criterion, self.add_layer),
                      (self.remove, self.up, self.down), (self.pairwise, self.why_here)):
            for action in group:
                bar.addAction(action)
            bar.addSeparator()
        for action in (self.add_component, self.add_layer):
            button = bar.widgetForAction(action)
            if isinstance(button, QToolButton):
                button.setPopupMode(QToolButton.InstantPopup)
        save_button = bar.widgetForAction(self.save)
        if isinstance(save_button, QToolButton):
            menu = QMenu(save_button)
            menu.addAction(self.save)
            menu.addAction(self.save_as)
            save_button.setMenu(menu)
            save_button.setPopupMode(QToolButton.MenuButtonPopup)
        return bar
