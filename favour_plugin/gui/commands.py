"""Undo commands: each edit of the tree is a swap between two snapshots of it.

Snapshots are deep copies of the :class:`~favour_plugin.core.tree.Tree`, so
undo gives back exactly the tree before the edit, half-finished parts and
unknown fields included. Consecutive edits of one field of one node (typing
a rationale, stepping a parameter) merge into one undo step.
"""

from __future__ import annotations

import copy

from qgis.PyQt.QtWidgets import QUndoCommand

_MERGEABLE = 4711  # any fixed id: QUndoStack only tries to merge commands with equal ids


class SnapshotCommand(QUndoCommand):
    """Swap the controller's tree between ``before`` and ``after``.

    Parameters
    ----------
    controller : TreeController
        Whose tree to set.
    before, after : Tree or None
        The tree before and after the edit (copied again on each swap, so the
        snapshots never change).
    text : str
        What the undo menu shows.
    focus : tuple of (str or None, str or None)
        Node path to select after undo and after redo.
    merge_key : str or None
        Edits with the same key in a row merge into one step.
    """

    def __init__(self, controller, before, after, text: str, focus=(None, None),
                 merge_key: str | None = None) -> None:
        super().__init__(text)
        self.controller = controller
        self.before = before
        self.after = after
        self.focus = focus
        self.merge_key = merge_key
        #: (file before, file after) when the edit replaces the whole tree, else None.
        self.files: tuple | None = None

    def id(self) -> int:
        """Return the merge id: mergeable edits share one, others return -1."""
        return _MERGEABLE if self.merge_key else -1

    def mergeWith(self, other) -> bool:  # noqa: N802 (Qt API name)
        """Absorb ``other`` when it edits the same field of the same node."""
        if not isinstance(other, SnapshotCommand) or other.merge_key != self.merge_key:
            return False
        self.after = other.after
        self.focus = (self.focus[0], other.focus[1])
        return True

    def redo(self) -> None:
        """Set the tree after the edit."""
        extra = (self.files[1],) if self.files else ()
        self.controller._set_tree(copy.deepcopy(self.after), self.focus[1], *extra)

    def undo(self) -> None:
        """Set the tree before the edit."""
        extra = (self.files[0],) if self.files else ()
        self.controller._set_tree(copy.deepcopy(self.before), self.focus[0], *extra)
