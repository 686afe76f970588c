"""What the separation pick rests on, drawn over a shot: the fine field near the ball (vectors
and vorticity, in the ball frame as measured), each side's fitted shear layer (its dividing
line from the separation point rearward and its half-speed line) with the band of the image it
was fitted to, the uncertainty of each proposal as a wedge at the outline, and a reference
vector with its speed. A part of each ``ShotPane`` (``app.qt.canvas_pane``).

Everything ball-frame is drawn about the ball at mid-exposure (the mean of the circles in
frames A and B), where the fine field and the fit were made.
"""

from __future__ import annotations

import math
import os

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QColor, QPainterPath, QPolygonF
from PySide6.QtWidgets import QGraphicsPathItem, QGraphicsPolygonItem

from app.qt.canvas_items import OVERLAY_LINE, SHADOW, SIDE_COLOURS, mark_circle, pen
from app.qt.canvas_pictures import smooth_upsample, vorticity_image
from app.review.marks import fitted_layer_lines
from app.review.scales import round_length
from core.geometry import SIDES, flight_unit, side_normal

FINE_UPSAMPLE = 4  # display only, as the main field's vorticity
WEDGE_RADII = (1.0, 1.14)  # the uncertainty wedge spans these multiples of the ball radius
BAND_LINE = "#d8d4ca"  # the fitted band's outline: a quiet light grey, dotted
FINE_BOX_LINE = "#8fd3c9"  # the fine field's extent: a pale teal, dotted
REFERENCE_SCREEN_PX = 60.0  # the reference vector is at most this long on screen


class EvidenceItems:
    """The evidence layers of one view (fine field, fitted layers and bands, uncertainty)."""

    def __init__(self, view: pg.ViewBox) -> None:
        self.fine_vorticity = pg.ImageItem()
        self.fine_vorticity.setZValue(11)  # over the main field's vorticity (10)
        self.fine_box = Polyline(_dotted(FINE_BOX_LINE, 1.0))
        self.fine_box.setZValue(18)
        for item in (self.fine_vorticity, self.fine_box):
            view.addItem(item)
        self.curves: dict[str, dict[str, Polyline]] = {}
        self.wedges: dict[str, QGraphicsPathItem] = {}
        for side in SIDES:
            colour = SIDE_COLOURS[side]
            light = QColor(colour).lighter(175).name()
            items = {
                "band": Polyline(_dotted(BAND_LINE, 1.4)),
                "halo": Polyline(pen(SHADOW, 4.2, alpha=150)),
                "dividing": Polyline(pen(light, 2.2)),
                "centre": Polyline(pen(light, 1.2, dash=True)),
            }
            for z, item in enumerate(items.values()):
                item.setZValue(32 + 0.1 * z)
                view.addItem(item)
            self.curves[side] = items
            wedge = QGraphicsPathItem()
            fill = QColor(colour).lighter(150)
            fill.setAlpha(165)
            wedge.setBrush(QBrush(fill))
            wedge.setPen(pen(OVERLAY_LINE, 1.2, alpha=230))
            wedge.setZValue(35)
            view.addItem(wedge)
            self.wedges[side] = wedge

    # -- fine field --------------------------------------------------------------------------
    def show_fine_vorticity(self, result, limit: float, see_through: bool) -> bool:
        """The fine field's vorticity over the main field's (None: hidden); True when drawn."""
        fine = getattr(result, "fine_field", None)
        w = result.fine_vorticity() if fine is not None else None
        shown = w is not None and bool(np.isfinite(w).any())
        self.fine_vorticity.setVisible(shown)
        if not shown:
            return False
        sp = float(fine.spacing_px)
        rows, cols = w.shape
        smooth = smooth_upsample(np.asarray(w, dtype=np.float32), FINE_UPSAMPLE)
        self.fine_vorticity.setImage(vorticity_image(smooth, limit, see_through),
                                     levels=(0, 255), autoLevels=False)
        x0, y0 = float(fine.x_px[0, 0]), float(fine.y_px[0, 0])
        self.fine_vorticity.setRect(QRectF(x0 - sp / 2, y0 - sp / 2, cols * sp, rows * sp))
        return True

    def show_fine_box(self, fine) -> None:
        """A dotted outline of where the fine field was measured (None: none)."""
        if fine is None:
            self.fine_box.set_points(None)
            return
        x0, x1, y0, y1 = fine_extent(fine)
        self.fine_box.set_points(np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]))

    # -- fitted layers -----------------------------------------------------------------------
    def show_layers(self, result, show: bool) -> None:
        """Each side's fitted dividing line, half-speed line and band (None: hidden)."""
        for side in SIDES:
            curves = fitted_curves(result, side) if show else None
            for name, item in self.curves[side].items():
                item.set_points(None if curves is None else
                                curves["dividing" if name == "halo" else name])

    # -- uncertainty -------------------------------------------------------------------------
    def show_uncertainty(self, result, proposals: dict, show: bool) -> None:
        """A wedge at the outline spanning each proposal's uncertainty (side -> angle)."""
        circle = mark_circle(result) if result is not None else None
        flight = getattr(result, "flight", None)
        for side in SIDES:
            wedge = self.wedges[side]
            spread = _uncertainty(result, side)
            angle = proposals.get(side)
            if not show or circle is None or flight is None or angle is None or not spread:
                wedge.setVisible(False)
                continue
            wedge.setPath(wedge_path(circle, flight.direction_deg, side, angle, spread))
            wedge.setVisible(True)


