"""μ(x) drawn over the histogram of the proxy's sampled values, so the function meets the data.

Painted with QPainter in the ramp's colours. The curve is the membership
function itself (:func:`~favour_plugin.core.membership.parse_membership`)
evaluated at a few hundred x values for drawing; class scores are drawn as
one bar per class, coloured by its μ.
"""

from __future__ import annotations

import numpy as np
from qgis.PyQt.QtCore import QPointF, QRectF, QSize, Qt
from qgis.PyQt.QtGui import QColor, QPainter, QPainterPath, QPen
from qgis.PyQt.QtWidgets import QSizePolicy, QWidget
from scipy.special import expit

from ..core.errors import FavourError
from ..core.membership import parse_membership
from .common import RUST, SAGE, SLATE, ramp_colour, tr

CURVE_POINTS = 300


def _parameter_xs(spec: dict | None) -> list[float]:
    """Return the x values a function's parameters name, so the plot's range includes them."""
    if not spec:
        return []
    kind = spec.get("type")
    keys = {"linear": ("lower", "upper"), "logistic": ("midpoint",), "gaussian": ("centre",)}.get(kind, ())
    xs = [spec[k] for k in keys if isinstance(spec.get(k), (int, float))]
    if kind == "gaussian" and isinstance(spec.get("spread"), (int, float)) and xs:
        xs += [xs[0] - 2 * spec["spread"], xs[0] + 2 * spec["spread"]]
    if kind == "trapezoid":
        xs += [p for p in spec.get("points", []) if isinstance(p, (int, float))]
    if kind == "piecewise":
        xs += [p[0] for p in spec.get("points", []) if isinstance(p, list) and p and
               isinstance(p[0], (int, float))]
    return [float(x) for x in xs]


def curve(spec: dict, low: float, high: float, points: int = CURVE_POINTS) -> tuple[np.ndarray, np.ndarray]:
    """Return x and μ(x) for drawing ``spec`` over [low, high]; raises FavourError for bad parameters."""
    xs = np.linspace(low, high, points)
    return xs, parse_membership(spec)(xs)


