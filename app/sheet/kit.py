"""The sheet's small painting kit: millimetres on an A4 page, pens, fonts, text boxes, ticks,
arrows, and the page furniture (title block, footer, numbering). Qt's painter, no widgets.
"""

from __future__ import annotations

import math
import os
from contextlib import contextmanager
from datetime import UTC, datetime

import numpy as np
from PySide6 import QtCore, QtGui

from app.review import colours
from app.sheet.content import CONVENTIONS

PAGE_W_MM, PAGE_H_MM = 210.0, 297.0
MARGIN_MM = 14.0
HEADER_MM = 13.0
FOOTER_MM = 15.0
DPI = 300
PANEL_GAP_MM = 6.0
TITLE_SIZES_PT = (12.0, 11.0, 10.0, 9.0, 8.5)  # the page header's title, largest that fits

_APP: QtCore.QCoreApplication | None = None



def ensure_gui_application() -> QtCore.QCoreApplication:
    """The running Qt application, or a new one on the offscreen platform (painting a PDF needs
    no screen, and a display that cannot be reached must not stop it). A widgets application,
    so that a window opened later in the same process can use it."""
    global _APP
    app = QtCore.QCoreApplication.instance()
    if app is not None:
        return app
    from PySide6.QtWidgets import QApplication

    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    _APP = QApplication(["wakeline"])
    return _APP



@contextmanager
def saved(painter):
    """The painter's state saved for the block and restored after it, also when the sheet is
    stopped inside it (Ctrl+C: Qt would warn of a painter ended with saved states)."""
    painter.save()
    try:
        yield painter
    finally:
        painter.restore()


def mm(value_mm: float) -> float:
    """Millimetres on the page -> PDF device units at ``DPI``."""
    return value_mm * DPI / 25.4


def rect_mm(x: float, y: float, w: float, h: float) -> QtCore.QRectF:
    return QtCore.QRectF(mm(x), mm(y), mm(w), mm(h))


def qcolor(hex_colour: str, alpha: int = 255) -> QtGui.QColor:
    c = QtGui.QColor(hex_colour)
    c.setAlpha(alpha)
    return c


def font(size_pt: float, bold: bool = False, italic: bool = False) -> QtGui.QFont:
    f = QtGui.QFont("DejaVu Sans")
    f.setPointSizeF(size_pt)
    f.setBold(bold)
    f.setItalic(italic)
    return f


def pen(hex_colour: str, width_mm: float = 0.25, style=QtCore.Qt.PenStyle.SolidLine) -> QtGui.QPen:
    p = QtGui.QPen(qcolor(hex_colour))
    p.setWidthF(mm(width_mm))
    p.setStyle(style)
    p.setCapStyle(QtCore.Qt.PenCapStyle.RoundCap)
    return p


def text(painter, rect: QtCore.QRectF, value: str, size_pt: float = 8.5, *, bold=False,
         colour=colours.INK, flags=None, italic=False) -> QtCore.QRectF:
    """Draw text in ``rect`` (device units); returns the bounding rectangle used."""
    painter.setFont(font(size_pt, bold, italic))
    painter.setPen(qcolor(colour))
    align = flags if flags is not None else (
        QtCore.Qt.AlignmentFlag.AlignLeft | QtCore.Qt.AlignmentFlag.AlignTop
    )
    return painter.drawText(rect, int(align) | int(QtCore.Qt.TextFlag.TextWordWrap), str(value))


def one_line(painter, rect: QtCore.QRectF, value: str, sizes_pt: tuple[float, ...], *,
             bold=False, colour=colours.INK, flags=None) -> tuple[str, float]:
    """Draw ``value`` on one line in ``rect`` at the largest of ``sizes_pt`` at which it fits;
    at the smallest its end gives way to "…". Returns the text drawn and its size (pt)."""
    for size in sizes_pt:
        painter.setFont(font(size, bold))
        metrics = painter.fontMetrics()
        if metrics.horizontalAdvance(value) <= rect.width():
            shown = value  # (Qt's eliding can cut a text that fits, by rounding: not asked)
            break
        if size == sizes_pt[-1]:
            shown = metrics.elidedText(value, QtCore.Qt.TextElideMode.ElideRight,
                                       int(rect.width()))
    painter.setPen(qcolor(colour))
    align = flags if flags is not None else QtCore.Qt.AlignmentFlag.AlignLeft
    painter.drawText(rect, int(align) | int(QtCore.Qt.AlignmentFlag.AlignVCenter)
                     | int(QtCore.Qt.TextFlag.TextSingleLine), shown)
    return shown, size


