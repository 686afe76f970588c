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
from enum import StrEnum

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QColor
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QHBoxLayout,
    QLabel,
    QMenu,
    QSizePolicy,
    QSpinBox,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

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
    round_limit,
    smooth_upsample,
    vector_scale,
    vorticity_image,
    vorticity_unit,
)
from app.review import colours
from core.geometry import SIDES, angle_of_point

# Arrays are (row, column) = (y, x) everywhere in wakeline; run_window sets this too.
pg.setConfigOptions(imageAxisOrder="row-major")


class PictureMode(StrEnum):
    """What lies under the overlays; the values are the menu's words (kept in the settings)."""

    FRAME_A = "frame A"
    FRAME_B = "frame B"
    FLICKER = "flicker A/B"
    NONE = "no picture"


PICTURES = tuple(PictureMode)
FLICKER_MS = 350
VORTICITY_UPSAMPLE = 4  # display only: bilinear between grid nodes instead of flat blocks
HOVER_HINT = "Point at the picture for flow values; drag a round mark along the ball outline."
DEFAULT_LAYERS = {
    "picture": PictureMode.FRAME_A,
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
            picture = merged["picture"] if merged["picture"] in PICTURES else PictureMode.FRAME_A
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
            self._set_limit(round_limit(limit))
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

    def picture_mode(self) -> PictureMode:
        return PictureMode(self.picture_box.currentText())

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
