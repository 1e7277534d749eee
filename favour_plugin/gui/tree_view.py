"""The criteria tree as a tree widget: one row per node, problems marked, layers dropped on it.

The widget only shows a :class:`~favour_plugin.core.tree.Tree`; it is rebuilt
from the tree after every change (models are small) and keeps the selection
and the folded rows by node path. Layers dragged from the layers panel or
the browser are handed on with :attr:`CriteriaTreeView.layers_dropped`.
"""

from __future__ import annotations

from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtGui import QBrush
from qgis.PyQt.QtWidgets import QAbstractItemView, QHeaderView, QTreeWidget, QTreeWidgetItem

from ..core.tree import PATH_SEPARATOR, Node, Tree
from .common import RUST, icon, tr
from .layers import URI_MIME

PATH_ROLE = Qt.UserRole + 1

OPERATOR_LABELS = {"and": "fuzzy AND", "or": "fuzzy OR", "product": "product", "sum": "algebraic sum",
                   "gamma": "gamma", "weighted_mean": "weighted mean"}


def describe(node: Node) -> str:
    """Return the short text of the second column: how the node gets its μ."""
    if node.is_leaf:
        kind = (node.membership or {}).get("type")
        layer = node.proxy.path.replace("\\", "/").rsplit("/", 1)[-1] if node.proxy else tr("no layer")
        if node.proxy is not None and node.proxy.is_vector:
            layer = tr("distance to {layer}").format(layer=node.proxy.layer or layer) \
                if node.proxy.measure == "distance" else f"{node.proxy.layer or layer}.{node.proxy.field}"
        return f"{tr(kind) if kind else tr('no function')} · {layer}"
    spec = node.operator or {}
    text = tr(OPERATOR_LABELS.get(spec.get("type"), tr("no operator")))
    if spec.get("type") == "gamma":
        text += f" γ {spec.get('gamma')}"
    if spec.get("nodata") == "ignore":
        text += " · " + tr("skip missing")
    return text


def node_icon_name(node: Node, is_root: bool) -> str:
    """Return the icon name for a node's kind."""
    if is_root:
        return "node-root"
    if node.component:
        return "node-component"
    if node.is_leaf:
        if node.proxy is None:
            return "node-empty"
        return "node-vector" if node.proxy.is_vector else "node-raster"
    return "node-group"


def _rows(tree: Tree):
    """Yield (path, node, is_root) in the order the widget shows them (depth first)."""
    stack = [(tree.root.name, tree.root, True)]
    while stack:
        path, node, is_root = stack.pop()
        yield path, node, is_root
        for child in reversed(node.children):
            stack.append((path + PATH_SEPARATOR + child.name, child, False))


