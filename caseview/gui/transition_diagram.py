"""Stages as boxes in a row, allowed transitions as arrows (forward above, backward below)."""

from __future__ import annotations

import math

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QFont, QPainter, QPainterPath, QPen, QPolygonF
from PySide6.QtWidgets import QSizePolicy, QWidget

from . import theme


def _days_label(rate: float) -> str:
    """Mean days until a move at ``rate`` per day, in words for very slow moves."""
    if not rate > 0 or 1.0 / rate > 36500:
        return "rare (>100 y)"
    return f"{1.0 / rate:,.0f} d"


class TransitionDiagram(QWidget):
    """Draws a :class:`hmm.StageModel`'s stages and transitions; labels show mean days per move."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.model = None
        self.setMinimumHeight(230)
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Preferred)
        self.setAccessibleName("Diagram of stages and allowed transitions")

    def set_model(self, model) -> None:
        self.model = model
        if model is not None:
            moves = ", ".join(f"{model.stages[t.source]} to {model.stages[t.target]}" for t in model.transitions)
            self.setAccessibleDescription(f"Stages: {', '.join(model.stages)}. Allowed transitions: {moves}.")
        self.update()

    def paintEvent(self, _event) -> None:
        painter = QPainter(self)
        painter.setRenderHint(QPainter.Antialiasing)
        pal = self.palette()
        text_colour = pal.color(self.foregroundRole())
        if self.model is None:
            painter.setPen(text_colour)
            painter.drawText(self.rect(), Qt.AlignCenter, "No model loaded")
            return
        m = self.model
        n = m.n_stages
        width, height = self.width(), self.height()
        box_w = min(150.0, (width - 20) / n - 18)
        box_h = 46.0
        gap = (width - n * box_w) / (n + 1)
        mid_y = height / 2
        boxes = [QRectF(gap + i * (box_w + gap), mid_y - box_h / 2, box_w, box_h) for i in range(n)]
        colours = theme.stage_colours(n)
        follow = m.follow_up_mask
        absorbing = set(m.absorbing_stages)
        font = QFont(self.font())
        font.setPointSizeF(max(7.0, font.pointSizeF() * 0.85))
        painter.setFont(font)
        for t in m.transitions:
            a, b = boxes[t.source], boxes[t.target]
            forward = t.target > t.source
            span = abs(t.target - t.source)
            y0 = a.top() if forward else a.bottom()
            start = QPointF(a.center().x() + (8 if forward else -8), y0)
            end = QPointF(b.center().x() + (-8 if forward else 8), b.top() if forward else b.bottom())
            lift = (50 + 80 * (span - 1)) * (-1 if forward else 1)
            control = QPointF((start.x() + end.x()) / 2, y0 + lift)
            path = QPainterPath(start)
            path.quadTo(control, end)
            painter.setPen(QPen(text_colour, 1.4))
            painter.setBrush(Qt.NoBrush)
            painter.drawPath(path)
            angle = math.atan2(end.y() - control.y(), end.x() - control.x())
            head = QPolygonF([end, end - QPointF(9 * math.cos(angle - 0.4), 9 * math.sin(angle - 0.4)),
                              end - QPointF(9 * math.cos(angle + 0.4), 9 * math.sin(angle + 0.4))])
            painter.setBrush(text_colour)
            painter.drawPolygon(head)
            label = _days_label(t.rate)
            apex = QPointF(control.x(), (start.y() + 2 * control.y() + end.y()) / 4)
            width_needed = painter.fontMetrics().horizontalAdvance(label) + 10
            rect = QRectF(apex.x() - width_needed / 2, apex.y() - 8, width_needed, 16)
            painter.setPen(Qt.NoPen)
            painter.setBrush(pal.color(self.backgroundRole()))
            painter.drawRoundedRect(rect, 4, 4)
            painter.setPen(text_colour)
            painter.drawText(rect, Qt.AlignCenter, label)
        for i, (name, rect) in enumerate(zip(m.stages, boxes)):
            pen = QPen(QColor(theme.colour("risk_high")) if follow[i] else text_colour, 3.0 if follow[i] else 1.2)
            if i in absorbing:
                pen.setStyle(Qt.DashLine)
            painter.setPen(pen)
            fill = QColor(colours[i])
            fill.setAlpha(70)
            painter.setBrush(fill)
            painter.drawRoundedRect(rect, 8, 8)
            painter.setPen(text_colour)
            painter.drawText(rect.adjusted(4, 2, -4, -2), Qt.AlignCenter | Qt.TextWordWrap, name)
        painter.setPen(text_colour)
        painter.drawText(QRectF(6, height - 20, width - 12, 18), Qt.AlignLeft,
                         "Arrow labels: mean days until that move (1 / rate, covariates at 0). Thick red border: "
                         "follow-up stage. Dashed border: no way out.")