def nice_ticks(lo: float, hi: float, n: int = 6) -> np.ndarray:
    """Round tick positions covering [lo, hi], about ``n`` of them."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.array([lo])
    raw = (hi - lo) / max(n - 1, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    start = math.ceil(lo / step - 1e-9) * step
    return np.arange(start, hi + step * 1e-6, step)


def tick_label(value: float) -> str:
    return f"{value:.0f}" if abs(value - round(value)) < 1e-9 else f"{value:g}"



def triangle(p, centre: QtCore.QPointF, up: bool, colour: str, filled: bool,
              size_mm: float = 2.6) -> None:
    s = mm(size_mm) / 2
    d = -1 if up else 1
    poly = QtGui.QPolygonF([
        QtCore.QPointF(centre.x(), centre.y() + d * s * 1.1),
        QtCore.QPointF(centre.x() - s, centre.y() - d * s * 0.7),
        QtCore.QPointF(centre.x() + s, centre.y() - d * s * 0.7),
    ])
    p.setPen(pen(colour, 0.3))
    p.setBrush(qcolor(colour) if filled else qcolor("#ffffff"))
    p.drawPolygon(poly)



def draw_arrow(p, a: QtCore.QPointF, b: QtCore.QPointF, head_mm: float = 0.8) -> None:
    dx, dy = b.x() - a.x(), b.y() - a.y()
    length = math.hypot(dx, dy)
    if length < mm(0.15):
        return
    p.drawLine(a, b)
    head = min(mm(head_mm), 0.4 * length)
    ux, uy = dx / length, dy / length
    for sign in (1, -1):
        hx = b.x() - head * (ux * 0.87 - sign * uy * 0.5)
        hy = b.y() - head * (uy * 0.87 + sign * ux * 0.5)
        p.drawLine(b, QtCore.QPointF(hx, hy))



class Pages:
    """Title block and footer on every page; page numbering."""

    def __init__(self, painter: QtGui.QPainter, writer: QtGui.QPdfWriter, title: str, total: int):
        self.painter, self.writer, self.title, self.total = painter, writer, title, total
        self.number = 0
        self.stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")

    def new_page(self, subtitle: str) -> None:
        if self.number:
            self.writer.newPage()
        self.number += 1
        self._header(subtitle)
        self._footer()

    def body(self) -> tuple[float, float, float, float]:
        """Usable area (x, y, w, h) in mm between the title block and the footer."""
        top = MARGIN_MM + HEADER_MM + 3
        return MARGIN_MM, top, PAGE_W_MM - 2 * MARGIN_MM, PAGE_H_MM - MARGIN_MM - FOOTER_MM - top - 2

    def _header(self, subtitle: str) -> None:
        p = self.painter
        w = PAGE_W_MM - 2 * MARGIN_MM
        p.fillRect(rect_mm(MARGIN_MM, MARGIN_MM, 3.0, HEADER_MM - 2), qcolor(colours.ACCENT))
        text(p, rect_mm(MARGIN_MM + 5, MARGIN_MM - 0.5, w - 60, 6), "wakeline shot sheet",
             7.5, colour=colours.MUTED_INK)
        page = f"page {self.number} of {self.total}"
        right = QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignTop
        text(p, rect_mm(PAGE_W_MM - MARGIN_MM - 70, MARGIN_MM - 0.5, 70, 6), subtitle, 7.5,
             colour=colours.MUTED_INK, flags=right)
        text(p, rect_mm(PAGE_W_MM - MARGIN_MM - 70, MARGIN_MM + 4.4, 70, 6), page, 9.5,
             bold=True, flags=right)
        p.setFont(font(9.5, bold=True))
        used = p.fontMetrics().horizontalAdvance(page) / mm(1)
        p.setFont(font(7.5))
        used = max(used, p.fontMetrics().horizontalAdvance(subtitle) / mm(1))
        self._title(MARGIN_MM + 5, MARGIN_MM + 3.6, w - 5 - used - 5)
        p.setPen(pen(colours.ACCENT, 0.5))
        y = mm(MARGIN_MM + HEADER_MM)
        p.drawLine(QtCore.QPointF(mm(MARGIN_MM), y), QtCore.QPointF(mm(PAGE_W_MM - MARGIN_MM), y))

    def _title(self, left_mm: float, top_mm: float, width_mm: float) -> None:
        """The session's name whole: in one line, shrunk as far as 8.5 pt to fit, else on two
        lines at 8 pt (a name longer still loses its end)."""
        p = self.painter
        for size in TITLE_SIZES_PT:
            p.setFont(font(size, bold=True))
            if p.fontMetrics().horizontalAdvance(self.title) <= mm(width_mm):
                text(p, rect_mm(left_mm, top_mm, width_mm, 7), self.title, size, bold=True)
                return
        text(p, rect_mm(left_mm, top_mm - 0.7, width_mm, 8.6), self.title, 8, bold=True)

    def _footer(self) -> None:
        p = self.painter
        top = PAGE_H_MM - MARGIN_MM - FOOTER_MM
        w = PAGE_W_MM - 2 * MARGIN_MM
        p.setPen(pen(colours.RULE, 0.3))
        p.drawLine(QtCore.QPointF(mm(MARGIN_MM), mm(top)),
                   QtCore.QPointF(mm(PAGE_W_MM - MARGIN_MM), mm(top)))
        text(p, rect_mm(MARGIN_MM, top + 1.2, w - 32, FOOTER_MM - 1), CONVENTIONS, 6.3,
             colour=colours.MUTED_INK)
        right = QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignTop
        text(p, rect_mm(PAGE_W_MM - MARGIN_MM - 30, top + 1.2, 30, 8),
             f"{self.number} / {self.total}\n{self.stamp}", 6.3, colour=colours.MUTED_INK,
             flags=right)

