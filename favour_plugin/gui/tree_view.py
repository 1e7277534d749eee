"""The criteria tree as a tree widget: one row per node, problems marked, layers dropped on it.

The widget only shows a :class:`~favour_plugin.core.tree.Tree`; it is rebuilt
from the tree after every change (models are small) and keeps the selection
and the folded rows by node path. Layers dragged from the layers panel or
the browser are handed on with :attr:`CriteriaTreeView.layers_dropped`.

Nodes are dragged within the view to reorder or re-parent them. The two
kinds of drop are told apart by their MIME type: layers come as QGIS's
``application/x-vnd.qgis.qgis.uri``, a node as :data:`NODE_MIME` holding its
path and the view it left. The view never moves its own rows: it hands the
node, the row it was dropped on and where on that row (:func:`drop_place`)
to :attr:`CriteriaTreeView.node_dropped`, the dock turns them into a move of
the tree (:func:`drop_destination`) through the controller, one undo step,
and the rows are rebuilt from the tree.
"""

from __future__ import annotations

import json
import uuid

from qgis.PyQt.QtCore import QMimeData, Qt, pyqtSignal
from qgis.PyQt.QtGui import QBrush, QDrag
from qgis.PyQt.QtWidgets import QAbstractItemView, QHeaderView, QTreeWidget, QTreeWidgetItem

from ..core.errors import ParameterError
from ..core.tree import PATH_SEPARATOR, Node, Tree
from .common import RUST, icon, tr
from .layers import URI_MIME

PATH_ROLE = Qt.UserRole + 1

#: MIME type of a node dragged within the view: JSON ``{"view": token, "path": path}``.
NODE_MIME = "application/x-favour-node"

#: Where on a row a node is dropped: above it, onto it (under it, last), below it.
PLACES = ("above", "on", "below")

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
            layer += _options_text(node.proxy)
        return f"{tr(kind) if kind else tr('no function')} · {layer}"
    spec = node.operator or {}
    text = tr(OPERATOR_LABELS.get(spec.get("type"), tr("no operator")))
    if spec.get("type") == "gamma":
        text += f" γ {spec.get('gamma')}"
    if spec.get("nodata") == "ignore":
        text += " · " + tr("skip missing")
    return text


def _options_text(proxy) -> str:
    """Return a vector proxy's filter and margin as the row shows them: `` (order: 1, 2; margin 500)``."""
    parts = []
    where = proxy.where
    if isinstance(where, dict) and isinstance(where.get("field"), str) \
            and isinstance(where.get("values"), list):
        values = ", ".join(str(v) for v in where["values"][:4]) + (" …" if len(where["values"]) > 4 else "")
        parts.append(f"{where['field']}: {values or '?'}")
    if isinstance(proxy.margin, (int, float)) and not isinstance(proxy.margin, bool) and proxy.margin > 0:
        parts.append(tr("margin {margin:g}").format(margin=proxy.margin))
    return f" ({'; '.join(parts)})" if parts else ""


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


def drop_place(top: int, height: int, y: int) -> str:
    """Return where a drop at height ``y`` falls on a row spanning ``top`` to ``top + height``.

    The bands are Qt's own for its drop indicator (a margin of a 5.5th of the
    row, 2 to 12 pixels): near the top edge "above", near the bottom "below",
    else "on".
    """
    margin = max(2, min(12, round(height / 5.5)))
    if y - top < margin:
        return "above"
    if top + height - 1 - y < margin:
        return "below"
    return "on"


def drop_destination(tree: Tree, path: str, target: str, place: str) -> tuple[str, int] | None:
    """Return (new parent path, index) for the node at ``path`` dropped ``place`` the row ``target``.

    "on" puts it last under ``target``; "above" and "below" put it beside
    ``target``, before or after it. ``index`` counts the new parent's children
    without the node moved, as :meth:`Tree.move` takes it. None when the drop
    leaves everything where it is (a node dropped on itself).

    Raises
    ------
    ParameterError
        A node dropped beside the root (the tree has one root).
    KeyError
        No node at ``path`` or ``target``.
    """
    if place not in PLACES:
        raise ValueError(f"place must be one of {', '.join(PLACES)}, got {place!r}")
    tree.find(path)
    target_node = tree.find(target)
    if target == path:
        return None
    moved_name = path.rpartition(PATH_SEPARATOR)[2]
    old_parent = path.rpartition(PATH_SEPARATOR)[0]
    if place == "on":
        others = [c.name for c in target_node.children if not (target == old_parent and c.name == moved_name)]
        return target, len(others)
    if target == tree.root.name:
        raise ParameterError(tr("a criterion cannot stand beside the root, the tree has one; drop it "
                                "onto the root to put it directly under it"))
    parent = target.rpartition(PATH_SEPARATOR)[0]
    siblings = [c.name for c in tree.find(parent).children
                if not (parent == old_parent and c.name == moved_name)]
    index = siblings.index(target.rpartition(PATH_SEPARATOR)[2])
    return parent, index + (1 if place == "below" else 0)


