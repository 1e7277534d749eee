"""Small input widgets the editors share: a number box that shows tidy numbers."""

from __future__ import annotations

from qgis.PyQt.QtWidgets import QAbstractSpinBox, QDoubleSpinBox

BIG = 1e12


class NumberBox(QDoubleSpinBox):
    """A spin box for parameters of any size: shows up to 8 significant digits, steps adaptively.

    Reports a value only when the user finishes typing (Enter or leaving the
    box) or steps with the arrows, so one edit is one undo step.
    """

    def __init__(self, low: float = -BIG, high: float = BIG, parent=None) -> None:
        super().__init__(parent)
        self.setDecimals(10)
        self.setRange(low, high)
        self.setKeyboardTracking(False)
        self.setStepType(QAbstractSpinBox.AdaptiveDecimalStepType)
        self.setAccelerated(True)

    def textFromValue(self, value: float) -> str:  # noqa: N802 (Qt API name)
        """Show the value with up to 8 significant digits and no trailing zeros."""
        return f"{value:.8g}"

    def set_quietly(self, value: float) -> None:
        """Show ``value`` without emitting ``valueChanged``."""
        if self.value() != value:
            self.blockSignals(True)
            self.setValue(value)
            self.blockSignals(False)
