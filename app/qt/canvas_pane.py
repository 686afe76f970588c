"""One view of a shot on the canvas: its picture, vorticity, vectors, overlays and a scale bar in
a ``ViewBox``. The canvas holds two: the main pane (draggable marks) and a second one beside it
for side by side (the same shot's fields, or another shot kept for comparison).

The pane draws what it is given; which shot, which layers and the colour range are the canvas's
choice (``app.qt.canvas``).
"""

from __future__ import annotations

import math
import os

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, Qt
from PySide6.QtGui import QColor

from app.qt.canvas_evidence import EvidenceItems, ReferenceVector, fine_extent
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
from app.qt.canvas_pictures import (
    frame_displacement,
    smooth_upsample,
    speed_factor,
    typical_length,
    vector_scale,
    vorticity_image,
)
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


def field_steps(result, stride: int, gap_px: float, fine: bool) -> tuple[int, ...]:
    """The step of the main field (and of the fine one near the ball, with ``fine``): ``stride``
    when the analyst chose one, else (``stride`` 0) the smallest that puts arrows ``gap_px``
    image px apart or more."""
    fields = [getattr(result, "field", None)]
    if fine:
        fields.append(getattr(result, "fine_field", None))
    return tuple(stride if stride > 0 else max(1, math.ceil(gap_px / float(vf.spacing_px)))
                 for vf in fields if vf is not None)