class MembershipPlot(QWidget):
    """The μ(x) curve over the sampled histogram (or class bars coloured by score)."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.sample = None
        self.spec: dict | None = None
        self.note = ""
        self.setMinimumHeight(150)
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Preferred)

    def sizeHint(self) -> QSize:  # noqa: N802 (Qt API name)
        """Prefer a short, wide plot."""
        return QSize(320, 170)

    def show_data(self, sample, spec: dict | None, note: str = "") -> None:
        """Draw ``spec`` over ``sample`` (either may be None); ``note`` replaces the histogram."""
        self.sample, self.spec, self.note = sample, spec, note
        self.update()

    # -- painting ------------------------------------------------------------------

    def paintEvent(self, event):  # noqa: N802 (Qt API name)
        """Paint axes, histogram and curve."""
        painter = QPainter(self)
        painter.setRenderHint(QPainter.Antialiasing)
        painter.fillRect(self.rect(), QColor("#fbfaf6"))
        area = QRectF(self.rect()).adjusted(34, 12, -12, -28)
        painter.setPen(QPen(SLATE, 1))
        painter.drawRect(area)
        painter.drawText(QRectF(0, area.top() - 6, 30, 14), Qt.AlignRight, "1")
        painter.drawText(QRectF(0, area.bottom() - 8, 30, 14), Qt.AlignRight, "0")
        painter.drawText(QRectF(0, area.center().y() - 7, 30, 14), Qt.AlignRight, "μ")
        try:
            if self.spec and self.spec.get("type") in ("categories", "weights"):
                self._paint_classes(painter, area)
            else:
                self._paint_continuous(painter, area)
        except (FavourError, ValueError, TypeError) as exc:  # a half-typed parameter: say so, draw on
            self._centre_text(painter, area, tr("μ cannot be drawn: {error}").format(error=exc))
        finally:
            painter.end()

    def _centre_text(self, painter: QPainter, area: QRectF, text: str) -> None:
        painter.setPen(QPen(SLATE))
        painter.drawText(area.adjusted(6, 6, -6, -6), Qt.AlignCenter | Qt.TextWordWrap, text)

    def _paint_continuous(self, painter: QPainter, area: QRectF) -> None:
        xs = _parameter_xs(self.spec)
        if self.sample is not None and self.sample.count:
            low, high = self.sample.low, self.sample.high
            xs += [low, high]
        if not xs:
            self._centre_text(painter, area, self.note or tr("No values to show yet."))
            return
        low, high = min(xs), max(xs)
        if high <= low:
            low, high = low - 1.0, high + 1.0
        pad = 0.04 * (high - low)
        low, high = low - pad, high + pad

        def to_x(value):
            return area.left() + (value - low) / (high - low) * area.width()

        if self.sample is not None and self.sample.count:
            peak = max(1, int(self.sample.counts.max()))
            fill = QColor(SAGE)
            fill.setAlpha(150)
            painter.setPen(Qt.NoPen)
            painter.setBrush(fill)
            for left, right, count in zip(self.sample.edges[:-1], self.sample.edges[1:], self.sample.counts):
                height = count / peak * area.height() * 0.92
                painter.drawRect(QRectF(to_x(left), area.bottom() - height,
                                        max(1.0, to_x(right) - to_x(left) - 1), height))
        elif self.note:
            self._centre_text(painter, area, self.note)
        if self.spec:
            x, mu = curve(self.spec, low, high)
            path = QPainterPath()
            started = False
            for xv, mv in zip(x, mu):
                if not np.isfinite(mv):
                    started = False
                    continue
                point = QPointF(to_x(xv), area.bottom() - mv * area.height())
                if started:
                    path.lineTo(point)
                else:
                    path.moveTo(point)
                    started = True
            painter.setBrush(Qt.NoBrush)
            painter.setPen(QPen(RUST, 2.2))
            painter.drawPath(path)
        painter.setPen(QPen(SLATE))
        bottom = QRectF(area.left(), area.bottom() + 4, area.width(), 16)
        painter.drawText(bottom, Qt.AlignLeft, f"{low:.4g}")
        painter.drawText(bottom, Qt.AlignRight, f"{high:.4g}")
        if self.sample is not None and self.sample.count:
            painter.drawText(bottom, Qt.AlignHCenter,
                             tr("bars: {n} sampled cells").format(n=self.sample.count))

    def _paint_classes(self, painter: QPainter, area: QRectF) -> None:
        if self.spec.get("type") == "weights":  # μ of each class from its weight
            scores = {float(k): float(expit(v)) for k, v in (self.spec.get("weights") or {}).items()
                      if isinstance(v, (int, float))}
        else:
            scores = {float(k): v for k, v in (self.spec.get("scores") or {}).items()}
        counts = dict(self.sample.classes or {}) if self.sample is not None else {}
        codes = sorted(set(scores) | set(counts))
        if not codes:
            self._centre_text(painter, area, self.note or tr("No classes to show yet."))
            return
        peak = max([1, *counts.values()])
        width = area.width() / len(codes)
        default = self.spec.get("default")
        for i, code in enumerate(codes):
            score = scores.get(code, default)
            left = area.left() + i * width
            height = counts.get(code, 0) / peak * area.height() * 0.92
            colour = ramp_colour(score) if isinstance(score, (int, float)) else QColor("#c8c8c8")
            painter.setPen(Qt.NoPen)
            painter.setBrush(colour)
            painter.drawRect(QRectF(left + 2, area.bottom() - height, max(1.0, width - 4), height))
            if isinstance(score, (int, float)):
                painter.setBrush(RUST)
                centre = QPointF(left + width / 2, area.bottom() - score * area.height())
                painter.drawEllipse(centre, 3.5, 3.5)
            painter.setPen(QPen(SLATE))
            label = str(int(code)) if float(code).is_integer() else f"{code:g}"
            painter.drawText(QRectF(left, area.bottom() + 4, width, 16), Qt.AlignHCenter, label)
