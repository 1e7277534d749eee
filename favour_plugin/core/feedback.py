"""How long operations report progress, notes and warnings, and learn of a cancel.

Core and raster code never talk to QGIS or a terminal directly; they call a
:class:`Feedback`. Processing algorithms, the dock and the command line each
pass an adapter of their own.
"""

from __future__ import annotations

from .errors import CancelledError, FavourWarning


class Feedback:
    """Silent feedback that never cancels; the base every adapter extends.

    Subclasses override :meth:`set_progress`, :meth:`info`, :meth:`warning`
    and :meth:`is_cancelled`. ``warnings`` collects every warning so a job can
    copy them into its lineage record.
    """

    def __init__(self) -> None:
        self.warnings: list[dict] = []

    def set_progress(self, fraction: float) -> None:
        """Report that ``fraction`` (0 to 1) of the work is done."""

    def info(self, text: str) -> None:
        """Report a note worth showing the user."""

    def warning(self, text: str, category: type[FavourWarning] = FavourWarning) -> None:
        """Report a recoverable problem and remember it for the lineage."""
        self.warnings.append({"category": category.__name__, "message": text})

    def is_cancelled(self) -> bool:
        """Return True once the user has asked to stop."""
        return False

    def check_cancelled(self) -> None:
        """Raise :class:`CancelledError` if the user has asked to stop."""
        if self.is_cancelled():
            raise CancelledError("cancelled by the user; no output was written")


class ScaledFeedback(Feedback):
    """Map a sub-task's progress 0..1 onto ``[start, end]`` of a parent feedback."""

    def __init__(self, parent: Feedback, start: float, end: float) -> None:
        super().__init__()
        self.parent = parent
        self.start = start
        self.end = end
        self.warnings = parent.warnings

    def set_progress(self, fraction: float) -> None:
        """Forward the scaled fraction to the parent."""
        self.parent.set_progress(self.start + (self.end - self.start) * fraction)

    def info(self, text: str) -> None:
        """Forward the note to the parent."""
        self.parent.info(text)

    def warning(self, text: str, category: type[FavourWarning] = FavourWarning) -> None:
        """Forward the warning to the parent (which records it)."""
        self.parent.warning(text, category)

    def is_cancelled(self) -> bool:
        """Ask the parent."""
        return self.parent.is_cancelled()
