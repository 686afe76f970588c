"""One view of a shot on the canvas: its picture, vorticity, vectors, overlays and a scale bar in
a ``ViewBox``. The canvas holds two: the main pane (draggable marks) and a second one beside it
for side by side (the same shot's fields, or another shot kept for comparison).

The pane draws what it is given; which shot, which layers and the colour range are the canvas's
choice (``app.qt.canvas``).
"""

from __future__ import annotations

import os

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt
from PySide6.QtGui import QColor

from app.qt.canvas_items import (
    MASKED_MARK,
    OVERLAY_LINE,
    REPLACED_VECTOR,
    SHADOW,
    VECTOR_ON_PICTURE,
    Overlay,
    arrow_segments,
    pen,
)
from app.qt.canvas_pictures import smooth_upsample, vector_scale, vorticity_image
from app.review.scales import round_length

VORTICITY_UPSAMPLE = 4  # display only: bilinear between grid nodes instead of flat blocks


class LengthBar(pg.ScaleBar):
    """A bar of a round length in mm (about a sixth of the view's width), bottom right of the
    view; hidden when the shot has no scale."""

    def __init__(self) -> None:
        super().__init__(size=1.0, width=4, brush=OVERLAY_LINE, pen=pen(SHADOW, 1.0),
                         offset=(-18, -18))
        self.text.setColor(QColor(OVERLAY_LINE))
        self.text.fill = pg.mkBrush(QColor(38, 42, 47, 170))
        self.mm_per_px: float | None = None

    def set_scale(self, mm_per_px: float | None) -> None:
        self.mm_per_px = mm_per_px if mm_per_px and np.isfinite(mm_per_px) else None
        self.setVisible(self.mm_per_px is not None)
        self.updateBar()

    def length_mm(self) -> float | None:
        view = self.parentItem()
        if view is None or self.mm_per_px is None:
            return None
        return round_length(view.viewRect().width() * self.mm_per_px / 6)

    def updateBar(self) -> None:
        length = self.length_mm()
        if length is None:
            return
        self.size = length / self.mm_per_px
        self.text.setText(f"{length:g} mm")
        super().updateBar()


class PaneTitle(pg.LabelItem):
    """The line over a view when there are two: it takes its height but never widens its
    column, so the two views stay the same size whatever their titles say."""

    def updateMin(self) -> None:
        super().updateMin()
        height = self.itemRect().height()
        self.setMinimumWidth(0)
        self._sizeHint[Qt.SizeHint.MinimumSize] = (0, height)
        self._sizeHint[Qt.SizeHint.PreferredSize] = (0, height)
        self.updateGeometry()


class ShotPane:
    """The items that draw one shot in one ``ViewBox`` (image coordinates, y down)."""

    def __init__(self, draggable: bool) -> None:
        self.view = pg.ViewBox(lockAspect=True, invertY=True, enableMenu=False)
        self.picture = pg.ImageItem(autoDownsample=True)
        self.vorticity = pg.ImageItem()
        self.vectors = pg.PlotDataItem(connect="pairs", pen=pen(VECTOR_ON_PICTURE, 1.1))
        self.replaced = pg.PlotDataItem(connect="pairs", pen=pen(REPLACED_VECTOR, 1.4))
        masked_colour = QColor(MASKED_MARK)
        masked_colour.setAlpha(140)
        self.masked = pg.ScatterPlotItem(size=2.5, symbol="s", pen=None,
                                         brush=pg.mkBrush(masked_colour))
        for item, z in ((self.picture, 0), (self.vorticity, 10), (self.masked, 19),
                        (self.vectors, 20), (self.replaced, 21)):
            item.setZValue(z)
            self.view.addItem(item)
        self.overlay = Overlay(self.view, draggable=draggable)
        self.title = PaneTitle("", color=OVERLAY_LINE, size="9pt", justify="left")
        self.length_bar = LengthBar()
        self.length_bar.setParentItem(self.view)

    # -- picture -----------------------------------------------------------------------------
    def show_picture(self, frame: np.ndarray | None, levels: tuple[float, float]) -> None:
        if frame is None:
            self.picture.clear()
            self.picture.setVisible(False)
        else:
            self.picture.setImage(frame, levels=levels, autoLevels=False)
            self.picture.setVisible(True)

    # -- fields ------------------------------------------------------------------------------
    def show_vorticity(self, result, limit: float, see_through: bool) -> bool:
        """Draw the vorticity (None: hide it); True when drawn."""
        w = getattr(result, "vorticity_1_s", None)
        vf = getattr(result, "field", None)
        shown = w is not None and vf is not None
        self.vorticity.setVisible(shown)
        if not shown:
            return False
        x0, y0, sp = float(vf.x_px[0, 0]), float(vf.y_px[0, 0]), float(vf.spacing_px)
        rows, cols = w.shape
        smooth = smooth_upsample(np.asarray(w, dtype=np.float32), VORTICITY_UPSAMPLE)
        self.vorticity.setImage(vorticity_image(smooth, limit, see_through), levels=(0, 255),
                                autoLevels=False)
        self.vorticity.setRect(QRectF(x0 - sp / 2, y0 - sp / 2, cols * sp, rows * sp))
        return True

    def show_vectors(self, vf, stride: int, colour: str) -> None:
        """Every ``stride``-th vector of the field (None: none); valid, replaced and masked
        drawn apart."""
        if vf is None:
            for item in (self.vectors, self.replaced):
                item.setData([], [])
            self.masked.setData(pos=np.empty((0, 2)))
            return
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
        self.vectors.setPen(pen(colour, 1.1))

    # -- overlays ----------------------------------------------------------------------------
    def show_overlays(self, result, ball: bool, flight: bool) -> None:
        self.overlay.set_ball(result, ball)
        self.overlay.set_flight(result, flight)
        self.length_bar.set_scale(getattr(result, "scale_mm_per_px", None))

    def set_title(self, text: str) -> None:
        """The line above the view (the canvas puts it in its layout when side by side)."""
        self.title.setText(text)