class CriteriaTreeView(QTreeWidget):
    """Shows the tree; emits the selected node's path and layers dropped onto a node.

    Signals
    -------
    path_selected(str)
        The selected node changed ('' for none).
    layers_dropped(str, object)
        Mime data of layers dropped onto the node at the path.
    """

    path_selected = pyqtSignal(str)
    layers_dropped = pyqtSignal(str, object)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setColumnCount(2)
        self.setHeaderLabels([tr("Criterion"), tr("Scored by")])
        self.header().setSectionResizeMode(0, QHeaderView.ResizeToContents)
        self.header().setStretchLastSection(True)
        self.setSelectionMode(QAbstractItemView.SingleSelection)
        self.setAcceptDrops(True)
        self.setDragDropMode(QAbstractItemView.DropOnly)
        self.setDropIndicatorShown(True)
        self._items: dict[str, QTreeWidgetItem] = {}
        self._folded: set[str] = set()
        self.itemSelectionChanged.connect(self._selection_changed)
        self.itemCollapsed.connect(lambda item: self._folded.add(item.data(0, PATH_ROLE)))
        self.itemExpanded.connect(lambda item: self._folded.discard(item.data(0, PATH_ROLE)))

    # -- showing ------------------------------------------------------------------

    def show_tree(self, tree: Tree | None, problems: dict | None = None) -> None:
        """Show ``tree``, keeping selection, folds and scroll position; mark ``problems`` by path.

        When only texts changed (typing a rationale, setting a parameter) the
        rows are updated in place; otherwise they are built again.
        """
        selected = self.selected_path()
        rows = list(_rows(tree)) if tree is not None else []
        self.blockSignals(True)
        try:
            if [path for path, _, _ in rows] == list(self._items):
                for path, node, is_root in rows:
                    self._fill(self._items[path], node, is_root)
            else:
                scroll = self.verticalScrollBar().value()
                self.clear()
                self._items = {}
                if tree is not None:
                    self._add(None, tree.root, tree.root.name, True)
                    for path, item in self._items.items():
                        item.setExpanded(path not in self._folded)
                self.verticalScrollBar().setValue(scroll)
            self.mark_problems(problems or {})
            item = self._items.get(selected)
            if item is not None:
                self.setCurrentItem(item)
        finally:
            self.blockSignals(False)
        if self.selected_path() != selected:
            self.path_selected.emit(self.selected_path())

    def _add(self, parent: QTreeWidgetItem | None, node: Node, path: str, is_root: bool = False) -> None:
        item = QTreeWidgetItem()
        item.setData(0, PATH_ROLE, path)
        self._fill(item, node, is_root)
        if parent is None:
            self.addTopLevelItem(item)
        else:
            parent.addChild(item)
        self._items[path] = item
        for child in node.children:
            self._add(item, child, path + PATH_SEPARATOR + child.name)

    @staticmethod
    def _fill(item: QTreeWidgetItem, node: Node, is_root: bool) -> None:
        """Set a row's texts, kind icon and the rationale as the second column's tooltip."""
        for column, text in enumerate((node.name, describe(node))):
            if item.text(column) != text:
                item.setText(column, text)
        item.setData(0, Qt.UserRole + 3, node_icon_name(node, is_root))
        item.setToolTip(1, node.rationale or "")

    def mark_problems(self, problems: dict) -> None:
        """Show each node's problems: a mark, the messages on hover, errors in the ramp's rust."""
        for path, item in self._items.items():
            found = problems.get(path, [])
            errors = [p for p in found if p.level == "error"]
            item.setIcon(0, icon(("problem-error" if errors else "problem-warning") if found
                                 else item.data(0, Qt.UserRole + 3)))
            if found:
                lines = [("✖ " if p.level == "error" else "⚠ ") + p.message for p in found]
                item.setToolTip(0, "\n".join(lines))
                item.setForeground(0, QBrush(RUST) if errors else QBrush())
            else:
                item.setToolTip(0, "")
                item.setForeground(0, QBrush())
            item.setData(0, Qt.UserRole + 2, [p.level for p in found])

    # -- selection -------------------------------------------------------------------

    def selected_path(self) -> str:
        """Return the selected node's path ('' for none)."""
        item = self.currentItem()
        return item.data(0, PATH_ROLE) if item is not None and item.isSelected() else ""

    def select_path(self, path: str) -> None:
        """Select the node at ``path`` (or its nearest ancestor that exists)."""
        while path and path not in self._items:
            path = path.rpartition(PATH_SEPARATOR)[0]
        item = self._items.get(path)
        if item is not None:
            self.setCurrentItem(item)
            item.setSelected(True)
            self.scrollToItem(item)

    def item_for(self, path: str) -> QTreeWidgetItem | None:
        """Return the row of the node at ``path``."""
        return self._items.get(path)

    def _selection_changed(self) -> None:
        self.path_selected.emit(self.selected_path())

    # -- dropping layers ------------------------------------------------------------

    def _accepts(self, event) -> bool:
        return event.mimeData().hasFormat(URI_MIME) and self.itemAt(event.pos()) is not None

    def dragEnterEvent(self, event):  # noqa: N802 (Qt API name)
        """Accept layers from the layers panel or the browser."""
        if event.mimeData().hasFormat(URI_MIME):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dragMoveEvent(self, event):  # noqa: N802 (Qt API name)
        """Accept the drop only over a node."""
        if self._accepts(event):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dropEvent(self, event):  # noqa: N802 (Qt API name)
        """Hand the dropped layers on with the path of the node under the pointer."""
        if not self._accepts(event):
            event.ignore()
            return
        path = self.itemAt(event.pos()).data(0, PATH_ROLE)
        event.acceptProposedAction()
        self.layers_dropped.emit(path, event.mimeData())
