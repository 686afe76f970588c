"""The shot canvas: frames, vectors, vorticity and ball overlays, with draggable separation marks.

Layers the analyst toggles: the picture (frame A, frame B, or a flicker between them), vectors
(valid, replaced and masked drawn differently, with a stride), vorticity (our diverging map,
symmetric limits, a colour bar and an adjustable range), the fitted ball outline in both frames,
the flight arrow with the plane normal to it through the ball centre, and the two separation
marks. With "side by side" the field layers move to a second view linked to the first.

The views use image coordinates: x = column to the right, y = row downward (``invertY``), so
the picture looks like the camera image. Separation marks are handles held on the ball outline;
their angles follow core.geometry.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QColor
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QGraphicsEllipseItem,
    QHBoxLayout,
    QLabel,
    QMenu,
    QSizePolicy,
    QSpinBox,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from app import colours
from core.geometry import SIDES, angle_of_point, point_at_angle

# Arrays are (row, column) = (y, x) everywhere in wakeline; run_window sets this too.
pg.setConfigOptions(imageAxisOrder="row-major")

PICTURES = ("frame A", "frame B", "flicker A/B", "no picture")
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
FLICKER_MS = 350
VORTICITY_UPSAMPLE = 4  # display only: bilinear between grid nodes instead of flat blocks
HOVER_HINT = "Point at the picture for flow values; drag a round mark along the ball outline."
DEFAULT_LAYERS = {
    "picture": "frame A",
    "vectors": True,
    "stride": 1,
    "vorticity": True,
    "vorticity_auto": True,
    "vorticity_limit_1_s": 1000.0,
    "ball": True,
    "flight": True,
    "marks": True,
    "side_by_side": False,
}


@dataclass
class CanvasShot:
    """What the canvas draws for one shot (the window assembles it from the session)."""

    shot_id: str
    frame_a: np.ndarray | None = None  # (H, W)
    frame_b: np.ndarray | None = None  # (H, W)
    result: object | None = None  # core.shot.ShotResult
    proposed_deg: dict = field(default_factory=lambda: {"upper": None, "lower": None})
    final_deg: dict = field(default_factory=lambda: {"upper": None, "lower": None})
    message: str = ""  # shown over the canvas: failed, not processed, frames missing
    editable: bool = True


def mark_circle(result) -> tuple[tuple[float, float], float] | None:
    """Circle the separation marks live on: the ball fitted in frame A (centre px, radius px)."""
    ball = getattr(result, "ball_a", None)
    if ball is None or not np.isfinite(ball.radius_px) or ball.radius_px <= 0:
        return None
    return (float(ball.center_px[0]), float(ball.center_px[1])), float(ball.radius_px)


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


def vorticity_image(vorticity_1_s: np.ndarray, limit_1_s: float, see_through: bool) -> np.ndarray:
    """RGBA picture of the vorticity on our diverging map, symmetric about zero.

    With ``see_through`` (drawn over the frame) the opacity grows with ``|w| / limit`` so the
    particles stay visible where the air is not turning, and the vortical regions stand out.

    Returns
    -------
    (M, N, 4) ndarray of uint8
    """
    rgba = colours.vorticity_rgb(vorticity_1_s, limit_1_s)
    if see_through:
        w = np.abs(np.asarray(vorticity_1_s, dtype=float))
        strength = np.clip(np.nan_to_num(w / max(limit_1_s, 1e-12)) * 1.4, 0.0, 1.0)
        alpha = np.rint(235 * np.sqrt(strength)).astype(np.uint8)
        rgba[..., 3] = np.where(np.isfinite(vorticity_1_s), alpha, 0)
    return rgba


def smooth_upsample(values: np.ndarray, factor: int) -> np.ndarray:
    """Bilinear upsampling of a grid with holes (NaN), for display only.

    The output covers the same extent as the input cells (each cell becomes ``factor`` x
    ``factor`` pixels); holes stay holes where less than half the neighbouring weight is real.

    Parameters
    ----------
    values : (M, N) ndarray
    factor : int

    Returns
    -------
    (M * factor, N * factor) ndarray of float32
    """
    from scipy.ndimage import zoom

    if factor <= 1:
        return np.asarray(values, dtype=np.float32)
    finite = np.isfinite(values)
    filled = np.where(finite, values, 0.0)
    kw = {"zoom": factor, "order": 1, "mode": "nearest", "grid_mode": True}
    weight = zoom(finite.astype(np.float32), **kw)
    total = zoom(filled.astype(np.float32), **kw)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = total / weight
    out[weight < 0.5] = np.nan
    return out.astype(np.float32)


def vector_scale(dx_px: np.ndarray, dy_px: np.ndarray, cell_px: float) -> float:
    """Display factor so that a large (95th percentile) vector spans ~0.9 of one drawn cell."""
    mag = np.hypot(dx_px, dy_px)
    mag = mag[np.isfinite(mag)]
    if mag.size == 0:
        return 1.0
    big = float(np.percentile(mag, 95))
    return 0.9 * cell_px / big if big > 0 else 1.0


def _pen(colour: str, width: float = 1.5, dash: bool = False, alpha: int = 255):
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
            pen=_pen(HALO, 2.5),
            hoverPen=_pen(HALO, 3.5),
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
LABEL_RADIUS = 1.55  # angle labels further out, clear of the proposal mark


class _Overlay:
    """Ball outlines, flight arrow, normal plane and the separation marks in one view."""

    def __init__(self, view: pg.ViewBox, draggable: bool) -> None:
        self.view = view
        self.circles = {}
        for frame, dash in (("a", False), ("b", True)):
            halo = QGraphicsEllipseItem()
            halo.setPen(_pen(SHADOW, 3.6, alpha=130))
            line = QGraphicsEllipseItem()
            line.setPen(_pen(OVERLAY_LINE, 1.5, dash=dash))
            self.circles[frame] = (halo, line)
            for item in (halo, line):
                item.setZValue(30)
                view.addItem(item)
        self.flight_halo = pg.PlotDataItem(connect="pairs", pen=_pen(SHADOW, 4.6, alpha=130))
        self.flight = pg.PlotDataItem(connect="pairs", pen=_pen(OVERLAY_LINE, 2.2))
        self.plane_halo = pg.PlotDataItem(connect="pairs", pen=_pen(SHADOW, 3.4, alpha=110))
        self.plane = pg.PlotDataItem(connect="pairs", pen=_pen(PLANE_LINE, 1.3, True))
        self.ticks = pg.PlotDataItem(connect="pairs", pen=_pen(OVERLAY_LINE, 2.0, alpha=220))
        self.proposals = pg.ScatterPlotItem(
            size=10, symbol="d", pen=_pen(OVERLAY_LINE, 1.6), brush=QColor(colours.PROPOSAL_MARK)
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
            self.dots = pg.ScatterPlotItem(size=12, symbol="o", pen=_pen(HALO, 2.0))
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
            label.setText(f"{SIDE_LETTERS[side]} {'—' if angle is None else f'{angle:+.1f}°'}")
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
            if proposal is not None and (angle is None or abs(proposal - angle) > 0.05):
                # just outside the outline, so the handle never hides the machine's proposal
                prop_points.append(
                    point_at_angle((cx, cy), PROPOSAL_RADIUS * r, flight.direction_deg, side,
                                   proposal)
                )
        self.ticks.setData(tick_x, tick_y)
        self.proposals.setData(pos=np.array(prop_points, dtype=float).reshape(-1, 2))
        if self.dots is not None:
            self.dots.setData(pos=np.array(dots, dtype=float).reshape(-1, 2), brush=dot_brushes)


class ShotCanvas(QWidget):
    """Centre panel: the shot's picture and fields with the analyst's marks.

    Signals
    -------
    mark_moved(side, angle_deg)
        While a mark is dragged (live).
    mark_released(side, angle_deg)
        When a drag ends: the window records an adjusted pick.
    mark_cancelled(side)
        A right click ended the drag; the mark went back and nothing is recorded.
    hover_text(text)
        Position and field values under the cursor.
    """

    mark_moved = Signal(str, float)
    mark_released = Signal(str, float)
    mark_cancelled = Signal(str)
    hover_text = Signal(str)
    layers_changed = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._shot: CanvasShot | None = None
        self._angles = {"upper": None, "lower": None}
        self._levels = (0.0, 1.0)
        self._flicker_b = False
        self._building = False
        self._vorticity_unit = "1/s"
        self._build_controls()
        self._build_views()
        self._build_layout()
        self._flicker = QTimer(self)
        self._flicker.setInterval(FLICKER_MS)
        self._flicker.timeout.connect(self._on_flicker)
        self._hover_proxy = pg.SignalProxy(
            self.graphics.scene().sigMouseMoved, rateLimit=60, slot=self._on_mouse_moved
        )
        self.restore_layers(DEFAULT_LAYERS)

    # -- construction ------------------------------------------------------------------------
    def _build_controls(self) -> None:
        self.picture_box = QComboBox(self)
        self.picture_box.addItems(PICTURES)
        self.picture_box.setToolTip("picture under the overlays (F cycles)")
        self.vectors_box = QCheckBox("Vectors", self)
        self.stride_box = QSpinBox(self)
        self.stride_box.setRange(1, 16)
        self.stride_box.setPrefix("every ")
        self.stride_box.setToolTip("draw every n-th vector in each direction")
        self.vorticity_box = QCheckBox("Vorticity", self)
        self.limit_box = QDoubleSpinBox(self)
        self.limit_box.setDecimals(6)  # before the range, so small limits are not rounded away
        self.limit_box.setRange(1e-6, 1e9)
        self.limit_box.setDecimals(0)
        self.limit_box.setPrefix("± ")
        self.limit_box.setSuffix(" 1/s")
        self.limit_box.setToolTip("vorticity at the ends of the colour map (symmetric about 0)")
        self.auto_box = QCheckBox("auto", self)
        self.auto_box.setToolTip("set the vorticity range from each shot (98th percentile)")
        # the overlays sit in one drop-down so the bar fits a laptop screen
        self.overlay_button = QToolButton(self)
        self.overlay_button.setText("Overlays")
        self.overlay_button.setToolTip("ball outlines, flight arrow with the normal plane, "
                                       "separation marks")
        self.overlay_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        overlay_menu = QMenu(self.overlay_button)
        self.ball_box = _check_action("Ball outline in frames A and B", overlay_menu)
        self.flight_box = _check_action("Flight arrow and normal plane", overlay_menu)
        self.marks_box = _check_action("Separation marks", overlay_menu)
        self.overlay_button.setMenu(overlay_menu)
        self.side_box = QCheckBox("Side by side", self)
        self.side_box.setToolTip("frames on the left, fields on the right, zoom and pan linked")
        self.picture_box.currentTextChanged.connect(self._on_picture)
        for box in (self.vectors_box, self.vorticity_box, self.ball_box, self.flight_box,
                    self.marks_box):
            box.toggled.connect(self._on_layer_toggled)
        self.stride_box.valueChanged.connect(self._on_layer_toggled)
        # clicking a layer switch must not take the keyboard from the shot list (Up/Down)
        for widget in (self.picture_box, self.vectors_box, self.vorticity_box, self.auto_box,
                       self.overlay_button, self.side_box):
            widget.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.stride_box.setMaximumWidth(80)
        self.limit_box.setMaximumWidth(120)
        self.limit_box.valueChanged.connect(self._on_limit)
        self.auto_box.toggled.connect(self._on_auto)
        self.side_box.toggled.connect(self._on_side_by_side)

    def _build_views(self) -> None:
        self.graphics = pg.GraphicsLayoutWidget(self)
        self.graphics.setBackground(BACKGROUND)
        self.graphics.setFocusPolicy(Qt.FocusPolicy.NoFocus)  # keys stay with the shot list
        self.graphics.ci.setContentsMargins(2, 2, 2, 2)
        self.view = pg.ViewBox(lockAspect=True, invertY=True, enableMenu=False)
        self.field_view = pg.ViewBox(lockAspect=True, invertY=True, enableMenu=False)
        self.field_view.setXLink(self.view)
        self.field_view.setYLink(self.view)
        self.graphics.addItem(self.view, row=0, col=0)
        self.picture = pg.ImageItem(autoDownsample=True)
        self.picture.setZValue(0)
        self.view.addItem(self.picture)
        self.vorticity = pg.ImageItem()
        self.vorticity.setZValue(10)
        self.vectors = pg.PlotDataItem(connect="pairs", pen=_pen(VECTOR_ON_PICTURE, 1.1))
        self.replaced = pg.PlotDataItem(connect="pairs", pen=_pen(REPLACED_VECTOR, 1.4))
        masked_colour = QColor(MASKED_MARK)
        masked_colour.setAlpha(140)
        self.masked = pg.ScatterPlotItem(size=2.5, symbol="s", pen=None,
                                         brush=pg.mkBrush(masked_colour))
        for item, z in ((self.vectors, 20), (self.replaced, 21), (self.masked, 19)):
            item.setZValue(z)
        self._field_items = (self.vorticity, self.vectors, self.replaced, self.masked)
        self._field_home = self.view
        for item in self._field_items:
            self.view.addItem(item)
        cmap = pg.ColorMap(
            [p for p, _ in colours.VORTICITY_STOPS], [c for _, c in colours.VORTICITY_STOPS]
        )
        self.colour_bar = pg.ColorBarItem(
            values=(-1.0, 1.0), colorMap=cmap, interactive=False, colorMapMenu=False, width=14,
        )
        self.colour_bar.setTitle("ω 1/s", color="#e6e2d8", size="9pt")
        self.colour_bar.setToolTip("vorticity, 1/s; positive = counter-clockwise on screen")
        for name in ("left", "top", "bottom"):
            self.colour_bar.hideAxis(name)  # one labelled axis: less to paint on every step
        axis = self.colour_bar.getAxis("right")
        axis.setPen(_pen("#c9c6bd", 1.0))
        axis.setTextPen(_pen("#e6e2d8", 1.0))
        self.graphics.addItem(self.colour_bar, row=0, col=2)
        self.overlay = _Overlay(self.view, draggable=True)
        self.field_overlay = _Overlay(self.field_view, draggable=False)
        for handle in self.overlay.handles.values():
            handle.sigPositionChanged.connect(self._on_handle_moved)
            handle.sigPositionChangeFinished.connect(self._on_handle_released)
            handle.sigDragCancelled.connect(self._on_handle_cancelled)
        self.message = QLabel(self.graphics)
        self.message.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.message.setWordWrap(True)
        self.message.setStyleSheet(
            "QLabel { background: rgba(246, 242, 232, 230); color: #1d1d1f; border-radius: 6px;"
            " padding: 10px 14px; font-size: 13px; }"
        )
        self.message.hide()

    def _build_layout(self) -> None:
        bar = QHBoxLayout()
        bar.setContentsMargins(4, 2, 4, 2)
        bar.setSpacing(8)
        bar.addWidget(self.picture_box)
        for widget in (self.vectors_box, self.stride_box, self.vorticity_box, self.limit_box,
                       self.auto_box, self.overlay_button, self.side_box):
            bar.addWidget(widget)
        bar.addStretch(1)
        self.hover_label = QLabel(HOVER_HINT, self)
        self.hover_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.hover_label.setStyleSheet("QLabel { font-family: monospace; padding: 2px 6px; }")
        # long readings must never widen the panel (the view would re-range under the cursor)
        self.hover_label.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Fixed)
        box = QVBoxLayout(self)
        box.setContentsMargins(0, 0, 0, 0)
        box.setSpacing(2)
        box.addLayout(bar)
        box.addWidget(self.graphics, 1)
        bottom = QHBoxLayout()
        bottom.setContentsMargins(0, 0, 4, 0)
        bottom.addWidget(self.hover_label, 1)
        self.legend = QLabel(legend_html(), self)
        self.legend.setToolTip("valid vectors, vectors the validation replaced, windows with no "
                               "vector (mostly the ball), and the machine's proposal where the "
                               "analyst moved a mark")
        bottom.addWidget(self.legend, 0)
        box.addLayout(bottom)

    # -- layer state (kept in QSettings by the window) ---------------------------------------
    def layer_state(self) -> dict:
        return {
            "picture": self.picture_box.currentText(),
            "vectors": self.vectors_box.isChecked(),
            "stride": self.stride_box.value(),
            "vorticity": self.vorticity_box.isChecked(),
            "vorticity_auto": self.auto_box.isChecked(),
            "vorticity_limit_1_s": self.limit_box.value(),
            "ball": self.ball_box.isChecked(),
            "flight": self.flight_box.isChecked(),
            "marks": self.marks_box.isChecked(),
            "side_by_side": self.side_box.isChecked(),
        }

    def restore_layers(self, state: dict) -> None:
        """Set the layer controls from a (possibly partial or stale) saved state."""
        merged = {**DEFAULT_LAYERS, **{k: v for k, v in state.items() if k in DEFAULT_LAYERS}}
        self._building = True
        try:
            picture = merged["picture"] if merged["picture"] in PICTURES else "frame A"
            self.picture_box.setCurrentText(picture)
            self.vectors_box.setChecked(_as_bool(merged["vectors"]))
            self.stride_box.setValue(int(merged["stride"]))
            self.vorticity_box.setChecked(_as_bool(merged["vorticity"]))
            self.auto_box.setChecked(_as_bool(merged["vorticity_auto"]))
            self._set_limit(float(merged["vorticity_limit_1_s"]))
            self.ball_box.setChecked(_as_bool(merged["ball"]))
            self.flight_box.setChecked(_as_bool(merged["flight"]))
            self.marks_box.setChecked(_as_bool(merged["marks"]))
            self.side_box.setChecked(_as_bool(merged["side_by_side"]))
        finally:
            self._building = False
        self._apply_side_by_side(self.side_box.isChecked())
        self._redraw_all()

    # -- showing a shot ----------------------------------------------------------------------
    @property
    def shot(self) -> CanvasShot | None:
        return self._shot

    def show_shot(self, shot: CanvasShot | None) -> None:
        """Draw a shot (None: empty canvas). Keeps the zoom when the frame size is unchanged."""
        old = self._shot
        self._shot = shot
        self._angles = self._initial_angles(shot)
        self._levels = _picture_levels(shot)
        if shot is not None and self.auto_box.isChecked():
            self._set_auto_limit(shot.result)
        self._redraw_all()
        if shot is not None and not _same_extent(old, shot):
            self.view.autoRange(padding=0.02)

    def update_marks(self, proposed: dict, final: dict, editable: bool = True) -> None:
        """Move the marks after an edit without redrawing the picture or fields."""
        if self._shot is None:
            return
        self._shot.proposed_deg = dict(proposed)
        self._shot.final_deg = dict(final)
        self._shot.editable = editable
        self._angles = self._initial_angles(self._shot)
        self._draw_marks()

    def mark_angle(self, side: str) -> float | None:
        """Angle (deg) the mark of ``side`` shows: final value, else the proposal."""
        return self._angles.get(side)

    def handle(self, side: str) -> MarkHandle:
        return self.overlay.handles[side]

    @staticmethod
    def _initial_angles(shot: CanvasShot | None) -> dict:
        if shot is None:
            return {"upper": None, "lower": None}
        return {
            side: shot.final_deg.get(side)
            if shot.final_deg.get(side) is not None
            else shot.proposed_deg.get(side)
            for side in SIDES
        }

    def _redraw_all(self) -> None:
        if self._building:
            return
        self._draw_picture()
        self._draw_fields()
        self._draw_overlays()
        self._show_message()

    def _show_message(self) -> None:
        text = self._shot.message if self._shot is not None else "Open a session to review shots."
        self.message.setText(text)
        self.message.setVisible(bool(text))
        self._place_message()

    def _place_message(self) -> None:
        width = min(520, max(200, self.graphics.width() - 40))
        self.message.setFixedWidth(width)
        self.message.adjustSize()
        self.message.move((self.graphics.width() - width) // 2, 24)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._place_message()

    # -- picture -----------------------------------------------------------------------------
    def _draw_picture(self) -> None:
        mode = self.picture_box.currentText()
        shot = self._shot
        frame = None
        if shot is not None and mode != "no picture":
            use_b = mode == "frame B" or (mode == "flicker A/B" and self._flicker_b)
            frame = shot.frame_b if use_b else shot.frame_a
        if frame is None:
            self.picture.clear()
            self.picture.setVisible(False)
        else:
            self.picture.setImage(frame, levels=self._levels, autoLevels=False)
            self.picture.setVisible(True)
        if mode == "flicker A/B" and shot is not None:
            if not self._flicker.isActive():
                self._flicker.start()
        else:
            self._flicker.stop()
            self._flicker_b = False

    def _on_flicker(self) -> None:
        self._flicker_b = not self._flicker_b
        self._draw_picture()

    # -- fields ------------------------------------------------------------------------------
    def _draw_fields(self) -> None:
        result = self._shot.result if self._shot is not None else None
        vf = getattr(result, "field", None)
        self._draw_vorticity(result, vf)
        self._draw_vectors(vf)

    def _draw_vorticity(self, result, vf) -> None:
        w = getattr(result, "vorticity_1_s", None)
        show = self.vorticity_box.isChecked() and w is not None and vf is not None
        self.vorticity.setVisible(show)
        self.colour_bar.setVisible(show)
        if not show:
            return
        unit = vorticity_unit(result)
        if unit != self._vorticity_unit:
            self._vorticity_unit = unit
            self.colour_bar.setTitle(f"ω {unit}", color="#e6e2d8", size="9pt")
            self.limit_box.setSuffix(f" {unit}")
        x0, y0, sp = float(vf.x_px[0, 0]), float(vf.y_px[0, 0]), float(vf.spacing_px)
        rows, cols = w.shape
        limit = self.limit_box.value()
        on_picture = self.picture.isVisible() and not self.side_box.isChecked()
        smooth = smooth_upsample(np.asarray(w, dtype=np.float32), VORTICITY_UPSAMPLE)
        self.vorticity.setImage(vorticity_image(smooth, limit, on_picture), levels=(0, 255),
                                autoLevels=False)
        self.vorticity.setRect(QRectF(x0 - sp / 2, y0 - sp / 2, cols * sp, rows * sp))
        if tuple(self.colour_bar.levels()) != (-limit, limit):
            self.colour_bar.setLevels((-limit, limit))

    def _draw_vectors(self, vf) -> None:
        show = self.vectors_box.isChecked() and vf is not None
        if not show:
            for item in (self.vectors, self.replaced):
                item.setData([], [])
            self.masked.setData(pos=np.empty((0, 2)))
            return
        stride = self.stride_box.value()
        sl = (slice(None, None, stride), slice(None, None, stride))
        x, y = vf.x_px[sl], vf.y_px[sl]
        dx, dy = vf.dx_px[sl], vf.dy_px[sl]
        masked = vf.masked[sl] | ~np.isfinite(dx) | ~np.isfinite(dy)
        replaced = vf.replaced[sl] & ~masked
        good = ~masked & ~replaced
        scale = vector_scale(dx[~masked], dy[~masked], vf.spacing_px * stride)
        for item, sel in ((self.vectors, good), (self.replaced, replaced)):
            xs, ys = arrow_segments(x[sel], y[sel], dx[sel] * scale, dy[sel] * scale)
            item.setData(xs, ys)
        self.masked.setData(pos=np.column_stack([x[masked], y[masked]]))
        field_only = not self.picture.isVisible() or self.side_box.isChecked()
        colour = VECTOR_ON_FIELD if field_only and self.vorticity.isVisible() else \
            VECTOR_ON_PICTURE
        self.vectors.setPen(_pen(colour, 1.1))

    def _set_limit(self, limit: float) -> None:
        """Show the colour limit with enough decimals (per-frame-pair vorticity is small)."""
        decimals = max(0, 2 - math.floor(math.log10(limit))) if limit > 0 else 0
        self.limit_box.setDecimals(min(decimals, 6))
        self.limit_box.setSingleStep(10.0 ** math.floor(math.log10(limit)) if limit > 0 else 1.0)
        self.limit_box.setValue(limit)

    def _set_auto_limit(self, result) -> None:
        w = getattr(result, "vorticity_1_s", None)
        if w is None:
            return
        limit = colours.symmetric_limit(w)
        self._building = True
        try:
            self._set_limit(_round_limit(limit))
        finally:
            self._building = False

    # -- overlays ----------------------------------------------------------------------------
    def _draw_overlays(self) -> None:
        result = self._shot.result if self._shot is not None else None
        for overlay in (self.overlay, self.field_overlay):
            overlay.set_ball(result, self.ball_box.isChecked())
            overlay.set_flight(result, self.flight_box.isChecked())
        self._draw_marks()

    def _draw_marks(self) -> None:
        shot = self._shot
        result = shot.result if shot is not None else None
        proposals = shot.proposed_deg if shot is not None else {}
        editable = bool(shot is not None and shot.editable)
        self._placing = True
        try:
            for overlay in (self.overlay, self.field_overlay):
                overlay.set_marks(result, self._angles, proposals, self.marks_box.isChecked(),
                                  editable)
        finally:
            self._placing = False

    def _mark_geometry(self):
        result = self._shot.result if self._shot is not None else None
        circle = mark_circle(result) if result is not None else None
        flight = getattr(result, "flight", None)
        return (None, None) if circle is None or flight is None else (circle, flight)

    def _handle_angle(self, handle: MarkHandle) -> float | None:
        circle, flight = self._mark_geometry()
        if circle is None:
            return None
        pos = handle.pos()
        return angle_of_point(circle[0], flight.direction_deg, handle.side, (pos.x(), pos.y()))

    def _on_handle_moved(self, handle: MarkHandle) -> None:
        if getattr(self, "_placing", False) or not handle.moving:
            return
        angle = self._handle_angle(handle)
        if angle is None:
            return
        self._angles[handle.side] = angle
        self._draw_marks()
        self.mark_moved.emit(handle.side, angle)

    def _on_handle_cancelled(self, handle: MarkHandle) -> None:
        self._angles = self._initial_angles(self._shot)
        self._draw_marks()
        self.mark_cancelled.emit(handle.side)

    def _on_handle_released(self, handle: MarkHandle) -> None:
        angle = self._handle_angle(handle)
        if angle is not None:
            self._angles[handle.side] = angle
            self.mark_released.emit(handle.side, angle)

    # -- layer controls ----------------------------------------------------------------------
    def _on_picture(self, _text: str) -> None:
        if not self._building:
            self._redraw_all()
            self.layers_changed.emit()

    def _on_layer_toggled(self, *_args) -> None:
        if not self._building:
            self._redraw_all()
            self.layers_changed.emit()

    def _on_limit(self, _value: float) -> None:
        if self._building:
            return
        if self.auto_box.isChecked() and self.limit_box.hasFocus():
            self.auto_box.setChecked(False)
        self._draw_fields()
        self.layers_changed.emit()

    def _on_auto(self, checked: bool) -> None:
        if self._building:
            return
        if checked and self._shot is not None:
            self._set_auto_limit(self._shot.result)
        self._draw_fields()
        self.layers_changed.emit()

    def _on_side_by_side(self, checked: bool) -> None:
        if self._building:
            return
        self._apply_side_by_side(checked)
        self._redraw_all()
        self.layers_changed.emit()

    def _apply_side_by_side(self, checked: bool) -> None:
        target = self.field_view if checked else self.view
        if target is not self._field_home:
            for item in self._field_items:
                self._field_home.removeItem(item)
                target.addItem(item)
            self._field_home = target
        in_layout = self.field_view.scene() is not None
        if checked and not in_layout:
            self.graphics.removeItem(self.colour_bar)
            self.graphics.addItem(self.field_view, row=0, col=1)
            self.graphics.addItem(self.colour_bar, row=0, col=2)
        elif not checked and in_layout:
            self.graphics.removeItem(self.field_view)
        self.field_view.setVisible(checked)

    def cycle_picture(self) -> None:
        index = (self.picture_box.currentIndex() + 1) % len(PICTURES)
        self.picture_box.setCurrentIndex(index)

    # -- hover -------------------------------------------------------------------------------
    def _on_mouse_moved(self, args) -> None:
        scene_pos = args[0]
        for view in (self.view, self.field_view):
            if view.scene() is not None and view.sceneBoundingRect().contains(scene_pos):
                point = view.mapSceneToView(scene_pos)
                text = self.describe_point(point.x(), point.y())
                self.hover_label.setText(text)
                self.hover_text.emit(text)
                return

    def describe_point(self, x_px: float, y_px: float) -> str:
        """Text for the cursor at image position (x, y): position and field values there."""
        shot = self._shot
        if shot is None:
            return " "
        result = shot.result
        scale = getattr(result, "scale_mm_per_px", None) if result is not None else None
        parts = [f"x {x_px:7.1f} y {y_px:7.1f} px"]
        if scale:
            parts.append(f"({x_px * scale:6.2f}, {y_px * scale:6.2f} mm)")
        parts.extend(_field_values(result, x_px, y_px))
        return "  ".join(parts)


def legend_html() -> str:
    """One line naming the marks whose meaning is not obvious from the picture."""
    def swatch(colour: str, glyph: str = "■") -> str:
        return f"<span style='color:{colour}'>{glyph}</span>"

    return (f"{swatch(VECTOR_ON_PICTURE)} vector &nbsp;{swatch(REPLACED_VECTOR)} replaced "
            f"&nbsp;{swatch(MASKED_MARK)} masked &nbsp;{swatch(colours.PROPOSAL_MARK, '◆')} "
            "proposal")


def _field_values(result, x_px: float, y_px: float) -> list[str]:
    vf = getattr(result, "field", None)
    if vf is None:
        return []
    sp = float(vf.spacing_px)
    col = round((x_px - float(vf.x_px[0, 0])) / sp)
    row = round((y_px - float(vf.y_px[0, 0])) / sp)
    rows, cols = vf.x_px.shape
    if not (0 <= row < rows and 0 <= col < cols):
        return []
    if vf.masked[row, col]:
        return ["masked (no vector)"]
    out = []
    u, v = _velocity_at(result, vf, row, col)
    out.append(f"u {u:+8.3f}  v {v:+8.3f}  |V| {math.hypot(u, v):7.3f} {_velocity_unit(result)}")
    if vf.replaced[row, col]:
        out.append("(replaced)")
    w = getattr(result, "vorticity_1_s", None)
    if w is not None and np.isfinite(w[row, col]):
        out.append(f"ω {w[row, col]:+9.4g} {vorticity_unit(result)}")
    return out


def vorticity_unit(result) -> str:
    """1/s with dt and a scale; without them the pipeline gives vorticity per frame pair."""
    return "1/s" if getattr(result, "u_m_s", None) is not None else "per frame pair"


def _velocity_at(result, vf, row: int, col: int) -> tuple[float, float]:
    u = getattr(result, "u_m_s", None)
    v = getattr(result, "v_m_s", None)
    if u is not None and v is not None:
        # stored v is image-y (downward); show it upward like the flight angle convention
        return float(u[row, col]), -float(v[row, col])
    return float(vf.dx_px[row, col]), -float(vf.dy_px[row, col])


def _velocity_unit(result) -> str:
    has_speed = getattr(result, "u_m_s", None) is not None
    return "m/s (v up)" if has_speed else "px (v up)"


def _picture_levels(shot: CanvasShot | None) -> tuple[float, float]:
    frames = [] if shot is None else [f for f in (shot.frame_a, shot.frame_b) if f is not None]
    if not frames:
        return 0.0, 1.0
    step = max(1, int(math.sqrt(frames[0].size / 40_000)))  # ~40 000 samples per frame
    sample = np.concatenate([np.asarray(f)[::step, ::step].ravel() for f in frames])
    low, high = np.percentile(sample, [0.5, 99.7])
    if high <= low:
        high = low + 1.0
    return float(low), float(high)


def _same_extent(old: CanvasShot | None, new: CanvasShot) -> bool:
    def shape(shot):
        if shot is None or shot.frame_a is None:
            vf = getattr(getattr(shot, "result", None), "field", None)
            return None if vf is None else ("field", vf.x_px.shape)
        return shot.frame_a.shape

    return old is not None and shape(old) is not None and shape(old) == shape(new)


def _round_limit(value: float) -> float:
    """The next value of the 1-2-5 series at or above ``value``: a tidy colour-bar end that stays
    the same over shots of similar strength (so the scale is comparable and cheap to redraw)."""
    if value <= 0 or not math.isfinite(value):
        return 1.0
    decade = 10.0 ** math.floor(math.log10(value))
    for step in (1.0, 2.0, 5.0, 10.0):
        if value <= step * decade * (1 + 1e-9):
            return step * decade
    return 10.0 * decade


def _check_action(text: str, menu: QMenu) -> QAction:
    """A checkable menu entry; like a check box it has isChecked, setChecked and toggled."""
    action = QAction(text, menu)
    action.setCheckable(True)
    menu.addAction(action)
    return action


def _as_bool(value) -> bool:
    # QSettings (INI) gives strings back for booleans
    if isinstance(value, str):
        return value.strip().lower() in ("1", "true", "yes", "on")
    return bool(value)
