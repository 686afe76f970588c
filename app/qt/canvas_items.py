"""What the canvas draws over a shot: ball outlines, flight arrow, the plane normal to the flight,
and the separation marks (draggable handles held on the ball outline), with the colours they use.
"""

from __future__ import annotations

import math
import os

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import (
    QGraphicsEllipseItem,
)

from app.review import colours
from app.review.marks import moved_from_proposal
from app.review.text import angle_text
from core.geometry import SIDES, mid_circle, point_at_angle

SIDE_COLOURS = {"upper": colours.UPPER_SIDE, "lower": colours.LOWER_SIDE}
SIDE_LETTERS = {"upper": "U", "lower": "L"}
BACKGROUND = "#262a2f"  # canvas backdrop: a neutral slate, darker than any frame's mid-grey
OVERLAY_LINE = "#f6f2e8"  # ball outline and flight arrow: light, the frames are dark
SHADOW = "#1d1d1f"  # dark rim under the light lines so they also read on light vorticity
HALO = OVERLAY_LINE
VECTOR_ON_PICTURE = "#f3d27a"  # warm straw: bright on dark particle frames
VECTOR_ON_FIELD = colours.INK  # dark on the light middle of the vorticity map
REPLACED_VECTOR = "#e0417a"  # rose: vectors the validation replaced
MASKED_MARK = "#9aa0a8"
PLANE_LINE = "#c9c6bd"  # the plane normal to the flight: a quieter dashed light grey


def mark_circle(result) -> tuple[tuple[float, float], float] | None:
    """Circle the separation marks live on: the ball at mid-exposure (the mean of its circles
    in frames A and B: where the separation was fitted), as (centre px, radius px)."""
    return mid_circle(getattr(result, "ball_a", None), getattr(result, "ball_b", None))


def arrow_segments(
    x_px: np.ndarray, y_px: np.ndarray, dx_px: np.ndarray, dy_px: np.ndarray, head: float = 0.3
) -> tuple[np.ndarray, np.ndarray]:
    """Line segments of arrows (shaft and two head strokes) for one ``connect='pairs'`` item.

    Parameters
    ----------
    x_px, y_px : (K,) ndarray
        Arrow tails.
    dx_px, dy_px : (K,) ndarray
        Arrow vectors (already scaled for display).
    head : float
        Head stroke length as a fraction of the arrow length.

    Returns
    -------
    xs, ys : (6 K,) ndarray
        Consecutive point pairs: shaft, left head stroke, right head stroke.
    """
    tip_x, tip_y = x_px + dx_px, y_px + dy_px
    cos_h, sin_h = math.cos(math.radians(25.0)), math.sin(math.radians(25.0))
    bx, by = -dx_px * head, -dy_px * head
    lx, ly = tip_x + bx * cos_h - by * sin_h, tip_y + bx * sin_h + by * cos_h
    rx, ry = tip_x + bx * cos_h + by * sin_h, tip_y - bx * sin_h + by * cos_h
    xs = np.stack([x_px, tip_x, tip_x, lx, tip_x, rx], axis=1).ravel()
    ys = np.stack([y_px, tip_y, tip_y, ly, tip_y, ry], axis=1).ravel()
    return xs, ys



def pen(colour: str, width: float = 1.5, dash: bool = False, alpha: int = 255):
    qcolour = QColor(colour)
    qcolour.setAlpha(alpha)
    pen = pg.mkPen(qcolour, width=width)
    if dash:
        pen.setStyle(Qt.PenStyle.DashLine)
    return pen


