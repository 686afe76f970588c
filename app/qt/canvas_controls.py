"""The canvas's layer controls: the picture (frame A, frame B, flicker, none), vectors and their
stride, vorticity and its colour range (per shot, or fixed for the session: the shot sheet uses
it then too), the overlays, side by side; and their state, which the window keeps in the user's
settings. A part of ``ShotCanvas`` (``app.qt.canvas``).
"""

from __future__ import annotations

import math
from enum import StrEnum

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QCheckBox, QComboBox, QDoubleSpinBox, QMenu, QSpinBox, QToolButton


class PictureMode(StrEnum):
    """What lies under the overlays; the values are the menu's words (kept in the settings)."""

    FRAME_A = "frame A"
    FRAME_B = "frame B"
    FLICKER = "flicker A/B"
    NONE = "no picture"


PICTURES = tuple(PictureMode)


class FrameOfReference(StrEnum):
    """Whose velocity the vectors and the cursor show (README: frames of reference)."""

    LAB = "lab frame"
    BALL = "ball frame"


FRAMES = tuple(FrameOfReference)

VECTOR_GAP_PX = 14  # screen px between arrows when the step follows the zoom
FITTED_STRIDE_TEXT = "auto"
DEFAULT_LAYERS = {
    "picture": PictureMode.FRAME_A,
    "vectors": True,
    "vector_stride": 0,  # every n-th vector; 0: as many as fit the zoom (VECTOR_GAP_PX)
    "vorticity": True,
    "vorticity_auto": True,
    "vorticity_limit_1_s": 1000.0,
    "ball": True,
    "flight": True,
    "marks": True,
    "fine": True,
    "layers": True,
    "frame": FrameOfReference.LAB,
    "side_by_side": False,
}


