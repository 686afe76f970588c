"""The shot canvas: frames, vectors, vorticity and ball overlays, with draggable separation marks.

Layers the analyst toggles: the picture (frame A, frame B, or a flicker between them), vectors
(valid, replaced and masked drawn differently, with a stride), vorticity (our diverging map,
symmetric limits, a colour bar, a range per shot or fixed for the session), the fitted ball
outline in both frames, the flight arrow with the plane normal to it through the ball centre, a
scale bar, and the two separation marks. Each view is a ``ShotPane``: the main one, and with
"side by side" a second one linked to it (zoom and pan), which shows the same shot's fields, or
another shot kept for comparison (``keep_for_comparison``) in the same colour range. The picture
can be rendered at any size with its legend (``render_picture``: PNG, SVG, the clipboard).

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
from PySide6.QtCore import QEvent, QRectF, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QImage, QPainter, QTextDocument
from PySide6.QtWidgets import (
    QApplication,
    QBoxLayout,
    QHBoxLayout,
    QLabel,
    QMenu,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from app.qt.canvas_circles import CircleEditing
from app.qt.canvas_controls import (
    DEFAULT_LAYERS,
    VECTOR_GAP_PX,
    LayerControls,
    PictureMode,
)
from app.qt.canvas_items import (
    BACKGROUND,
    MASKED_MARK,
    OVERLAY_LINE,
    REPLACED_VECTOR,
    VECTOR_ON_FIELD,
    VECTOR_ON_PICTURE,
    MarkHandle,
    mark_circle,
    pen,
)
from app.qt.canvas_pane import ShotPane, field_steps
from app.qt.canvas_pictures import picture_levels, point_text, reading_text, vorticity_unit
from app.qt.flow_layout import FlowLayout
from app.qt.workers import later
from app.review import colours
from app.review.scales import shot_limit
from core.geometry import SIDES, angle_of_point, on_own_side

# Arrays are (row, column) = (y, x) everywhere in wakeline; run_window sets this too.
pg.setConfigOptions(imageAxisOrder="row-major")


FLICKER_MS = 350
HOVER_HINT = "Point for flow values; drag a mark along the outline."
#: A reading of the cursor as long as they come (``describe_point``): the readout is made tall
#: enough for it at the width it has.
HOVER_LONGEST = reading_text(
    ["x  1044.1 y   776.1 px", "(219.88, 163.45 mm)", "x/D +2.01 y/D -0.72  upper  +75.1°"],
    ["u  -38.843  v   +1.116  |V|  38.859 m/s (lab frame, v up)", "ω    +13.12 1/s",
     "(fine field)"])
LEGEND_MIN_WIDTH = 260  # px: the layer legend wraps rather than widening the window
HINT_MIN_WIDTH = 320  # px: narrower, the hint's line goes above the legend instead of beside it
# the picture's mouse work, for the F1 key list
MOUSE_KEYS = (("drag a round mark", "move a separation mark along the ball outline"),)


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
    decision_note: str = ""  # shown under the message: what the review decided (unusable)
    editable: bool = True

    def angles(self) -> dict:
        """Side -> the angle its mark shows: the final value, else the proposal."""
        return {side: self.final_deg.get(side) if self.final_deg.get(side) is not None
                else self.proposed_deg.get(side) for side in SIDES}


@dataclass
class _Showing:
    """What one pane shows: a shot, and whether its picture and its fields."""

    pane: ShotPane
    shot: CanvasShot | None
    picture: bool
    fields: bool
    marks: dict  # side -> angle


class ShotCanvas(LayerControls, CircleEditing, QWidget):
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
    circle_moved(frame, cx, cy, r)
        The analyst let go of a ball circle ("a" or "b") being corrected (image px).
    """

    mark_moved = Signal(str, float)
    mark_released = Signal(str, float)
    mark_cancelled = Signal(str)
    hover_text = Signal(str)
    circle_moved = Signal(str, float, float, float)
    layers_changed = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._shot: CanvasShot | None = None
        self._reference: CanvasShot | None = None  # kept for comparison in the second pane
        self._angles = {"upper": None, "lower": None}
        self._levels = {}  # shot id -> picture levels
        self._flicker_b = False
        self._vector_colour = VECTOR_ON_PICTURE
        self._building = False
        self._placing = False
        self._vorticity_unit = "1/s"
        self._single_range = None  # the single view's range while side by side
        self._drawn_steps = ()  # the vector steps drawn (fitted to the zoom)
        self.context_actions: list = []  # right-click menu (the window's picture actions)
        self.context_menu: QMenu | None = None
        self._build_controls()
        self._build_views()
        self._build_circle_handles()
        self._build_layout()
        self._flicker = QTimer(self)
        self._flicker.setInterval(FLICKER_MS)
        self._flicker.timeout.connect(self._on_flicker)
        # once the bottom row has given the cursor readout its width; a timer the canvas owns
        # (a single-shot call would keep the canvas alive if the window closed first)
        self._hover_fit = later(self, self._fit_hover_height)
        self._fit_halves_later = later(self, lambda: self.view.autoRange(padding=0.02))
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
        self.graphics.setContextMenuPolicy(Qt.ContextMenuPolicy.CustomContextMenu)
        self.graphics.customContextMenuRequested.connect(self._on_context_menu)
        self.main = ShotPane(draggable=True)
        self.second = ShotPane(draggable=False)
        self.second.view.setXLink(self.main.view)
        self.second.view.setYLink(self.main.view)
        self.main.view.sigRangeChanged.connect(self._on_zoom)
        # the main pane's items under their old names (the window and the tests use them)
        self.view, self.field_view = self.main.view, self.second.view
        self.picture, self.vorticity = self.main.picture, self.main.vorticity
        self.vectors, self.replaced, self.masked = (self.main.vectors, self.main.replaced,
                                                    self.main.masked)
        self.overlay, self.field_overlay = self.main.overlay, self.second.overlay
        self.graphics.addItem(self.view, row=1, col=0)
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
        self.graphics.addItem(self.colour_bar, row=1, col=2)
        for handle in self.overlay.handles.values():
            handle.sigPositionChanged.connect(self._on_handle_moved)
            handle.sigPositionChangeFinished.connect(self._on_handle_released)
            handle.sigDragCancelled.connect(self._on_handle_cancelled)
        self.message = QLabel(self.graphics)
        self.message.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.message.setWordWrap(True)
        self._message_compact = None  # set by _place_message for the picture's size
        # a mark under the message can still be dragged
        self.message.setAttribute(Qt.WidgetAttribute.WA_TransparentForMouseEvents)
        self.message.hide()

    def _build_layout(self) -> None:
        bar = FlowLayout(spacing=8)  # a second row in a narrow window, not a wider window
        bar.setContentsMargins(4, 2, 4, 2)
        for widget in (self.picture_box, self.frame_box, self.vectors_box, self.stride_box,
                       self.vorticity_box, self.limit_box, self.fixed_box, self.overlay_button,
                       self.side_box):
            bar.addWidget(widget)
        self.hover_label = QLabel(HOVER_HINT, self)
        self.hover_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.hover_label.setStyleSheet("QLabel { font-family: monospace; padding: 2px 6px; }")
        # long readings must never widen the panel nor change its height as the cursor moves
        # (the view would re-range under it): they wrap within the lines the longest reading
        # takes at the label's width (set as the window is resized, _fit_hover_height)
        self.hover_label.setWordWrap(True)
        self.hover_label.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Fixed)
        self.hover_label.setFixedHeight(2 * self.hover_label.fontMetrics().lineSpacing() + 6)
        self.hover_label.installEventFilter(self)  # its width settles after the canvas's
        box = QVBoxLayout(self)
        box.setContentsMargins(0, 0, 0, 0)
        box.setSpacing(2)
        box.addLayout(bar)
        box.addWidget(self.graphics, 1)
        bottom = self._bottom_row = QHBoxLayout()
        bottom.setContentsMargins(0, 0, 4, 0)
        bottom.addWidget(self.hover_label, 1)
        self.legend = QLabel(legend_html(), self)
        self.legend.setToolTip("valid vectors, vectors the validation replaced, windows with no "
                               "vector (mostly the ball), the machine's proposal where the "
                               "analyst moved a mark, the interval about the proposal meant to "
                               "hold the true angle in 95 % of shots, the fitted shear layer "
                               "(solid: dividing line, dashed: half-speed line) and the band "
                               "of the images it was fitted to")
        self.legend.setWordWrap(True)  # two lines in a narrow window
        self.legend.setMinimumWidth(LEGEND_MIN_WIDTH)
        bottom.addWidget(self.legend, 0)
        box.addLayout(bottom)

    # -- showing a shot ----------------------------------------------------------------------
    @property
    def shot(self) -> CanvasShot | None:
        return self._shot

    @property
    def reference(self) -> CanvasShot | None:
        """The shot kept for comparison (None: none kept)."""
        return self._reference

    def show_shot(self, shot: CanvasShot | None) -> None:
        """Draw a shot (None: empty canvas). Keeps the zoom when the frame size is unchanged."""
        old = self._shot
        self._shot = shot
        self._angles = shot.angles() if shot is not None else {"upper": None, "lower": None}
        kept = self._reference
        self._levels = {kept.shot_id: self._levels[kept.shot_id]} if kept is not None else {}
        if shot is not None:
            self._levels[shot.shot_id] = picture_levels(shot)
        if shot is not None and not self.fixed_box.isChecked():
            self._set_auto_limit()
        self._redraw_all()
        if shot is not None and not _same_extent(old, shot):
            self.view.autoRange(padding=0.02)

    def keep_for_comparison(self, shot: CanvasShot | None) -> None:
        """Show ``shot`` in the second pane beside the current one (side by side turns on), in
        the same colour range and with linked zoom; None lets it go."""
        self._reference = shot
        if shot is not None:
            self._levels[shot.shot_id] = picture_levels(shot)
            if not self.side_box.isChecked():
                self._building = True  # one redraw below, not two
                self.side_box.setChecked(True)
                self._building = False
                self._apply_side_by_side(True)
                self.layers_changed.emit()
        if self._shot is not None and not self.fixed_box.isChecked():
            self._set_auto_limit()
        self._redraw_all()

    def update_marks(self, proposed: dict, final: dict, editable: bool = True,
                     decision_note: str = "") -> None:
        """Move the marks after an edit without redrawing the picture or fields."""
        if self._shot is None:
            return
        self._shot.proposed_deg = dict(proposed)
        self._shot.final_deg = dict(final)
        self._shot.editable = editable
        self._angles = self._shot.angles()
        self._draw_marks()
        if decision_note != self._shot.decision_note:
            self._shot.decision_note = decision_note
            self._show_message()

    def update_reference_marks(self, proposed: dict, final: dict) -> None:
        """The kept shot's marks after an edit of that shot."""
        if self._reference is not None:
            self._reference.proposed_deg, self._reference.final_deg = dict(proposed), dict(final)
            self._draw_marks()

    def mark_angle(self, side: str) -> float | None:
        """Angle (deg) the mark of ``side`` shows: final value, else the proposal."""
        return self._angles.get(side)

    def handle(self, side: str) -> MarkHandle:
        return self.overlay.handles[side]

    def _showing(self) -> list[_Showing]:
        """What each pane shows now: alone, the picture and its fields split over two panes, or
        the current shot beside the one kept for comparison."""
        shot = self._shot
        if not self.side_box.isChecked():
            return [_Showing(self.main, shot, True, True, self._angles)]
        reference = self._reference
        if reference is None:
            return [_Showing(self.main, shot, True, False, self._angles),
                    _Showing(self.second, shot, False, True, self._angles)]
        return [_Showing(self.main, shot, True, True, self._angles),
                _Showing(self.second, reference, True, True, reference.angles())]

    def _redraw_all(self) -> None:
        if self._building:
            return
        self._draw_picture()
        self._draw_fields()
        self._draw_overlays()
        self._show_message()

    def _show_message(self) -> None:
        shot = self._shot
        text = ("\n".join(t for t in (shot.message, shot.decision_note) if t) if shot is not None
                else "Open a session to review shots.")
        self.message.setText(text)
        self.message.setVisible(bool(text))
        self._place_message()

    def _place_message(self) -> None:
        # on a small picture (a narrow or low window) the message takes a smaller font and
        # less padding: it would cover most of the ball and its marks' labels
        compact = self.graphics.width() < 560 or self.graphics.height() < 400
        if compact != self._message_compact:
            self._message_compact = compact
            self.message.setStyleSheet(
                "QLabel { background: rgba(246, 242, 232, 215); color: #1d1d1f; "
                "border-radius: 6px; "
                + ("padding: 3px 8px; font-size: 11px; }" if compact
                   else "padding: 8px 12px; font-size: 13px; }"))
        width = min(520, max(200, self.graphics.width() - 40))
        self.message.setFixedWidth(width)
        # the wrapped text's own height (adjustSize may leave a line out)
        self.message.setFixedHeight(self.message.heightForWidth(width))
        top = 24 if self.graphics.height() > 400 else 6  # a low picture: up to its edge
        self.message.move((self.graphics.width() - width) // 2, top)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._place_message()
        # a narrow canvas (a small screen, wide side panels) puts the legend under the hint
        # rather than squeezing the hint to a few letters beside it
        direction = (QBoxLayout.Direction.TopToBottom
                     if self.width() < LEGEND_MIN_WIDTH + HINT_MIN_WIDTH
                     else QBoxLayout.Direction.LeftToRight)
        if self._bottom_row.direction() != direction:
            self._bottom_row.setDirection(direction)
        self._hover_fit.start()

    def eventFilter(self, watched, event) -> bool:
        if (watched is self.hover_label and event.type() == QEvent.Type.Resize
                and event.size().width() != event.oldSize().width()):
            self._hover_fit.start()
        return super().eventFilter(watched, event)

    def _fit_hover_height(self) -> None:
        """The cursor readout as tall as the longest reading needs at its width (asked of the
        label itself: its style sheet's font and padding are what it draws with), from two
        lines to five."""
        label = self.hover_label
        shown = label.text()
        label.setText(HOVER_LONGEST)
        need = label.heightForWidth(max(label.width(), 1))
        label.setText(shown)
        spacing = label.fontMetrics().lineSpacing()
        height = min(max(need, 2 * spacing + 6), 5 * spacing + 8)
        if label.height() != height:
            label.setFixedHeight(height)

    # -- picture -----------------------------------------------------------------------------
    def _draw_picture(self) -> None:
        mode = self.picture_mode()
        use_b = mode == PictureMode.FRAME_B or (mode == PictureMode.FLICKER and self._flicker_b)
        for showing in self._showing():
            shot = showing.shot
            frame = None
            if shot is not None and showing.picture and mode != PictureMode.NONE:
                frame = shot.frame_b if use_b else shot.frame_a
            levels = self._levels.get(shot.shot_id, (0.0, 1.0)) if shot else (0.0, 1.0)
            showing.pane.show_picture(frame, levels)
        if mode == PictureMode.FLICKER and self._shot is not None:
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
        showings = self._showing()
        limit = self.limit_box.value()
        any_vorticity = False
        for showing in showings:
            result = showing.shot.result if showing.shot is not None and showing.fields else None
            see_through = showing.picture and showing.pane.picture.isVisible()
            fine = self.fine_box.isChecked()
            drawn = showing.pane.show_vorticity(
                result if self.vorticity_box.isChecked() else None, limit, see_through, fine)
            any_vorticity = any_vorticity or drawn
            on_field = drawn and not see_through
            vector_colour = VECTOR_ON_FIELD if on_field else VECTOR_ON_PICTURE
            showing.pane.show_vectors(result if self.vectors_box.isChecked() else None,
                                      self.stride_box.value(), vector_colour,
                                      self.ball_frame(), fine, self._arrow_gap())
            if showing.pane is self.main and vector_colour != self._vector_colour:
                self._vector_colour = vector_colour  # the legend's swatch as the vectors are
                self.legend.setText(legend_html(vector_colour))
            if drawn:
                self._show_unit(vorticity_unit(result))
        self._drawn_steps = self._vector_steps()
        self.colour_bar.setVisible(any_vorticity)
        if any_vorticity and tuple(self.colour_bar.levels()) != (-limit, limit):
            self.colour_bar.setLevels((-limit, limit))

    def _arrow_gap(self) -> float:
        """Image px between arrows ``VECTOR_GAP_PX`` screen px apart at the zoom shown (0, every
        vector, while the canvas is not on screen: its views have no size yet)."""
        if not self.graphics.isVisible():
            return 0.0
        width, height = self.view.viewPixelSize()
        size = max(width, height)
        return VECTOR_GAP_PX * size if math.isfinite(size) and size > 0 else 0.0

    def _vector_steps(self) -> tuple:
        """The steps the vectors are drawn at now (they change with the zoom when fitted)."""
        if self.stride_box.value() > 0 or not self.vectors_box.isChecked():
            return ()
        gap, fine = self._arrow_gap(), self.fine_box.isChecked()
        return tuple(field_steps(s.shot.result, 0, gap, fine) for s in self._showing()
                     if s.shot is not None and s.shot.result is not None and s.fields)

    def _on_zoom(self, *_args) -> None:
        """Fitted vector steps follow the zoom: redrawn when a step changes, not on every pan."""
        steps = self._vector_steps()
        if steps and steps != self._drawn_steps:
            self._draw_fields()

    def _show_unit(self, unit: str) -> None:
        if unit != self._vorticity_unit:
            self._vorticity_unit = unit
            self.colour_bar.setTitle(f"ω {unit}", color="#e6e2d8", size="9pt")
            self.limit_box.setSuffix(f" {unit}")

    def _set_auto_limit(self) -> None:
        """The colour range from the shown shot(s): each one's 98th percentile of |ω|, the
        larger when two are compared (so neither saturates), rounded up to two significant
        figures as the shot sheet's panels are (``app.review.scales``)."""
        fields = [getattr(s.result, "vorticity_1_s", None) for s in (self._shot, self._reference)
                  if s is not None and s.result is not None]
        fields = [w for w in fields if w is not None]
        if not fields:
            return
        self._building = True
        try:
            self._set_limit(max(shot_limit(w) for w in fields))
        finally:
            self._building = False

    # -- overlays ----------------------------------------------------------------------------
    def _draw_overlays(self) -> None:
        for showing in self._showing():
            result = showing.shot.result if showing.shot is not None else None
            showing.pane.show_overlays(result, self.ball_box.isChecked(),
                                       self.flight_box.isChecked(), self.layers_box.isChecked(),
                                       self.fine_box.isChecked())
            showing.pane.set_title(self._title(showing))
        self._place_circles()
        self._draw_marks()

    def _title(self, showing: _Showing) -> str:
        """The line over a view when there are two: which shot, kept or not, or its fields."""
        if not self.side_box.isChecked() or showing.shot is None:
            return ""
        if showing.shot is self._reference and showing.pane is self.second:
            return f"shot {showing.shot.shot_id} · kept"
        return f"shot {showing.shot.shot_id}" + ("" if showing.picture else " · fields")

    def _draw_marks(self) -> None:
        self._placing = True
        try:
            for showing in self._showing():
                shot = showing.shot
                result = shot.result if shot is not None else None
                editable = bool(shot is not None and shot.editable and showing.pane is self.main
                                and not self._editing_circles)
                proposals = shot.proposed_deg if shot is not None else {}
                showing.pane.overlay.set_marks(result, showing.marks, proposals,
                                               self.marks_box.isChecked(), editable)
                showing.pane.evidence.show_uncertainty(result, proposals,
                                                       self.marks_box.isChecked())
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
        # dragged round the front or the back of the ball, a mark stops at the stagnation point
        return on_own_side(angle_of_point(circle[0], flight.direction_deg, handle.side,
                                          (pos.x(), pos.y())))

    def _on_handle_moved(self, handle: MarkHandle) -> None:
        if self._placing or not handle.moving:
            return
        angle = self._handle_angle(handle)
        if angle is None:
            return
        self._angles[handle.side] = angle
        self._draw_marks()
        self.mark_moved.emit(handle.side, angle)

    def _on_handle_cancelled(self, handle: MarkHandle) -> None:
        self._angles = self._shot.angles()
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
        for showing in self._showing():
            view = showing.pane.view
            if view.scene() is not None and view.sceneBoundingRect().contains(scene_pos):
                point = view.mapSceneToView(scene_pos)
                text = self.describe_point(point.x(), point.y(), showing.shot)
                self.hover_label.setText(text)
                self.hover_text.emit(text)
                return

    def describe_point(self, x_px: float, y_px: float, shot: CanvasShot | None = None) -> str:
        """Text for the cursor at image position (x, y) of ``shot`` (default: the current one):
        position (px, mm, and about the ball) and the flow there, in the frame shown."""
        shot = self._shot if shot is None else shot
        if shot is None:
            return " "
        text = point_text(shot.result, x_px, y_px, self.ball_frame(), self.fine_box.isChecked())
        return text if shot is self._shot else f"shot {shot.shot_id}:  {text}"

    # -- the picture out: clipboard, PNG, SVG ------------------------------------------------
    def _on_context_menu(self, pos) -> None:
        """Right-click: the picture actions (not while a mark is being dragged)."""
        dragging = any(h.moving for h in self.overlay.handles.values())
        if dragging or QApplication.mouseButtons() & Qt.MouseButton.LeftButton:
            return
        if self.context_menu is None:
            self.context_menu = QMenu(self)
            for action in self.context_actions:
                self.context_menu.addAction(action)
        self.context_menu.popup(self.graphics.mapToGlobal(pos))

    def picture_size(self) -> QSize:
        """The size of the picture on screen (views, colour bar), px."""
        return self.graphics.size()

    def legend_title(self) -> str:
        """The shot(s) the picture shows: ``shot s07``, ``shot s07 | s03`` when comparing."""
        shots = [s.shot_id for s in (self._shot, self._reference) if s is not None
                 and (s is self._shot or self.side_box.isChecked())]
        return "shot " + " | ".join(shots) if shots else ""

    def legend_text(self) -> str:
        """What the exported picture says under the views: shots, colour range, the marks."""
        words = [self.legend_title()] if self._shot is not None else []
        if self.vorticity_box.isChecked() and self.colour_bar.isVisible():
            limit = self.limit_box.value()
            words.append(f"ω ±{limit:g} {self._vorticity_unit}")
        return "&nbsp;&nbsp;·&nbsp;&nbsp;".join([*words, legend_html(self._vector_colour)])

    def render_picture(self, device, width: int, height: int) -> None:
        """Paint the canvas's picture laid out at ``width`` x ``height`` px onto ``device`` (a
        QImage, an SVG generator): the views as on screen (same layers, same region), the
        colour bar, the scale bars, and a line of legend under them."""
        legend = QTextDocument()
        legend.setDefaultStyleSheet(f"body {{ color: {OVERLAY_LINE}; }}")
        legend.setHtml(f"<body>{self.legend_text()}</body>")
        legend.setTextWidth(width - 12)
        strip = int(legend.size().height()) + 8
        box = QRectF(0, 0, width, max(16, height - strip))
        layout, scene = self.graphics.ci, self.graphics.scene()
        geometry, ranges = layout.geometry(), self.view.viewRange()
        painter = QPainter(device)
        # pyqtgraph's export mode: symbols are drawn as shapes, not as cached little images
        exporting = [item for item in scene.items() if hasattr(item, "setExportMode")]
        try:
            painter.setRenderHint(QPainter.RenderHint.Antialiasing)
            painter.fillRect(QRectF(0, 0, width, height), QColor(BACKGROUND))
            layout.setGeometry(box)  # laid out at the asked size for this one render
            self.view.setRange(xRange=ranges[0], yRange=ranges[1], padding=0)
            for item in exporting:
                item.setExportMode(True, {"antialias": True, "background": QColor(BACKGROUND),
                                          "painter": painter, "resolutionScale": 1.0})
            scene.render(painter, box, box)
            painter.translate(6, box.height() + 4)
            legend.drawContents(painter)
        finally:
            painter.end()
            for item in exporting:
                item.setExportMode(False)
            layout.setGeometry(geometry)
            self.view.setRange(xRange=ranges[0], yRange=ranges[1], padding=0)

    def picture_image(self, width: int | None = None, height: int | None = None) -> QImage:
        """The picture as an image (default: the size on screen)."""
        size = self.picture_size()
        width, height = width or size.width(), height or size.height()
        image = QImage(width, height, QImage.Format.Format_ARGB32)
        self.render_picture(image, width, height)
        return image


def legend_html(vector_colour: str = VECTOR_ON_PICTURE) -> str:
    """One line naming the marks whose meaning is not obvious from the picture (the vectors in
    the colour they are drawn in: light on frames, dark on the vorticity map)."""
    def swatch(colour: str, glyph: str = "■") -> str:
        return f"<span style='color:{colour}'>{glyph}</span>"

    layer = QColor(colours.UPPER_SIDE).lighter(175).name()
    wedge = QColor(colours.UPPER_SIDE).lighter(150).name()
    # each swatch kept with its word when the line wraps
    return (f"{swatch(vector_colour)}&nbsp;vector &nbsp;{swatch(REPLACED_VECTOR)}&nbsp;"
            f"replaced &nbsp;{swatch(MASKED_MARK)}&nbsp;masked &nbsp;"
            f"{swatch(colours.PROPOSAL_MARK, '◆')}&nbsp;proposal &nbsp;{swatch(wedge)}&nbsp;"
            f"±&nbsp;95&nbsp;% &nbsp;{swatch(layer, '—')}&nbsp;layer "
            f"&nbsp;{swatch(colours.MUTED_INK, '···')}&nbsp;band")


def _same_extent(old: CanvasShot | None, new: CanvasShot) -> bool:
    def shape(shot):
        if shot is None or shot.frame_a is None:
            vf = getattr(getattr(shot, "result", None), "field", None)
            return None if vf is None else ("field", vf.x_px.shape)
        return shot.frame_a.shape

    return old is not None and shape(old) is not None and shape(old) == shape(new)
