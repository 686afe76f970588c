"""Another analyst's marks on the canvas: the last imported review's angles of the current shot
as hollow squares on the outline (in both views), red where the two analysts differ by more
than their combined uncertainty (``core.agreement``), with a legend entry naming the review.

``install_analyst_marks(window)`` adds the items to the window's canvas and follows its model;
the canvas itself is not changed.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QTimer

from app.qt.canvas import legend_html
from app.qt.canvas_items import mark_circle, pen
from app.review import colours
from app.review.text import angle_text
from core.agreement import compare_reviews, latest_layer
from core.geometry import SIDES, point_at_angle

#: The other analyst's marks sit just inside the outline, where the analyst's own (on it) and
#: the proposal (outside) never hide them.
RADIUS = 0.9


class AnalystMarks:
    """The other analyst's marks of the current shot in the canvas's views."""

    def __init__(self, window) -> None:
        self.window = window
        self.items = []
        for view in (window.canvas.view, window.canvas.field_view):
            item = pg.ScatterPlotItem(size=13, symbol="s", brush=None)
            item.setZValue(48)
            view.addItem(item)
            self.items.append(item)
        self.layer_name = ""
        self.text = ""  # the marks in words (tooltips, tests)
        self._timer = QTimer(window)
        self._timer.setSingleShot(True)
        self._timer.setInterval(0)  # after the window has drawn the shot
        self._timer.timeout.connect(self.update)

    def update_soon(self, *_args) -> None:
        self._timer.start()

    def update(self) -> None:
        model, canvas = self.window.model, self.window.canvas
        layer = latest_layer(model.review_layers()) if model.session is not None else None
        shot = canvas.shot
        self.layer_name = "" if layer is None else layer.name
        points, pens, words = [], [], []
        if layer is not None and shot is not None and shot.shot_id in layer.picks:
            theirs = layer.picks[shot.shot_id]
            result = shot.result
            circle = mark_circle(result) if result is not None else None
            flight = getattr(result, "flight", None)
            record = model.record(shot.shot_id)
            flagged = compare_reviews([record], layer).flagged(shot.shot_id)
            for side in SIDES:
                angle = theirs.final_deg(side)
                if angle is None or circle is None or flight is None:
                    continue
                centre, radius = circle
                points.append(point_at_angle(centre, RADIUS * radius, flight.direction_deg,
                                             side, angle))
                colour = colours.DISAGREEMENT if side in flagged else colours.OTHER_ANALYST
                pens.append(pen(colour, 2.6))
                words.append(f"{side} {angle_text(angle)}"
                             + (" (beyond the combined uncertainty)" if side in flagged else ""))
            if not words:
                words.append(str(theirs.status))
        self.text = f"{layer.name}: {', '.join(words)}" if words else ""
        show = canvas.marks_box.isChecked()
        pos = np.array(points, dtype=float).reshape(-1, 2)
        for item in self.items:
            item.setData(pos=pos if show else np.empty((0, 2)), pen=pens if show else None)
            item.setToolTip(self.text)
        self._legend()

    def _legend(self) -> None:
        legend = legend_html()
        if self.layer_name:
            square = f"<span style='color:{colours.OTHER_ANALYST}'>□</span>"
            legend += f" &nbsp;{square} {self.layer_name}"
        self.window.canvas.legend.setText(legend)


def install_analyst_marks(window) -> AnalystMarks:
    marks = AnalystMarks(window)
    model = window.model
    for signal in (model.current_changed, model.record_changed, model.conditions_changed,
                   model.session_changed):
        signal.connect(marks.update_soon)
    window.canvas.marks_box.toggled.connect(marks.update_soon)
    window.analyst_marks = marks
    return marks

