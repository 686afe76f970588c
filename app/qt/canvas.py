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

import os
from dataclasses import dataclass, field

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt, QTimer, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import (
    QHBoxLayout,
    QLabel,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from app.qt.canvas_controls import DEFAULT_LAYERS, LayerControls, PictureMode
from app.qt.canvas_items import (
    BACKGROUND,
    MASKED_MARK,
    REPLACED_VECTOR,
    VECTOR_ON_FIELD,
    VECTOR_ON_PICTURE,
    MarkHandle,
    Overlay,
    arrow_segments,
    mark_circle,
    pen,
)
from app.qt.canvas_pictures import (
    field_values,
    picture_levels,
    smooth_upsample,
    vector_scale,
    vorticity_image,
    vorticity_unit,
)
from app.review import colours
from core.geometry import SIDES, angle_of_point

# Arrays are (row, column) = (y, x) everywhere in wakeline; run_window sets this too.
pg.setConfigOptions(imageAxisOrder="row-major")


FLICKER_MS = 350
VORTICITY_UPSAMPLE = 4  # display only: bilinear between grid nodes instead of flat blocks
HOVER_HINT = "Point at the picture for flow values; drag a round mark along the ball outline."


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


class ShotCanvas(LayerControls, QWidget):
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
        self.vectors = pg.PlotDataItem(connect="pairs", pen=pen(VECTOR_ON_PICTURE, 1.1))
        self.replaced = pg.PlotDataItem(connect="pairs", pen=pen(REPLACED_VECTOR, 1.4))
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
        axis.setPen(pen("#c9c6bd", 1.0))
        axis.setTextPen(pen("#e6e2d8", 1.0))
        self.graphics.addItem(self.colour_bar, row=0, col=2)
        self.overlay = Overlay(self.view, draggable=True)
        self.field_overlay = Overlay(self.field_view, draggable=False)
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

    # -- showing a shot ----------------------------------------------------------------------
    @property
    def shot(self) -> CanvasShot | None:
        return self._shot

    def show_shot(self, shot: CanvasShot | None) -> None:
        """Draw a shot (None: empty canvas). Keeps the zoom when the frame size is unchanged."""
        old = self._shot
        self._shot = shot
        self._angles = self._initial_angles(shot)
        self._levels = picture_levels(shot)
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
        mode = self.picture_mode()
        shot = self._shot
        frame = None
        if shot is not None and mode != PictureMode.NONE:
            use_b = mode == PictureMode.FRAME_B or (mode == PictureMode.FLICKER and self._flicker_b)
            frame = shot.frame_b if use_b else shot.frame_a
        if frame is None:
            self.picture.clear()
            self.picture.setVisible(False)
        else:
            self.picture.setImage(frame, levels=self._levels, autoLevels=False)
            self.picture.setVisible(True)
        if mode == PictureMode.FLICKER and shot is not None:
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
        self.vectors.setPen(pen(colour, 1.1))

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
        parts.extend(field_values(result, x_px, y_px))
        return "  ".join(parts)


def legend_html() -> str:
    """One line naming the marks whose meaning is not obvious from the picture."""
    def swatch(colour: str, glyph: str = "■") -> str:
        return f"<span style='color:{colour}'>{glyph}</span>"

    return (f"{swatch(VECTOR_ON_PICTURE)} vector &nbsp;{swatch(REPLACED_VECTOR)} replaced "
            f"&nbsp;{swatch(MASKED_MARK)} masked &nbsp;{swatch(colours.PROPOSAL_MARK, '◆')} "
            "proposal")


def _same_extent(old: CanvasShot | None, new: CanvasShot) -> bool:
    def shape(shot):
        if shot is None or shot.frame_a is None:
            vf = getattr(getattr(shot, "result", None), "field", None)
            return None if vf is None else ("field", vf.x_px.shape)
        return shot.frame_a.shape

    return old is not None and shape(old) is not None and shape(old) == shape(new)