class CriteriaTreeView(QTreeWidget):
    """Shows the tree; emits the selected node's path and layers dropped onto a node.

    Signals
    -------
    path_selected(str)
        The selected node changed ('' for none).
    layers_dropped(str, object)
        Mime data of layers dropped onto the node at the path.
    node_dropped(str, str, str)
        A node (its path) dragged onto the row of another (its path), "above",
        "on" or "below" it.
    """

    path_selected = pyqtSignal(str)
    layers_dropped = pyqtSignal(str, object)
    node_dropped = pyqtSignal(str, str, str)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setColumnCount(2)
        self.setHeaderLabels([tr("Criterion"), tr("Scored by")])
        self.header().setSectionResizeMode(0, QHeaderView.ResizeToContents)
        self.header().setStretchLastSection(True)
        self.setSelectionMode(QAbstractItemView.SingleSelection)
        self.setAcceptDrops(True)
        self.setDragEnabled(True)
        self.setDragDropMode(QAbstractItemView.DragDrop)
        self.setDefaultDropAction(Qt.MoveAction)
        self.setDropIndicatorShown(True)
        #: Marks the nodes this view sends, so a node dragged from another window is not taken.
        self._token = uuid.uuid4().hex
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

    # -- dragging nodes, dropping nodes and layers -------------------------------------

    def node_mime(self, path: str) -> QMimeData:
        """Return the drag data of the node at ``path`` (what a drag from this view carries)."""
        mime = QMimeData()
        mime.setData(NODE_MIME, json.dumps({"view": self._token, "path": path}).encode("utf-8"))
        return mime

    def dragged_path(self, mime) -> str | None:
        """Return the path of a node dragged from this view, or None for anything else."""
        if mime is None or not mime.hasFormat(NODE_MIME):
            return None
        try:
            doc = json.loads(bytes(mime.data(NODE_MIME)).decode("utf-8"))
        except (UnicodeDecodeError, ValueError):
            return None
        if not isinstance(doc, dict) or doc.get("view") != self._token \
                or not isinstance(doc.get("path"), str):
            return None
        return doc["path"]

    def mimeTypes(self) -> list[str]:  # noqa: N802 (Qt API name)
        """Name the drops the view takes: layers, and its own nodes."""
        return [URI_MIME, NODE_MIME]

    def dropMimeData(self, parent, index, data, action) -> bool:  # noqa: N802 (Qt API name)
        """Never let Qt move rows itself: the tree moves, and the rows are rebuilt from it."""
        return False

    def startDrag(self, actions) -> None:  # noqa: N802 (Qt API name)
        """Drag the selected node (not the root, which stays where it is)."""
        item = self.currentItem()
        if item is None or item.parent() is None:
            return
        drag = QDrag(self)
        drag.setMimeData(self.node_mime(item.data(0, PATH_ROLE)))
        drag.exec(Qt.MoveAction)

    def place_at(self, pos) -> tuple[str, str] | None:
        """Return (path of the row, place on it) under the point ``pos`` of the viewport, or None."""
        item = self.itemAt(pos)
        if item is None:
            return None
        rect = self.visualItemRect(item)
        return item.data(0, PATH_ROLE), drop_place(rect.top(), rect.height(), pos.y())

    def _accepts(self, event) -> bool:
        return event.mimeData().hasFormat(URI_MIME) and self.itemAt(event.pos()) is not None

    def dragEnterEvent(self, event):  # noqa: N802 (Qt API name)
        """Accept layers from the layers panel or the browser, and this view's own nodes."""
        if self.dragged_path(event.mimeData()) is not None:
            super().dragEnterEvent(event)
            event.acceptProposedAction()
        elif event.mimeData().hasFormat(URI_MIME):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dragMoveEvent(self, event):  # noqa: N802 (Qt API name)
        """Accept the drop only over a node (a node: with Qt's line showing where it would go)."""
        if self.dragged_path(event.mimeData()) is not None:
            super().dragMoveEvent(event)  # draws the indicator and scrolls near the edges
            if self.itemAt(event.pos()) is not None:
                event.setDropAction(Qt.MoveAction)
                event.accept()
            else:
                event.ignore()
        elif self._accepts(event):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dropEvent(self, event):  # noqa: N802 (Qt API name)
        """Hand a dropped node on with the row and place, or dropped layers with the node's path."""
        path = self.dragged_path(event.mimeData())
        if path is not None:
            place = self.place_at(event.pos())
            # Qt's own handling ends the drag state; it moves nothing (dropMimeData refuses).
            event.setDropAction(Qt.CopyAction)
            super().dropEvent(event)
            if place is None:
                event.ignore()
                return
            event.setDropAction(Qt.MoveAction)
            event.accept()
            self.node_dropped.emit(path, *place)
            return
        if not self._accepts(event):
            event.ignore()
            return
        path = self.itemAt(event.pos()).data(0, PATH_ROLE)
        event.acceptProposedAction()
        self.layers_dropped.emit(path, event.mimeData())