class MarkHandle(pg.TargetItem):
    """A separation mark: a draggable handle held on the ball outline.

    Every position given to it (drag or program) is projected onto the circle along the ray
    from the centre, so the handle can only move along the outline. A right click during a
    drag puts the handle back where the drag started (``sigDragCancelled``).
    """

    sigDragCancelled = Signal(object)

    def __init__(self, side: str) -> None:
        colour = SIDE_COLOURS[side]
        super().__init__(
            size=15,
            symbol="o",
            pen=pen(HALO, 2.5),
            hoverPen=pen(HALO, 3.5),
            brush=QColor(colour),
            hoverBrush=QColor(colour).lighter(150),
            movable=True,
        )
        self.side = side
        self.circle: tuple[tuple[float, float], float] | None = None
        self.setZValue(50)

    def set_circle(self, circle: tuple[tuple[float, float], float] | None) -> None:
        self.circle = circle

    def setPos(self, *args) -> None:
        point = pg.Point(*args)
        circle = getattr(self, "circle", None)
        if circle is not None:
            (cx, cy), r = circle
            dx, dy = point.x() - cx, point.y() - cy
            norm = math.hypot(dx, dy)
            if norm > 0:
                point = pg.Point(cx + r * dx / norm, cy + r * dy / norm)
        super().setPos(point)

    def mouseDragEvent(self, ev) -> None:
        # Follow the cursor itself (no grab offset) so the angle is that of the pointer's ray.
        if not self.movable or ev.button() != Qt.MouseButton.LeftButton:
            return
        ev.accept()
        if ev.isStart():
            self.moving = True
            self._drag_start = pg.Point(self.pos())
        if not self.moving:
            return
        self.setPos(self.mapToView(ev.pos()))
        if ev.isFinish():
            self.moving = False
            self.sigPositionChangeFinished.emit(self)

    def mouseClickEvent(self, ev) -> None:
        if self.moving and ev.button() == Qt.MouseButton.RightButton:
            ev.accept()
            self.moving = False
            self.setPos(self._drag_start)
            self.sigDragCancelled.emit(self)


PROPOSAL_RADIUS = 1.16  # proposal marks sit at this multiple of the ball radius
#: Angle labels start this far out (radii), clear of the proposal mark, and reach outward from
#: there: a label of fixed size on screen never covers a ball drawn small (side by side)
LABEL_RADIUS = 1.3