class LayerControls:
    """The control bar of ``ShotCanvas`` and what its controls do (mixed into the canvas)."""

    def _build_controls(self) -> None:
        self.picture_box = QComboBox(self)
        self.picture_box.addItems(PICTURES)
        self.picture_box.setToolTip("picture under the overlays (F cycles)")
        self.vectors_box = QCheckBox("Vectors", self)
        self.stride_box = QSpinBox(self)
        self.stride_box.setRange(0, 16)
        self.stride_box.setPrefix("every ")
        self.stride_box.setSpecialValueText(FITTED_STRIDE_TEXT)  # 0: fitted to the zoom
        self.stride_box.setToolTip(
            f"draw every n-th vector in each direction; {FITTED_STRIDE_TEXT}: arrows about "
            f"{VECTOR_GAP_PX} screen px apart at the zoom shown")
        self.vorticity_box = QCheckBox("Vorticity", self)
        self.limit_box = QDoubleSpinBox(self)
        self.limit_box.setDecimals(6)  # before the range, so small limits are not rounded away
        self.limit_box.setRange(1e-6, 1e9)
        self.limit_box.setDecimals(0)
        self.limit_box.setPrefix("± ")
        self.limit_box.setSuffix(" 1/s")
        self.limit_box.setToolTip("vorticity at the ends of the colour map (symmetric about 0)")
        self.fixed_box = QCheckBox("fixed", self)
        self.fixed_box.setToolTip(
            "keep this colour range for every shot of the session, and on the shot sheet; "
            "off: each shot gets its own (98th percentile of |ω|)")
        # the overlays sit in one drop-down so the bar fits a laptop screen
        self.overlay_button = QToolButton(self)
        self.overlay_button.setText("Overlays")
        self.overlay_button.setToolTip("ball outlines, flight arrow with the normal plane, "
                                       "separation marks with their uncertainty, the fine "
                                       "field near the ball, the fitted shear layers")
        self.overlay_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        overlay_menu = QMenu(self.overlay_button)
        self.ball_box = _check_action("Ball outline in frames A and B", overlay_menu)
        self.flight_box = _check_action("Flight arrow and normal plane", overlay_menu)
        self.marks_box = _check_action("Separation marks and their uncertainty", overlay_menu)
        overlay_menu.addSeparator()
        self.fine_box = _check_action("Fine field near the ball", overlay_menu)
        self.layers_box = _check_action("Fitted shear layers and bands", overlay_menu)
        self.overlay_button.setMenu(overlay_menu)
        self.frame_box = QComboBox(self)
        self.frame_box.addItems(FRAMES)
        self.frame_box.setToolTip("vectors and cursor velocities in the lab frame (air at rest "
                                  "far away) or the ball frame (ball velocity subtracted, as in "
                                  "a wind tunnel); T switches")
        self.side_box = QCheckBox("Side by side", self)
        self.side_box.setToolTip("two views with zoom and pan linked: the frames and the fields "
                                 "of this shot, or this shot and the one kept for comparison (K)")
        self.picture_box.currentTextChanged.connect(self._on_picture)
        for box in (self.vectors_box, self.vorticity_box, self.ball_box, self.flight_box,
                    self.marks_box, self.fine_box, self.layers_box):
            box.toggled.connect(self._on_layer_toggled)
        self.frame_box.currentTextChanged.connect(self._on_layer_toggled)
        self.stride_box.valueChanged.connect(self._on_layer_toggled)
        # clicking a layer switch must not take the keyboard from the shot list (Up/Down)
        for widget in (self.picture_box, self.vectors_box, self.vorticity_box, self.fixed_box,
                       self.overlay_button, self.side_box, self.frame_box):
            widget.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.stride_box.setMaximumWidth(80)
        self.limit_box.setMaximumWidth(120)
        self.limit_box.valueChanged.connect(self._on_limit)
        self.fixed_box.toggled.connect(self._on_fixed)
        self.side_box.toggled.connect(self._on_side_by_side)

    # -- layer state (kept in QSettings by the window) ---------------------------------------
    def layer_state(self) -> dict:
        return {
            "picture": self.picture_box.currentText(),
            "vectors": self.vectors_box.isChecked(),
            "vector_stride": self.stride_box.value(),
            "vorticity": self.vorticity_box.isChecked(),
            "vorticity_auto": not self.fixed_box.isChecked(),
            "vorticity_limit_1_s": self.limit_box.value(),
            "ball": self.ball_box.isChecked(),
            "flight": self.flight_box.isChecked(),
            "marks": self.marks_box.isChecked(),
            "fine": self.fine_box.isChecked(),
            "layers": self.layers_box.isChecked(),
            "frame": self.frame_box.currentText(),
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
            self.stride_box.setValue(int(merged["vector_stride"]))
            self.vorticity_box.setChecked(_as_bool(merged["vorticity"]))
            self.fixed_box.setChecked(not _as_bool(merged["vorticity_auto"]))
            self._set_limit(float(merged["vorticity_limit_1_s"]))
            self.ball_box.setChecked(_as_bool(merged["ball"]))
            self.flight_box.setChecked(_as_bool(merged["flight"]))
            self.marks_box.setChecked(_as_bool(merged["marks"]))
            self.fine_box.setChecked(_as_bool(merged["fine"]))
            self.layers_box.setChecked(_as_bool(merged["layers"]))
            frame = merged["frame"] if merged["frame"] in FRAMES else FrameOfReference.LAB
            self.frame_box.setCurrentText(frame)
            self.side_box.setChecked(_as_bool(merged["side_by_side"]))
        finally:
            self._building = False
        self._apply_side_by_side(self.side_box.isChecked())
        self._redraw_all()

    def _set_limit(self, limit: float) -> None:
        """Show the colour limit with enough decimals (per-frame-pair vorticity is small)."""
        decimals = max(0, 2 - math.floor(math.log10(limit))) if limit > 0 else 0
        self.limit_box.setDecimals(min(decimals, 6))
        self.limit_box.setSingleStep(10.0 ** math.floor(math.log10(limit)) if limit > 0 else 1.0)
        self.limit_box.setValue(limit)

    def fixed_limit(self) -> float | None:
        """The vorticity colour range fixed for the session (None: per shot)."""
        return self.limit_box.value() if self.fixed_box.isChecked() else None

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
        if not self.fixed_box.isChecked() and self.limit_box.hasFocus():
            self.fixed_box.setChecked(True)  # a range typed in is meant to stay
        self._draw_fields()
        self.layers_changed.emit()

    def _on_fixed(self, checked: bool) -> None:
        if self._building:
            return
        if not checked and self._shot is not None:
            self._set_auto_limit()
        self._draw_fields()
        self.layers_changed.emit()

    def _on_side_by_side(self, checked: bool) -> None:
        if self._building:
            return
        self._apply_side_by_side(checked)
        self._redraw_all()
        self.layers_changed.emit()

    def _apply_side_by_side(self, checked: bool) -> None:
        """Put the second view (and the titles over both) in the layout, or take them out; the
        single view's range comes back on leaving (the shot fitted when there is none kept)."""
        in_layout = self.field_view.scene() is not None
        if checked and not in_layout:
            self._single_range = self.view.viewRange()
            self.graphics.removeItem(self.colour_bar)
            self.graphics.addItem(self.main.title, row=0, col=0)
            self.graphics.addItem(self.second.title, row=0, col=1)
            self.graphics.addItem(self.field_view, row=1, col=1)
            self.graphics.addItem(self.colour_bar, row=1, col=2)
            # the single view's range, kept, was shaped for a view twice as wide: each half
            # would show the shot small between wide margins; fitted once the halves have
            # their sizes (the range comes back on leaving)
            self._fit_halves_later.start()
        elif not checked and in_layout:
            self._fit_halves_later.stop()  # left before the halves were fitted
            for item in (self.field_view, self.main.title, self.second.title):
                self.graphics.removeItem(item)
            self._restore_single_range()
        self.field_view.setVisible(checked)

    def _restore_single_range(self) -> None:
        single, self._single_range = self._single_range, None
        if single is None:
            self.view.autoRange(padding=0.02)
        else:
            self.view.setRange(xRange=single[0], yRange=single[1], padding=0)

    def picture_mode(self) -> PictureMode:
        return PictureMode(self.picture_box.currentText())

    def ball_frame(self) -> bool:
        """True when the vectors show the ball frame."""
        return self.frame_box.currentText() == FrameOfReference.BALL

    def toggle_frame(self) -> None:
        self.frame_box.setCurrentIndex(1 - self.frame_box.currentIndex())

    def cycle_picture(self) -> None:
        index = (self.picture_box.currentIndex() + 1) % len(PICTURES)
        self.picture_box.setCurrentIndex(index)


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