def _under_fine(result, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """``(len(ys), len(xs))`` bool: the image points ``xs`` by ``ys`` where the fine field's
    vorticity is drawn (its nearest node has a value)."""
    fine = result.fine_field
    w = result.fine_vorticity()
    sp = float(fine.spacing_px)
    cols = np.rint((xs - float(fine.x_px[0, 0])) / sp).astype(int)
    rows = np.rint((ys - float(fine.y_px[0, 0])) / sp).astype(int)
    col_in = (cols >= 0) & (cols < w.shape[1])
    row_in = (rows >= 0) & (rows < w.shape[0])
    known = np.isfinite(w)[np.clip(rows, 0, w.shape[0] - 1)][:, np.clip(cols, 0, w.shape[1] - 1)]
    return known & row_in[:, None] & col_in[None, :]


class _Sampled:
    """Every ``stride``-th node of one field: positions, displacements in the frame shown
    (px per pair), masked and replaced flags, as flat arrays."""

    ARRAYS = ("x", "y", "dx", "dy", "masked", "replaced", "shown_masked")

    def __init__(self, result, vf, stride: int, ball_frame: bool, fine: bool) -> None:
        sl = (slice(None, None, stride), slice(None, None, stride))
        dx, dy = frame_displacement(result, vf, ball_frame, fine)
        self.x, self.y = vf.x_px[sl].ravel(), vf.y_px[sl].ravel()
        self.dx, self.dy = dx[sl].ravel(), dy[sl].ravel()
        self.masked = (vf.masked[sl].ravel() | ~np.isfinite(self.dx) | ~np.isfinite(self.dy))
        self.replaced = vf.replaced[sl].ravel() & ~self.masked
        self.shown_masked = self.masked & (not fine)  # the fine field's are the ball: not drawn
        self.cell = float(vf.spacing_px) * stride

    def outside(self, extent) -> _Sampled:
        """These nodes without those inside ``extent`` (x0, x1, y0, y1)."""
        x0, x1, y0, y1 = extent
        keep = ~((self.x >= x0) & (self.x <= x1) & (self.y >= y0) & (self.y <= y1))
        for name in _Sampled.ARRAYS:
            setattr(self, name, getattr(self, name)[keep])
        return self

    @staticmethod
    def joined(parts: list[_Sampled]) -> _Sampled:
        out = parts[0]
        for part in parts[1:]:
            for name in _Sampled.ARRAYS:
                setattr(out, name, np.concatenate([getattr(out, name), getattr(part, name)]))
        return out


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
        self.evidence = EvidenceItems(self.view)
        self.reference = ReferenceVector()
        self.reference.setParentItem(self.view)
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
    def show_vorticity(self, result, limit: float, see_through: bool, fine: bool = False) -> bool:
        """Draw the vorticity (None: hide it), with ``fine`` the fine field's over the main
        field's near the ball; True when drawn."""
        w = getattr(result, "vorticity_1_s", None)
        vf = getattr(result, "field", None)
        shown = w is not None and vf is not None
        self.vorticity.setVisible(shown)
        fine_drawn = self.evidence.show_fine_vorticity(result if shown and fine else None, limit,
                                                       see_through)
        if not shown:
            return False
        x0, y0, sp = float(vf.x_px[0, 0]), float(vf.y_px[0, 0]), float(vf.spacing_px)
        rows, cols = w.shape
        smooth = smooth_upsample(np.asarray(w, dtype=np.float32), VORTICITY_UPSAMPLE)
        image = vorticity_image(smooth, limit, see_through)
        if fine_drawn and see_through:  # both see-through, they would add up to a paler box
            step = sp / VORTICITY_UPSAMPLE
            xs = x0 - sp / 2 + (np.arange(image.shape[1]) + 0.5) * step
            ys = y0 - sp / 2 + (np.arange(image.shape[0]) + 0.5) * step
            image[_under_fine(result, xs, ys), 3] = 0
        self.vorticity.setImage(image, levels=(0, 255), autoLevels=False)
        self.vorticity.setRect(QRectF(x0 - sp / 2, y0 - sp / 2, cols * sp, rows * sp))
        return True

    def show_vectors(self, result, stride: int, colour: str, ball_frame: bool = False,
                     fine: bool = False, gap_px: float = 0.0) -> None:
        """Every ``stride``-th vector of the result's field (None: none; ``stride`` 0: each
        field's step that keeps arrows ``gap_px`` image px apart), in the lab or the ball frame,
        and with ``fine`` the fine field's near the ball instead of the main field's there;
        valid, replaced and masked drawn apart, all at one scale, with a reference vector."""
        vf = getattr(result, "field", None)
        if vf is None:
            for item in (self.vectors, self.replaced):
                item.setData([], [])
            self.masked.setData(pos=np.empty((0, 2)))
            self.reference.set_reference(None)
            return
        steps = field_steps(result, stride, gap_px, fine)
        parts = [_Sampled(result, vf, steps[0], ball_frame, False)]
        fine_vf = getattr(result, "fine_field", None) if fine else None
        if fine_vf is not None:
            parts = [parts[0].outside(fine_extent(fine_vf)),
                     _Sampled(result, fine_vf, steps[1], ball_frame, True)]
        drawn = _Sampled.joined(parts)
        usable = ~drawn.masked
        big = typical_length(drawn.dx[usable], drawn.dy[usable])
        scale = vector_scale(big, min(p.cell for p in parts))
        good = usable & ~drawn.replaced
        for item, sel in ((self.vectors, good), (self.replaced, drawn.replaced & usable)):
            xs, ys = arrow_segments(drawn.x[sel], drawn.y[sel], drawn.dx[sel] * scale,
                                    drawn.dy[sel] * scale)
            item.setData(xs, ys)
        hidden = drawn.shown_masked
        self.masked.setData(pos=np.column_stack([drawn.x[hidden], drawn.y[hidden]]))
        self.vectors.setPen(pen(colour, 1.1))
        self._show_reference(result, scale, big)

    def _show_reference(self, result, scale: float, typical_px: float) -> None:
        """The reference vector at the vectors' scale (``scale``: image px of arrow per px of
        displacement) and about as long as the large ones (``typical_px``), in m/s with dt and
        a scale, else in px."""
        factor = speed_factor(result)
        self.reference.set_reference(scale / factor if factor else scale,
                                     "m/s" if factor else "px",
                                     typical_px * factor if factor else typical_px)

    # -- overlays ----------------------------------------------------------------------------
    def show_overlays(self, result, ball: bool, flight: bool, layers: bool = False,
                      fine: bool = False) -> None:
        """Ball outlines, flight arrow, the fitted layers and bands (``layers``), the fine
        field's outline (``fine``) and the scale bar."""
        self.overlay.set_ball(result, ball)
        self.overlay.set_flight(result, flight)
        self.evidence.show_layers(result, layers)
        self.evidence.show_fine_box(getattr(result, "fine_field", None) if fine else None)
        self.length_bar.set_scale(getattr(result, "scale_mm_per_px", None))

    def set_title(self, text: str) -> None:
        """The line above the view (the canvas puts it in its layout when side by side)."""
        self.title.setText(text)