class Overlay:
    """Ball outlines, flight arrow, normal plane and the separation marks in one view."""

    def __init__(self, view: pg.ViewBox, draggable: bool) -> None:
        self.view = view
        self.circles = {}
        for frame, dash in (("a", False), ("b", True)):
            halo = QGraphicsEllipseItem()
            halo.setPen(pen(SHADOW, 3.6, alpha=130))
            line = QGraphicsEllipseItem()
            line.setPen(pen(OVERLAY_LINE, 1.5, dash=dash))
            self.circles[frame] = (halo, line)
            for item in (halo, line):
                item.setZValue(30)
                view.addItem(item)
        self.flight_halo = pg.PlotDataItem(connect="pairs", pen=pen(SHADOW, 4.6, alpha=130))
        self.flight = pg.PlotDataItem(connect="pairs", pen=pen(OVERLAY_LINE, 2.2))
        self.plane_halo = pg.PlotDataItem(connect="pairs", pen=pen(SHADOW, 3.4, alpha=110))
        self.plane = pg.PlotDataItem(connect="pairs", pen=pen(PLANE_LINE, 1.3, True))
        self.ticks = pg.PlotDataItem(connect="pairs", pen=pen(OVERLAY_LINE, 2.0, alpha=220))
        self.proposals = pg.ScatterPlotItem(
            size=10, symbol="d", pen=pen(OVERLAY_LINE, 1.6), brush=QColor(colours.PROPOSAL_MARK)
        )
        for item in (self.flight_halo, self.flight, self.plane_halo, self.plane, self.ticks):
            item.setZValue(31)
            view.addItem(item)
        self.proposals.setZValue(40)
        view.addItem(self.proposals)
        self.labels = {}
        self.handles = {}
        self.dots = None
        for side in SIDES:
            label = pg.TextItem(
                "", color=HALO, fill=pg.mkBrush(QColor(SIDE_COLOURS[side]).darker(130)),
                anchor=(0.5, 0.5),
            )
            label.setZValue(45)
            view.addItem(label)
            self.labels[side] = label
        if draggable:
            for side in SIDES:
                handle = MarkHandle(side)
                view.addItem(handle)
                self.handles[side] = handle
        else:
            self.dots = pg.ScatterPlotItem(size=12, symbol="o", pen=pen(HALO, 2.0))
            self.dots.setZValue(50)
            view.addItem(self.dots)

    def set_ball(self, result, show: bool) -> None:
        for frame in ("a", "b"):
            ball = getattr(result, f"ball_{frame}", None) if result is not None else None
            visible = bool(show and ball is not None and np.isfinite(ball.radius_px))
            for item in self.circles[frame]:
                item.setVisible(visible)
                if visible:
                    (cx, cy), r = ball.center_px, ball.radius_px
                    item.setRect(QRectF(cx - r, cy - r, 2 * r, 2 * r))

    def set_flight(self, result, show: bool) -> None:
        circle = mark_circle(result) if result is not None else None
        flight = getattr(result, "flight", None)
        if not show or circle is None or flight is None:
            for item in (self.flight_halo, self.flight, self.plane_halo, self.plane):
                item.setData([], [])
            return
        (cx, cy), r = circle
        fx, fy = math.cos(math.radians(flight.direction_deg)), -math.sin(
            math.radians(flight.direction_deg)
        )
        start, end = 0.25 * r, 1.75 * r
        tail = np.array([cx + fx * start, cy + fy * start])
        vec = np.array([fx, fy]) * (end - start)
        xs, ys = arrow_segments(np.array([tail[0]]), np.array([tail[1]]),
                                np.array([vec[0]]), np.array([vec[1]]), head=0.22)
        self.flight_halo.setData(xs, ys)
        self.flight.setData(xs, ys)
        nx, ny = -fy, fx
        px = np.array([cx - 1.4 * r * nx, cx + 1.4 * r * nx])
        py = np.array([cy - 1.4 * r * ny, cy + 1.4 * r * ny])
        self.plane_halo.setData(px, py)
        self.plane.setData(px, py)

    def set_marks(self, result, angles: dict, proposals: dict, show: bool, editable: bool) -> None:
        circle = mark_circle(result) if result is not None else None
        flight = getattr(result, "flight", None)
        usable = show and circle is not None and flight is not None
        tick_x, tick_y, dots, dot_brushes = [], [], [], []
        prop_points = []
        for side in SIDES:
            angle = angles.get(side)
            label = self.labels[side]
            handle = self.handles.get(side)
            if not usable:
                label.setVisible(False)
                if handle is not None:
                    handle.setVisible(False)
                continue
            (cx, cy), r = circle
            shown = 0.0 if angle is None else angle
            x, y = point_at_angle((cx, cy), r, flight.direction_deg, side, shown)
            ux, uy = (x - cx) / r, (y - cy) / r
            tick_x += [cx + 0.82 * r * ux, cx + 1.12 * r * ux]
            tick_y += [cy + 0.82 * r * uy, cy + 1.12 * r * uy]
            label.setText(f"{SIDE_LETTERS[side]} {angle_text(angle)}")
            # the corner or edge nearest the ball at the anchor point (y is down on screen)
            label.setAnchor((0.5 - 0.5 * ux, 0.5 - 0.5 * uy))
            label.setPos(cx + LABEL_RADIUS * r * ux, cy + LABEL_RADIUS * r * uy)
            label.setVisible(True)
            if handle is not None:
                handle.set_circle(circle)
                handle.setVisible(True)
                handle.movable = editable
                handle.setOpacity(1.0 if angle is not None else 0.55)
                if not handle.moving:
                    handle.setPos(x, y)
            else:
                dots.append((x, y))
                dot_brushes.append(pg.mkBrush(SIDE_COLOURS[side]))
            proposal = proposals.get(side)
            if proposal is not None and (angle is None or moved_from_proposal(angle, proposal)):
                # just outside the outline, so the handle never hides the machine's proposal
                prop_points.append(
                    point_at_angle((cx, cy), PROPOSAL_RADIUS * r, flight.direction_deg, side,
                                   proposal)
                )
        self.ticks.setData(tick_x, tick_y)
        self.proposals.setData(pos=np.array(prop_points, dtype=float).reshape(-1, 2))
        if self.dots is not None:
            self.dots.setData(pos=np.array(dots, dtype=float).reshape(-1, 2), brush=dot_brushes)

