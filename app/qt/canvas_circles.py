"""The ball's circles as the analyst corrects them: a draggable circle per frame (centre by its
body, radius by its handle), shown for the frame in the picture (both while flickering or
without a picture). A part of ``ShotCanvas`` (``app.qt.canvas``): it emits ``circle_moved``
when a drag ends, and the window measures the shot again with the new circle.
"""

from __future__ import annotations

import os

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg

from app.qt.canvas_controls import PictureMode
from app.qt.canvas_items import OVERLAY_LINE, pen

CIRCLE_EDIT = "#ffd166"  # the circle being corrected: a warm yellow, apart from the outlines
FRAMES = ("a", "b")


class CircleHandle(pg.CircleROI):
    """A circle the analyst drags (body: centre) and sizes (handle: radius), in image px."""

    def __init__(self, frame: str) -> None:
        line = pen(CIRCLE_EDIT, 2.0, dash=frame == "b")
        super().__init__((0, 0), size=(1, 1), movable=True, pen=line,
                         hoverPen=pen(OVERLAY_LINE, 2.4, dash=frame == "b"),
                         handlePen=pen(CIRCLE_EDIT, 2.0), handleHoverPen=pen(OVERLAY_LINE, 2.4))
        self.frame = frame
        self.setZValue(60)
        self.setToolTip(f"the ball in frame {frame.upper()}: drag it to move the centre, drag "
                        "the handle to change the radius")

    def set_circle(self, cx: float, cy: float, r: float) -> None:
        self.setPos((cx - r, cy - r), update=False, finish=False)
        self.setSize((2 * r, 2 * r), update=True, finish=False)

    def circle(self) -> tuple[float, float, float]:
        """(cx, cy, r) px as shown."""
        pos, size = self.pos(), self.size()
        r = 0.5 * float(size[0])
        return float(pos[0]) + r, float(pos[1]) + r, r


class CircleEditing:
    """The circle handles of the main view (mixed into ``ShotCanvas``)."""

    def _build_circle_handles(self) -> None:
        self._editing_circles = False
        self._placing_circles = False
        self.circle_handles = {frame: CircleHandle(frame) for frame in FRAMES}
        for handle in self.circle_handles.values():
            handle.setVisible(False)
            self.view.addItem(handle)
            handle.sigRegionChangeFinished.connect(self._on_circle_released)

    def set_circle_editing(self, on: bool) -> None:
        """Show (or hide) the draggable circles; the separation marks stay put meanwhile."""
        self._editing_circles = bool(on)
        self._place_circles()
        self._draw_marks()

    def editing_circles(self) -> bool:
        return self._editing_circles

    def _place_circles(self) -> None:
        """The handles over the shot's circles, for the frame(s) the picture shows."""
        result = self._shot.result if self._shot is not None else None
        mode = self.picture_mode()
        shown = {"a": mode != PictureMode.FRAME_B, "b": mode != PictureMode.FRAME_A}
        self._placing_circles = True
        try:
            for frame, handle in self.circle_handles.items():
                ball = getattr(result, f"ball_{frame}", None)
                visible = (self._editing_circles and shown[frame] and ball is not None
                           and bool(np.isfinite(ball.radius_px)))
                handle.setVisible(visible)
                if visible:
                    handle.set_circle(*ball.center_px, ball.radius_px)
        finally:
            self._placing_circles = False

    def _on_circle_released(self, handle: CircleHandle) -> None:
        if self._placing_circles or not self._editing_circles or self._shot is None:
            return
        self.circle_moved.emit(handle.frame, *handle.circle())