class Polyline(QGraphicsPathItem):
    """A line through image points (lighter to update than a plot item: one path)."""

    def __init__(self, line_pen) -> None:
        super().__init__()
        self.setPen(line_pen)
        self.points = np.zeros((0, 2))

    def set_points(self, points: np.ndarray | None) -> None:
        """The line's points, ``(N, 2)`` image px (None: no line)."""
        self.points = np.zeros((0, 2)) if points is None else np.asarray(points, dtype=float)
        if len(self.points) < 2:
            self.setPath(QPainterPath())
            return
        self.setPath(pg.arrayToQPath(self.points[:, 0], self.points[:, 1], connect="all"))


class ReferenceVector(pg.ScaleBar):
    """An arrow of a round speed at the vectors' scale, bottom left of the view, labelled; its
    speed is a round one (1-2-5) at or below the field's large vectors, so the arrow looks like
    them, and shorter when zoomed in so far that it would not fit (as the scale bar's length)."""

    def __init__(self) -> None:
        super().__init__(size=1.0, width=2, brush=OVERLAY_LINE, pen=pen(SHADOW, 0.8),
                         offset=(18, -18))
        self.text.setColor(QColor(OVERLAY_LINE))
        self.text.fill = pg.mkBrush(QColor(38, 42, 47, 170))
        self.head = QGraphicsPolygonItem(self)
        self.head.setBrush(QBrush(QColor(OVERLAY_LINE)))
        self.head.setPen(pen(SHADOW, 0.8))
        self.px_per_unit: float | None = None  # image px of arrow per m/s (or per px)
        self.unit = "m/s"
        self.typical: float | None = None  # a large (95th percentile) drawn speed, in ``unit``
        self.speed: float | None = None
        self.setVisible(False)

    def set_reference(self, px_per_unit: float | None, unit: str = "m/s",
                      typical: float | None = None) -> None:
        """The vectors' scale, image px of arrow per ``unit`` of speed (None: hidden), and a
        large speed of the drawn field (``typical``, in ``unit``; None: the zoom decides)."""
        shown = bool(px_per_unit) and math.isfinite(px_per_unit) and px_per_unit > 0
        self.px_per_unit, self.unit = (px_per_unit if shown else None), unit
        self.typical = typical if typical and math.isfinite(typical) and typical > 0 else None
        self.setVisible(shown)
        self.updateBar()

    def updateBar(self) -> None:
        view = self.parentItem()
        if view is None or not self.px_per_unit:
            return
        p1 = view.mapFromViewToItem(self, QPointF(0, 0))
        p2 = view.mapFromViewToItem(self, QPointF(self.px_per_unit, 0))
        per_unit = (p2 - p1).x()  # screen px per unit of speed
        if not per_unit > 0:
            return
        fits = REFERENCE_SCREEN_PX / per_unit
        self.speed = round_length(min(fits, self.typical) if self.typical else fits)
        self.size = self.speed * self.px_per_unit
        w = self.speed * per_unit
        self.bar.setRect(QRectF(0, 0, w, self._width))
        self.head.setPolygon(QPolygonF([QPointF(w + 7, 1), QPointF(w - 1, -3.5),
                                        QPointF(w - 1, 5.5)]))
        self.text.setText(f"{self.speed:g} {self.unit}")
        self.text.setPos(w / 2.0, 0)


def _dotted(colour: str, width: float):
    line = pen(colour, width, alpha=235)
    line.setStyle(Qt.PenStyle.DotLine)
    return line


def _uncertainty(result, side: str) -> float | None:
    separation = getattr(result, "separation", None)
    if separation is None:
        return None
    value = getattr(separation, side).uncertainty_deg
    return value if value is not None and math.isfinite(value) and value > 0 else None


def fine_extent(fine) -> tuple[float, float, float, float]:
    """(x0, x1, y0, y1) image px covered by the fine field's windows."""
    half = float(fine.spacing_px) / 2
    return (float(np.nanmin(fine.x_px)) - half, float(np.nanmax(fine.x_px)) + half,
            float(np.nanmin(fine.y_px)) - half, float(np.nanmax(fine.y_px)) + half)


def fitted_curves(result, side: str) -> dict[str, np.ndarray] | None:
    """The lines of a side's fitted layer about the mid-exposure circle (None without one)."""
    separation = getattr(result, "separation", None)
    flight = getattr(result, "flight", None)
    if separation is None or flight is None:
        return None
    return fitted_layer_lines(mark_circle(result), flight.direction_deg, side,
                              getattr(separation, side).layer)


def wedge_path(circle, direction_deg: float, side: str, angle_deg: float,
               spread_deg: float) -> QPainterPath:
    """The annular sector from ``angle - spread`` to ``angle + spread`` at the outline."""
    (cx, cy), r = circle
    angles = np.linspace(angle_deg - spread_deg, angle_deg + spread_deg, 41)
    ux, uy = outline_directions(direction_deg, side, angles)
    inner, outer = WEDGE_RADII[0] * r, WEDGE_RADII[1] * r
    xs = np.concatenate([cx + inner * ux, cx + outer * ux[::-1], [cx + inner * ux[0]]])
    ys = np.concatenate([cy + inner * uy, cy + outer * uy[::-1], [cy + inner * uy[0]]])
    path = pg.arrayToQPath(xs, ys, connect="all")
    path.closeSubpath()
    return path


def outline_directions(direction_deg: float, side: str, angles_deg: np.ndarray):
    """Unit vectors (x, y arrays) from the centre to the outline at separation angles on
    ``side`` (``core.geometry.point_at_angle`` for many angles at once)."""
    fx, fy = flight_unit(direction_deg)
    nx, ny = side_normal(direction_deg, side)
    a = np.radians(angles_deg)
    return np.cos(a) * nx - np.sin(a) * fx, np.cos(a) * ny - np.sin(a) * fy

