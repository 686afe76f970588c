"""The shot sheet: a vector PDF handing over a session, drawn with Qt's own PDF writer.

Page 1 (the cover) names the session, counts shots by review status, shows the session overview
and a summary table (mean and spread of each side's final angle per value of one column). Then
one panel per shot: vorticity map with vectors, ball outline, flight arrow, the plane normal to
the flight, both separation marks (final and, when adjusted, the proposal), the numbers, the
metadata and the analyst's review. Every page has a title block, a footer with the units and
conventions, and a page number. Works headless (an offscreen Qt application is made if needed).
"""

from __future__ import annotations

import math
import os
import sys
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
from PySide6 import QtCore, QtGui

from app.review import colours
from app.qt.overview import (
    PLOTTED_STATUSES,
    OverviewPoints,
    column_value,
    default_column,
    left_out_text,
    numeric_columns,
    overview_points,
)
from core import WakelineError
from core.geometry import flight_unit, point_at_angle, side_normal

PAGE_W_MM, PAGE_H_MM = 210.0, 297.0
MARGIN_MM = 14.0
HEADER_MM = 13.0
FOOTER_MM = 15.0
DPI = 300
PANEL_GAP_MM = 6.0
PER_PAGE_CHOICES = (1, 2, 3, 4)
SUMMARY_ROWS_ON_COVER = 10
SUMMARY_ROWS_PER_PAGE = 40
ALL_STATUSES = ("to review", "accepted", "adjusted", "unusable")
CONVENTIONS = (
    "Separation angle: deg from the plane through the ball centre normal to the flight, "
    "+ rearward (add 90 for the angle from the front stagnation point). Upper = side toward the "
    "top of the picture. Flight direction: 0 deg = toward +x (right), 90 deg = toward the top. "
    "Vorticity in 1/s, counter-clockwise on the page positive. Velocity in m/s, lab frame. "
    "Pictures: dashed line = plane normal to the flight; arrow = flight; filled dot = final "
    "separation; hollow dot = proposal (grey where the analyst moved the mark; ? = not reviewed)."
)


def format_angle(value_deg: float | None) -> str:
    """Angles as printed on the sheet and in the table: one decimal, "" when missing."""
    if value_deg is None or not math.isfinite(value_deg):
        return ""
    return f"{value_deg:.1f}"


# --- Qt application ------------------------------------------------------------------------------

_APP: QtCore.QCoreApplication | None = None


def has_display() -> bool:
    """True when a Qt window can be shown: a display is set, or a windowing platform is chosen."""
    platform = os.environ.get("QT_QPA_PLATFORM", "")
    if platform:
        return platform not in ("offscreen", "minimal")
    if not sys.platform.startswith("linux"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


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


# --- which shots, which pages -------------------------------------------------------------------


@dataclass
class SheetReport:
    """What ``make_sheet`` wrote."""

    path: Path
    pages: int
    shot_ids: list[str]


def parse_statuses(text: str | None) -> tuple[str, ...] | None:
    """``"accepted,adjusted"`` -> ``("accepted", "adjusted")``; None or "" -> None (all)."""
    if not text:
        return None
    wanted = tuple(s.strip() for s in text.split(",") if s.strip())
    unknown = [s for s in wanted if s not in ALL_STATUSES]
    if unknown:
        raise WakelineError(
            f"--status: unknown review status {unknown[0]!r} (use {', '.join(ALL_STATUSES)})"
        )
    return wanted


def select_records(session, shot_ids=None, statuses=None) -> list:
    """Records of the shots on the sheet, in session order."""
    records = session.records()
    if shot_ids:
        known = {r.shot_id for r in records}
        missing = [s for s in shot_ids if s not in known]
        if missing:
            raise WakelineError(f"{session.path}: no shot {missing[0]!r} in this session")
        chosen = set(shot_ids)
        records = [r for r in records if r.shot_id in chosen]
    if statuses:
        records = [r for r in records if r.pick.status in statuses]
    return records


def shot_page_count(n_shots: int, per_page: int) -> int:
    return max(1, math.ceil(n_shots / per_page)) if n_shots else 0


def summary_page_count(n_rows: int) -> int:
    """Pages the cover needs: the cover itself plus continuation pages for a long table."""
    extra = max(0, n_rows - SUMMARY_ROWS_ON_COVER)
    return 1 + math.ceil(extra / SUMMARY_ROWS_PER_PAGE)


# --- summary table ------------------------------------------------------------------------------


@dataclass
class SummaryRow:
    value: float
    n: int
    upper_mean: float
    upper_sd: float
    lower_mean: float
    lower_sd: float


def summary_rows(records, column: str) -> list[SummaryRow]:
    """Mean and sample standard deviation of each side's final angle for each value of ``column``.

    Only shots with a final angle (accepted or adjusted) count; SD is NaN for fewer than two.
    """
    groups: dict[float, tuple[list[float], list[float], set]] = {}
    for position, record in enumerate(records):
        x = column_value(record, column, position)
        if x is None:
            continue
        ups, lows, ids = groups.setdefault(round(x, 6), ([], [], set()))
        for side, bucket in (("upper", ups), ("lower", lows)):
            value = record.final_deg(side)
            if value is not None:
                bucket.append(float(value))
                ids.add(record.shot_id)
    rows = []
    for x in sorted(groups):
        ups, lows, ids = groups[x]
        if ids:
            rows.append(SummaryRow(x, len(ids), *_mean_sd(ups), *_mean_sd(lows)))
    return rows


def _mean_sd(values: list[float]) -> tuple[float, float]:
    if not values:
        return float("nan"), float("nan")
    arr = np.asarray(values)
    sd = float(np.std(arr, ddof=1)) if arr.size > 1 else float("nan")
    return float(arr.mean()), sd


# --- painting helpers ---------------------------------------------------------------------------


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
    return painter.drawText(rect, int(align) | int(QtCore.Qt.TextFlag.TextWordWrap), value)


def nice_ticks(lo: float, hi: float, n: int = 6) -> np.ndarray:
    """Round tick positions covering [lo, hi], about ``n`` of them."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.array([lo])
    raw = (hi - lo) / max(n - 1, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    start = math.ceil(lo / step - 1e-9) * step
    return np.arange(start, hi + step * 1e-6, step)


def _tick_label(value: float) -> str:
    return f"{value:.0f}" if abs(value - round(value)) < 1e-9 else f"{value:g}"


# --- page furniture -----------------------------------------------------------------------------


class _Pages:
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
        p.setFont(font(12, bold=True))
        title = p.fontMetrics().elidedText(self.title, QtCore.Qt.TextElideMode.ElideRight,
                                           int(mm(w - 62)))
        text(p, rect_mm(MARGIN_MM + 5, MARGIN_MM + 3.6, w - 60, 7), title, 12, bold=True)
        right = QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignTop
        text(p, rect_mm(PAGE_W_MM - MARGIN_MM - 70, MARGIN_MM - 0.5, 70, 6), subtitle, 7.5,
             colour=colours.MUTED_INK, flags=right)
        text(p, rect_mm(PAGE_W_MM - MARGIN_MM - 70, MARGIN_MM + 4.4, 70, 6),
             f"page {self.number} of {self.total}", 9.5, bold=True, flags=right)
        p.setPen(pen(colours.ACCENT, 0.5))
        y = mm(MARGIN_MM + HEADER_MM)
        p.drawLine(QtCore.QPointF(mm(MARGIN_MM), y), QtCore.QPointF(mm(PAGE_W_MM - MARGIN_MM), y))

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


# --- the cover ----------------------------------------------------------------------------------


def _status_counts(records) -> dict[str, int]:
    counts = {s: 0 for s in ALL_STATUSES}
    for r in records:
        counts[r.pick.status] = counts.get(r.pick.status, 0) + 1
    return counts


def _process_counts(records) -> dict[str, int]:
    counts: dict[str, int] = {}
    for r in records:
        counts[r.state] = counts.get(r.state, 0) + 1
    return counts


def _session_date(session, records) -> str:
    created = getattr(session, "created", None) or getattr(session, "created_utc", None)
    if created:
        return str(created)[:10]
    try:
        stamp = Path(session.path).stat().st_mtime
    except OSError:
        return ""
    return datetime.fromtimestamp(stamp, UTC).strftime("%Y-%m-%d") + " (file saved)"


def _paint_cover(pages: _Pages, session, all_records, records, column: str,
                 rows: list[SummaryRow], selection_text: str) -> None:
    p = pages.painter
    pages.new_page("cover")
    x, y, w, _h = pages.body()
    name = getattr(session, "name", "") or Path(session.path).stem
    p.setFont(font(20, bold=True))
    name = p.fontMetrics().elidedText(name, QtCore.Qt.TextElideMode.ElideRight,
                                      int(mm(2 * w - 20)))  # at most two lines
    used = text(p, rect_mm(x, y, w, 20), name, 20, bold=True, colour=colours.ACCENT)
    y += used.height() / mm(1) + 1.5
    info = (f"Session file: {Path(session.path).name}    Date: {_session_date(session, all_records)}"
            f"    Shots in session: {len(all_records)}")
    text(p, rect_mm(x, y, w, 5), info, 8.5, colour=colours.MUTED_INK)
    y += 5
    text(p, rect_mm(x, y, w, 5), selection_text, 8.5, colour=colours.MUTED_INK)
    y += 8
    y = _paint_status_boxes(p, x, y, w, all_records)
    y += 5
    text(p, rect_mm(x, y, w, 6), "Session overview", 11, bold=True)
    y += 6.5
    pts = overview_points(records, column)
    _paint_overview(p, rect_mm(x, y, w, 88), pts)
    y += 90
    text(p, rect_mm(x, y, w, 5), left_out_text(pts) or " ", 7.5, colour=colours.MUTED_INK)
    y += 6
    text(p, rect_mm(x, y, w, 6), f"Final angles by {column}", 11, bold=True)
    y += 6.5
    text(p, rect_mm(x, y, w, 5),
         "Accepted and adjusted shots only; mean and sample standard deviation (SD) in deg.",
         7.5, colour=colours.MUTED_INK)
    y += 5.5
    _paint_summary_table(p, x, y, w, column, rows[:SUMMARY_ROWS_ON_COVER])
    rest = rows[SUMMARY_ROWS_ON_COVER:]
    while rest:
        pages.new_page("cover, continued")
        x, y, w, _h = pages.body()
        text(p, rect_mm(x, y, w, 6), f"Final angles by {column} (continued)", 11, bold=True)
        _paint_summary_table(p, x, y + 8, w, column, rest[:SUMMARY_ROWS_PER_PAGE])
        rest = rest[SUMMARY_ROWS_PER_PAGE:]


def _paint_status_boxes(p, x: float, y: float, w: float, records) -> float:
    counts = _status_counts(records)
    processing = _process_counts(records)
    box_w = (w - 3 * 3) / 4
    for i, status in enumerate(ALL_STATUSES):
        bx = x + i * (box_w + 3)
        colour = colours.STATUS_COLOURS[status]
        p.fillRect(rect_mm(bx, y, box_w, 15), qcolor(colour, 28))
        p.fillRect(rect_mm(bx, y, 1.6, 15), qcolor(colour))
        text(p, rect_mm(bx + 4, y + 1.2, box_w - 5, 8), str(counts.get(status, 0)), 16, bold=True,
             colour=colour)
        text(p, rect_mm(bx + 4, y + 9.2, box_w - 5, 5), status, 8.5, colour=colours.INK)
    y += 17
    parts = [f"{n} {state}" for state, n in sorted(processing.items())]
    text(p, rect_mm(x, y, w, 5), "Processing: " + ", ".join(parts), 8, colour=colours.MUTED_INK)
    return y + 5


def _paint_overview(p: QtGui.QPainter, frame: QtCore.QRectF, pts: OverviewPoints) -> None:
    """The session overview as vector graphics: angles against ``pts.column``."""
    p.save()
    plot = frame.adjusted(mm(16), mm(2), -mm(3), -mm(17))
    if not len(pts):
        p.fillRect(plot, qcolor(colours.PAPER_TINT))
        text(p, plot, "No shot with a separation angle to draw.", 9, italic=True,
             colour=colours.MUTED_INK, flags=QtCore.Qt.AlignmentFlag.AlignCenter)
        p.restore()
        return
    p.fillRect(plot, qcolor("#ffffff"))
    ys = np.concatenate([pts.upper_deg, pts.lower_deg]) if len(pts) else np.array([])
    ys = ys[np.isfinite(ys)]
    ylo, yhi = (float(ys.min()), float(ys.max())) if ys.size else (-10.0, 30.0)
    ylo, yhi = min(ylo, 0.0), max(yhi, 0.0)
    pad = max(2.0, 0.08 * (yhi - ylo))
    ylo, yhi = ylo - pad, yhi + pad
    xs = pts.drawn_x()
    xlo, xhi = (float(xs.min()), float(xs.max())) if len(pts) else (0.0, 1.0)
    xpad = 0.06 * (xhi - xlo) if xhi > xlo else 1.0
    xlo, xhi = xlo - xpad, xhi + xpad

    def to_page(xv: float, yv: float) -> QtCore.QPointF:
        px = plot.left() + (xv - xlo) / (xhi - xlo) * plot.width()
        py = plot.bottom() - (yv - ylo) / (yhi - ylo) * plot.height()
        return QtCore.QPointF(px, py)

    _paint_axes(p, plot, (xlo, xhi), (ylo, yhi), to_page, pts.column)
    p.setClipRect(plot)
    p.setPen(pen(colours.PLANE_LINE, 0.3, QtCore.Qt.PenStyle.DashLine))
    p.drawLine(to_page(xlo, 0.0), to_page(xhi, 0.0))
    p.setPen(pen(colours.RULE, 0.35))
    for i in range(len(pts)):
        if np.isfinite(pts.upper_deg[i]) and np.isfinite(pts.lower_deg[i]):
            p.drawLine(to_page(xs[i], pts.upper_deg[i]), to_page(xs[i], pts.lower_deg[i]))
    for i in range(len(pts)):
        colour = colours.STATUS_COLOURS[pts.status[i]]
        for value, up in ((pts.upper_deg[i], True), (pts.lower_deg[i], False)):
            if np.isfinite(value):
                _triangle(p, to_page(xs[i], value), up, colour, bool(pts.is_final[i]))
    p.setClipping(False)
    _paint_overview_legend(p, frame.left() + mm(16), frame.bottom() - mm(5.5))
    p.restore()


def _paint_axes(p, plot: QtCore.QRectF, xr, yr, to_page, column: str) -> None:
    grid = pen(colours.RULE, 0.15)
    p.setPen(grid)
    for xv in nice_ticks(*xr, 8):
        a = to_page(xv, yr[0])
        p.setPen(grid)
        p.drawLine(a, QtCore.QPointF(a.x(), plot.top()))
        text(p, QtCore.QRectF(a.x() - mm(8), plot.bottom() + mm(1), mm(16), mm(4)),
             _tick_label(xv), 7.5, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    for yv in nice_ticks(*yr, 7):
        a = to_page(xr[0], yv)
        p.setPen(grid)
        p.drawLine(a, QtCore.QPointF(plot.right(), a.y()))
        text(p, QtCore.QRectF(plot.left() - mm(11), a.y() - mm(2), mm(10), mm(4)),
             _tick_label(yv), 7.5,
             flags=QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignVCenter)
    p.setPen(pen(colours.MUTED_INK, 0.3))
    p.setBrush(QtCore.Qt.BrushStyle.NoBrush)
    p.drawRect(plot)
    text(p, QtCore.QRectF(plot.left(), plot.bottom() + mm(5), plot.width(), mm(5)), column, 8.5,
         bold=True, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    p.save()
    p.translate(plot.left() - mm(15), plot.center().y())
    p.rotate(-90)
    text(p, QtCore.QRectF(-mm(40), 0, mm(80), mm(4.5)), "separation angle (deg, + rearward)",
         8, bold=True, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    p.restore()


def _triangle(p, centre: QtCore.QPointF, up: bool, colour: str, filled: bool,
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


def _paint_overview_legend(p, x: float, y: float) -> None:
    cx = x
    for label, up in (("upper side", True), ("lower side", False)):
        _triangle(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), up, colours.INK, True)
        text(p, QtCore.QRectF(cx + mm(4), y, mm(22), mm(4)), label, 7.5)
        cx += mm(24)
    for status in PLOTTED_STATUSES:
        p.fillRect(QtCore.QRectF(cx, y + mm(0.8), mm(2.6), mm(2.6)),
                   qcolor(colours.STATUS_COLOURS[status]))
        text(p, QtCore.QRectF(cx + mm(4), y, mm(22), mm(4)), status, 7.5)
        cx += mm(22)
    _triangle(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), True, colours.MUTED_INK, False)
    text(p, QtCore.QRectF(cx + mm(4), y, mm(60), mm(4)), "hollow: proposal, not yet reviewed",
         7.5)


def _paint_summary_table(p, x: float, y: float, w: float, column: str,
                         rows: list[SummaryRow]) -> float:
    heads = [column, "shots", "upper mean", "upper SD", "lower mean", "lower SD",
             "lower - upper"]
    widths = [0.2, 0.1, 0.14, 0.12, 0.14, 0.12, 0.18]
    row_h = 5.2
    right = QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignVCenter
    p.fillRect(rect_mm(x, y, w, row_h), qcolor(colours.ACCENT))
    cx = x
    for head, frac in zip(heads, widths):
        text(p, rect_mm(cx, y, frac * w - 2, row_h), head, 8, bold=True, colour="#ffffff",
             flags=right)
        cx += frac * w
    y += row_h
    if not rows:
        text(p, rect_mm(x, y + 1, w, row_h), "No accepted or adjusted shots yet.", 8.5,
             italic=True, colour=colours.MUTED_INK)
        return y + row_h
    for k, row in enumerate(rows):
        if k % 2:
            p.fillRect(rect_mm(x, y, w, row_h), qcolor(colours.PAPER_TINT))
        cells = [_tick_label(row.value), str(row.n), format_angle(row.upper_mean),
                 format_angle(row.upper_sd), format_angle(row.lower_mean),
                 format_angle(row.lower_sd), format_angle(row.lower_mean - row.upper_mean)]
        cx = x
        for cell, frac in zip(cells, widths):
            text(p, rect_mm(cx, y, frac * w - 2, row_h), cell or "-", 8.5, flags=right)
            cx += frac * w
        y += row_h
    p.setPen(pen(colours.RULE, 0.3))
    p.drawLine(QtCore.QPointF(mm(x), mm(y)), QtCore.QPointF(mm(x + w), mm(y)))
    return y


# --- one shot -----------------------------------------------------------------------------------


def _panel_cells(per_page: int, body) -> list[tuple[float, float, float, float]]:
    x, y, w, h = body
    if per_page == 4:
        cw, ch = (w - PANEL_GAP_MM) / 2, (h - PANEL_GAP_MM) / 2
        return [(x + c * (cw + PANEL_GAP_MM), y + r * (ch + PANEL_GAP_MM), cw, ch)
                for r in range(2) for c in range(2)]
    ch = (h - (per_page - 1) * PANEL_GAP_MM) / per_page
    return [(x, y + i * (ch + PANEL_GAP_MM), w, ch) for i in range(per_page)]


def _paint_shot(p, cell, record, result) -> None:
    x, y, w, h = cell
    colour = colours.STATUS_COLOURS.get(record.pick.status, colours.MUTED_INK)
    p.fillRect(rect_mm(x, y, w, 8), qcolor(colours.PAPER_TINT))
    p.fillRect(rect_mm(x, y, 1.6, 8), qcolor(colour))
    text(p, rect_mm(x + 3.5, y + 0.9, w * 0.55, 7), f"Shot {record.shot_id}", 12.5, bold=True)
    pill = record.pick.status.upper()
    p.setBrush(qcolor(colour))
    p.setPen(QtCore.Qt.PenStyle.NoPen)
    p.drawRoundedRect(rect_mm(x + w - 30, y + 1.5, 28, 5), mm(2.4), mm(2.4))
    text(p, rect_mm(x + w - 30, y + 1.5, 28, 5), pill, 8, bold=True, colour="#ffffff",
         flags=QtCore.Qt.AlignmentFlag.AlignCenter)
    narrow = w < 120  # two panels across: the metadata goes with the numbers instead
    if not narrow:
        text(p, rect_mm(x + w * 0.42, y + 2.2, w * 0.58 - 33, 5), _metadata_line(record), 7.5,
             colour=colours.MUTED_INK, flags=QtCore.Qt.AlignmentFlag.AlignRight)
    y += 10
    h -= 10
    side_by_side = w > 1.25 * h
    if side_by_side:
        text_w = min(72.0, w * 0.42)
        pic = (x, y, w - text_w - 4, h)
        info = (x + w - text_w, y, text_w, h)
    else:
        pic_h = h * (0.5 if narrow else 0.56)
        pic = (x, y, w, pic_h)
        info = (x, y + pic_h + 3, w, h - pic_h - 3)
    if result is None:
        reason = record.failure or "not processed yet"
        p.fillRect(rect_mm(*pic), qcolor(colours.PAPER_TINT))
        text(p, rect_mm(pic[0] + 4, pic[1] + pic[3] / 2 - 4, pic[2] - 8, 10),
             f"No field: {reason}", 9, italic=True, colour=colours.MUTED_INK,
             flags=QtCore.Qt.AlignmentFlag.AlignCenter)
    else:
        _paint_field(p, pic, record, result)
    _paint_numbers(p, info, record, with_metadata=narrow)


def _metadata_line(record) -> str:
    md = record.metadata or {}
    parts = []
    for key, label, unit in (("ball_type", "", ""), ("seam_deg", "seam ", " deg"),
                             ("speed_nominal_m_s", "", " m/s nominal"),
                             ("spin_rpm", "spin ", " rpm")):
        value = md.get(key)
        if value not in (None, ""):
            parts.append(f"{label}{_short(value)}{unit}")
    return "   ".join(parts)


def _short(value) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


@dataclass
class _View:
    """Maps image px to page device units for the field picture (uniform scale)."""

    x0_px: float
    y0_px: float
    scale: float  # device units per image px
    left: float
    top: float

    def __call__(self, x_px: float, y_px: float) -> QtCore.QPointF:
        return QtCore.QPointF(self.left + (x_px - self.x0_px) * self.scale,
                              self.top + (y_px - self.y0_px) * self.scale)


def _crop_box(result, aspect: float) -> tuple[float, float, float, float]:
    """Image-px box (x0, y0, w, h) around the ball and its wake, with the given w/h aspect."""
    vf = result.field
    spacing = float(vf.spacing_px)
    fx0, fx1 = float(np.nanmin(vf.x_px)) - spacing / 2, float(np.nanmax(vf.x_px)) + spacing / 2
    fy0, fy1 = float(np.nanmin(vf.y_px)) - spacing / 2, float(np.nanmax(vf.y_px)) + spacing / 2
    ball = result.ball_a
    if ball is None or result.flight is None:
        bx0, by0, bx1, by1 = fx0, fy0, fx1, fy1
    else:
        cx, cy = ball.center_px
        r = ball.radius_px
        fx, fy = flight_unit(result.flight.direction_deg)
        nx, ny = side_normal(result.flight.direction_deg, "upper")
        corners = [(cx + r * (a * fx + b * nx), cy + r * (a * fy + b * ny))
                   for a in (-5.0, 2.0) for b in (-2.6, 2.6)]
        xs, ys = [c[0] for c in corners], [c[1] for c in corners]
        bx0, bx1 = max(fx0, min(xs)), min(fx1, max(xs))
        by0, by1 = max(fy0, min(ys)), min(fy1, max(ys))
    bw, bh = bx1 - bx0, by1 - by0
    if bw / bh < aspect:  # too tall: widen within the field, then accept what is left
        bw = bh * aspect
    else:
        bh = bw / aspect
    cx, cy = (bx0 + bx1) / 2, (by0 + by1) / 2
    bw, bh = min(bw, fx1 - fx0), min(bh, fy1 - fy0)
    x0 = min(max(cx - bw / 2, fx0), fx1 - bw)
    y0 = min(max(cy - bh / 2, fy0), fy1 - bh)
    return x0, y0, bw, bh


def _paint_field(p, pic, record, result) -> None:
    x, y, w, h = pic
    legend_h = 9.0
    frame = rect_mm(x, y, w, h - legend_h)
    x0, y0, bw, bh = _crop_box(result, frame.width() / frame.height())
    scale = min(frame.width() / bw, frame.height() / bh)
    view = _View(x0, y0, scale, frame.left() + (frame.width() - bw * scale) / 2,
                 frame.top() + (frame.height() - bh * scale) / 2)
    shown = QtCore.QRectF(view(x0, y0), view(x0 + bw, y0 + bh))
    p.save()
    p.fillRect(shown, qcolor("#e4e1da"))
    p.setClipRect(shown)
    limit = _paint_vorticity(p, view, result)
    arrow = _paint_vectors(p, view, result, (x0, y0, bw, bh))
    _paint_ball(p, view, record, result)
    p.setClipping(False)
    p.setPen(pen(colours.MUTED_INK, 0.25))
    p.setBrush(QtCore.Qt.BrushStyle.NoBrush)
    p.drawRect(shown)
    p.restore()
    _paint_field_legend(p, shown.left() / mm(1), shown.bottom() / mm(1) + 1.2, limit, view,
                        result, arrow)


def _paint_vorticity(p, view: _View, result) -> float:
    w = result.vorticity_1_s
    vf = result.field
    if w is None:
        return float("nan")
    limit = colours.symmetric_limit(w)
    rgba = np.ascontiguousarray(colours.vorticity_rgb(w, limit))
    rows, cols = rgba.shape[:2]
    image = QtGui.QImage(rgba.data, cols, rows, cols * 4, QtGui.QImage.Format.Format_RGBA8888)
    # smooth the coarse grid a little so the map reads as a field, not as tiles
    image = image.scaled(cols * 4, rows * 4, QtCore.Qt.AspectRatioMode.IgnoreAspectRatio,
                         QtCore.Qt.TransformationMode.SmoothTransformation)
    s = float(vf.spacing_px)
    x0, y0 = float(vf.x_px[0, 0]) - s / 2, float(vf.y_px[0, 0]) - s / 2
    x1, y1 = float(vf.x_px[-1, -1]) + s / 2, float(vf.y_px[-1, -1]) + s / 2
    p.drawImage(QtCore.QRectF(view(x0, y0), view(x1, y1)), image)
    return limit


def _paint_vectors(p, view: _View, result, box) -> tuple[float, float] | None:
    """Every k-th vector inside ``box``; returns (reference speed, its arrow length in device
    units) for the legend, or None when nothing was drawn."""
    vf = result.field
    if result.u_m_s is not None and result.v_m_s is not None:
        u, v = np.asarray(result.u_m_s, float), np.asarray(result.v_m_s, float)
    else:
        u, v = np.asarray(vf.dx_px, float), np.asarray(vf.dy_px, float)
    x0, y0, bw, bh = box
    stride = max(1, round(bw / float(vf.spacing_px) / 24))
    sl = (slice(None, None, stride), slice(None, None, stride))
    xs, ys, us, vs = vf.x_px[sl], vf.y_px[sl], u[sl], v[sl]
    inside = ((xs >= x0) & (xs <= x0 + bw) & (ys >= y0) & (ys <= y0 + bh)
              & np.isfinite(us) & np.isfinite(vs) & ~np.asarray(vf.masked)[sl])
    speed = np.hypot(us, vs)[inside]
    if speed.size == 0:
        return None
    ref = _round_length(float(np.percentile(speed, 95))) if np.percentile(speed, 95) > 0 else 1.0
    length_px = 0.9 * stride * float(vf.spacing_px)  # image px for the reference speed
    p.setPen(pen("#111111", 0.18))
    for xv, yv, uv, vv in zip(xs[inside], ys[inside], us[inside], vs[inside]):
        _arrow(p, view(xv, yv), view(xv + uv / ref * length_px, yv + vv / ref * length_px))
    return ref, length_px * view.scale


def _arrow(p, a: QtCore.QPointF, b: QtCore.QPointF, head_mm: float = 0.8) -> None:
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


def _paint_ball(p, view: _View, record, result) -> None:
    ball, flight = result.ball_a, result.flight
    if ball is None:
        return
    c = view(*ball.center_px)
    r = ball.radius_px * view.scale
    p.setPen(pen(colours.BALL_OUTLINE, 0.35))
    p.setBrush(qcolor("#d9d6cf"))
    p.drawEllipse(c, r, r)
    if flight is None:
        return
    d = flight.direction_deg
    fx, fy = flight_unit(d)
    nx, ny = side_normal(d, "upper")
    cx, cy = ball.center_px
    rr = ball.radius_px
    p.setPen(pen(colours.PLANE_LINE, 0.3, QtCore.Qt.PenStyle.DashLine))
    p.drawLine(view(cx - 1.5 * rr * nx, cy - 1.5 * rr * ny), view(cx + 1.5 * rr * nx, cy + 1.5 * rr * ny))
    p.setPen(pen(colours.FLIGHT_ARROW, 0.45))
    _arrow(p, view(cx + 0.15 * rr * fx, cy + 0.15 * rr * fy),
           view(cx + 0.85 * rr * fx, cy + 0.85 * rr * fy), head_mm=1.6)
    for side, colour in (("upper", colours.UPPER_SIDE), ("lower", colours.LOWER_SIDE)):
        _paint_mark(p, view, ball, d, side, record, colour)


def _paint_mark(p, view: _View, ball, direction_deg: float, side: str, record, colour: str) -> None:
    """Final separation (filled, labelled) and the proposal where it differs (hollow, dashed).

    A shot not yet reviewed has no final angle: its proposal is drawn in the side's colour and
    labelled with a question mark, so the sheet still shows where the machine put it.
    """
    final = record.final_deg(side)
    proposed = record.proposed_deg(side)
    centre, rr = ball.center_px, ball.radius_px
    open_proposal = final is None and record.pick.status == "to review"
    if proposed is not None and (final is None or abs(final - proposed) > 0.05):
        a = view(*point_at_angle(centre, rr * 1.0, direction_deg, side, proposed))
        b = view(*point_at_angle(centre, rr * 1.4, direction_deg, side, proposed))
        p.setPen(pen(colour if open_proposal else colours.PROPOSAL_MARK, 0.4,
                     QtCore.Qt.PenStyle.DashLine))
        p.drawLine(a, b)
        p.setBrush(qcolor("#ffffff"))
        p.drawEllipse(a, mm(1.0), mm(1.0))
        if open_proposal:
            _mark_label(p, view(*point_at_angle(centre, rr * 1.75, direction_deg, side, proposed)),
                        f"{side[0].upper()} {format_angle(proposed)}° ?", colour)
    if final is None:
        return
    a = view(*point_at_angle(centre, rr * 0.92, direction_deg, side, final))
    b = view(*point_at_angle(centre, rr * 1.45, direction_deg, side, final))
    p.setPen(pen("#ffffff", 0.9))
    p.drawLine(a, b)
    p.setPen(pen(colour, 0.5))
    p.drawLine(a, b)
    p.setBrush(qcolor(colour))
    p.drawEllipse(view(*point_at_angle(centre, rr, direction_deg, side, final)), mm(1.0), mm(1.0))
    _mark_label(p, view(*point_at_angle(centre, rr * 1.75, direction_deg, side, final)),
                f"{side[0].upper()} {format_angle(final)}°", colour)


def _mark_label(p, at: QtCore.QPointF, tag: str, colour: str) -> None:
    box = QtCore.QRectF(at.x() - mm(10), at.y() - mm(2.2), mm(20), mm(4.4))
    p.setPen(QtCore.Qt.PenStyle.NoPen)
    p.setBrush(qcolor("#ffffff", 215))
    p.drawRoundedRect(box, mm(1), mm(1))
    text(p, box, tag, 7.5, bold=True, colour=colour, flags=QtCore.Qt.AlignmentFlag.AlignCenter)


def _paint_field_legend(p, x: float, y: float, limit: float, view: _View, result,
                        arrow: tuple[float, float] | None) -> None:
    """Colour bar, scale bar and reference vector under the field picture (mm, top-left x, y)."""
    small = 6.8
    if math.isfinite(limit):
        text(p, rect_mm(x, y + 0.4, 20, 4), "vorticity", small, colour=colours.MUTED_INK)
        bar = rect_mm(x + 12.5, y + 1, 30, 2.4)
        lut = colours.vorticity_lut(64)
        step = bar.width() / len(lut)
        for i, (r, g, b) in enumerate(lut):
            p.fillRect(QtCore.QRectF(bar.left() + i * step, bar.top(), step + 1, bar.height()),
                       QtGui.QColor(int(r), int(g), int(b)))
        centre = QtCore.Qt.AlignmentFlag.AlignHCenter
        for value, at in ((-limit, 0.0), (0.0, 0.5), (limit, 1.0)):
            label = _signed(value) if value else "0"
            text(p, rect_mm(x + 12.5 + 30 * at - 8, y + 3.6, 16, 4), label, small - 0.4,
                 colour=colours.MUTED_INK, flags=centre)
        text(p, rect_mm(x + 44, y + 0.4, 10, 4), "1/s", small, colour=colours.MUTED_INK)
    scale_mm_px = result.scale_mm_per_px
    if scale_mm_px:
        # the longest round object length that stays under 20 mm on the page
        bar_mm = _round_length(mm(20) / view.scale * scale_mm_px)
        length = bar_mm / scale_mm_px * view.scale
        left = mm(x + 55)
        p.setPen(pen(colours.INK, 0.45))
        p.drawLine(QtCore.QPointF(left, mm(y + 2.2)), QtCore.QPointF(left + length, mm(y + 2.2)))
        text(p, QtCore.QRectF(left, mm(y + 3.6), mm(20), mm(4)), f"{bar_mm:g} mm", small,
             colour=colours.MUTED_INK)
    if arrow is not None:
        speed, length = arrow
        left = mm(x + 78)
        p.setPen(pen("#111111", 0.25))
        _arrow(p, QtCore.QPointF(left, mm(y + 2.2)), QtCore.QPointF(left + length, mm(y + 2.2)))
        unit = "m/s" if result.u_m_s is not None else "px"
        text(p, QtCore.QRectF(left, mm(y + 3.6), mm(30), mm(4)), f"{speed:.3g} {unit}", small,
             colour=colours.MUTED_INK)


def _signed(value: float) -> str:
    """Colour-bar end labels: three significant figures without exponents."""
    if abs(value) >= 100:
        return f"{value:+.0f}"
    return f"{value:+.3g}"


def _round_length(value_mm: float) -> float:
    if not value_mm or not math.isfinite(value_mm) or value_mm <= 0:
        return 10.0
    mag = 10 ** math.floor(math.log10(value_mm))
    return max(m * mag for m in (1, 2, 5) if m * mag <= value_mm)


def _paint_numbers(p, info, record, with_metadata: bool = False) -> None:
    """The shot's numbers, most important first (rows that do not fit are left out)."""
    x, y, w, h = info
    summary = record.summary or {}
    sep = summary.get("separation") or {}
    md = record.metadata or {}
    compact = h < 60
    label_w = 17.0
    size = 7.4 if compact else 8.2
    cy, bottom = y, y + h

    def row(label: str, value: str, colour: str = colours.INK, value_size: float = size,
            bold: bool = False, gap: float = 1.1) -> None:
        nonlocal cy
        if cy > bottom - 4:
            return
        text(p, rect_mm(x, cy + 0.3, label_w, 4.5), label, size - 0.6, colour=colours.MUTED_INK)
        used = text(p, rect_mm(x + label_w, cy, w - label_w, bottom - cy), value, value_size,
                    bold=bold, colour=colour)
        cy += max(used.height() / mm(1), 3.4) + gap

    for side, colour in (("upper", colours.UPPER_SIDE), ("lower", colours.LOWER_SIDE)):
        row(side, _final_text(record, side), colour, size + 2.2, bold=True, gap=0.2)
        row("", _side_detail(record, sep, side), colours.MUTED_INK, size - 0.6, gap=1.6)
    row("review", _review_text(record), colours.STATUS_COLOURS.get(record.pick.status, colours.INK),
        bold=True)
    if record.pick.reason:
        row("reason", record.pick.reason)
    row("note", record.pick.note or "-")
    row("wake", _wake_text(sep))
    row("flight", _flight_text(summary.get("flight") or {}))
    if with_metadata:
        row("shot", _metadata_line(record).replace("   ", ", ") or "-")
    row("vectors", _vector_text(summary.get("vectors")))
    row("timing", _timing_text(md, summary))
    if md.get("notes"):
        row("shot notes", str(md["notes"]))
    warnings = summary.get("warnings") or []
    if warnings:
        row("warnings", "; ".join(warnings[:2]), colours.MUTED_INK)


def _final_text(record, side: str) -> str:
    final = record.final_deg(side)
    if final is None:
        return {"unusable": "- (unusable)", "to review": "- (not reviewed)"}.get(
            record.pick.status, "-")
    return f"{format_angle(final)} deg" + ("  ADJUSTED" if _moved(record, side) else "")


def _moved(record, side: str) -> bool:
    """True when the analyst set this side's angle away from the proposal."""
    if record.pick.status != "adjusted":
        return False
    mine = getattr(record.pick, f"{side}_deg")
    proposed = record.proposed_deg(side)
    return mine is not None and (proposed is None or abs(mine - proposed) > 0.05)


def _side_detail(record, sep: dict, side: str) -> str:
    final = record.final_deg(side)
    parts = []
    if final is not None:
        parts.append(f"{format_angle(final + 90.0)} deg from front stagnation")
    parts.append("proposal " + _proposal_text(sep, side))
    return "; ".join(parts)


def _proposal_text(sep: dict, side: str) -> str:
    proposal = sep.get(side) or {}
    angle = proposal.get("angle_deg")
    if angle is None:
        return "none" + (f" ({proposal.get('reason')})" if proposal.get("reason") else "")
    out = f"{format_angle(angle)} deg"
    if proposal.get("uncertainty_deg") is not None:
        out += f" ± {format_angle(proposal['uncertainty_deg'])}"
    if proposal.get("quality") is not None:
        out += f",  quality {proposal['quality']:.2f}"
    return out


def _wake_text(sep: dict) -> str:
    state = sep.get("wake_state") or "undetermined"
    deflection = sep.get("wake_deflection_deg")
    if deflection is None:
        return state
    return f"{state}, deflected {deflection:+.1f} deg from the flight axis"


def _flight_text(flight: dict) -> str:
    if not flight:
        return "-"
    out = f"{flight.get('direction_deg', float('nan')):.1f} deg"
    if flight.get("speed_m_s") is not None:
        out += f" at {flight['speed_m_s']:.1f} m/s"
    if flight.get("source") and flight["source"] != "ball displacement":
        out += f" ({flight['source']})"
    return out


def _vector_text(vectors: dict | None) -> str:
    if not vectors:
        return "-"
    return (f"{vectors.get('valid', 0)} valid, {vectors.get('replaced', 0)} replaced, "
            f"{vectors.get('masked', 0)} masked; window {vectors.get('window_px')} px, "
            f"spacing {vectors.get('spacing_px', 0):g} px")


def _timing_text(md: dict, summary: dict) -> str:
    parts = []
    dt = summary.get("dt_s", md.get("dt_s"))
    if dt not in (None, ""):
        parts.append(f"dt {float(dt) * 1e6:.1f} us")
    scale = summary.get("scale_mm_per_px", md.get("scale_mm_per_px"))
    if scale not in (None, ""):
        parts.append(f"{float(scale):.4g} mm/px")
    if md.get("ball_diameter_mm") not in (None, ""):
        parts.append(f"ball {float(md['ball_diameter_mm']):g} mm")
    return ", ".join(parts) or "-"


def _review_text(record) -> str:
    pick = record.pick
    out = pick.status
    if pick.who:
        out += f" by {pick.who}"
    if pick.when:
        out += f", {pick.when[:16].replace('T', ' ')}"
    return out


# --- the whole sheet ----------------------------------------------------------------------------


def make_sheet(
    session,
    out_path: str | Path,
    *,
    shot_ids: list[str] | None = None,
    per_page: int = 2,
    statuses: tuple[str, ...] | None = None,
    column: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> SheetReport:
    """Write the shot sheet of ``session`` as a PDF.

    Parameters
    ----------
    session : core.session.Session
        An open session (read-only is enough).
    out_path : path
        The PDF to write (replaced atomically when complete).
    shot_ids : list of str, optional
        Shots to include (session order is kept); default all.
    per_page : int
        Shot panels per page: 1, 2, 3 (stacked) or 4 (two by two).
    statuses : tuple of str, optional
        Only shots whose review status is one of these.
    column : str, optional
        Numeric metadata column for the overview and the summary table; default the seam
        orientation when present.
    progress : callable(done, total), optional
        Called after each shot panel; an exception it raises stops the sheet (no file is left).

    Raises
    ------
    core.WakelineError
        Unknown shot, bad ``per_page`` or status, no shot left to print, unwritable output.
    """
    if per_page not in PER_PAGE_CHOICES:
        raise WakelineError(f"--per-page: must be one of {PER_PAGE_CHOICES}, not {per_page}")
    ensure_gui_application()
    all_records = session.records()
    records = select_records(session, shot_ids, statuses)
    if not records:
        raise WakelineError(f"{session.path}: no shot matches the selection; nothing to print")
    if column is None:
        column = default_column(records)
    elif column not in numeric_columns(records):
        raise WakelineError(
            f"--column: {column!r} is not a numeric column of this session "
            f"(choose from {', '.join(numeric_columns(records))})"
        )
    rows = summary_rows(records, column)
    total = summary_page_count(len(rows)) + shot_page_count(len(records), per_page)
    out_path = Path(out_path)
    tmp = out_path.with_name(out_path.name + ".part")
    name = getattr(session, "name", "") or Path(session.path).stem
    writer = _writer(tmp, name)
    painter = QtGui.QPainter()
    if not painter.begin(writer):
        raise WakelineError(f"{out_path}: cannot write the PDF here")
    try:
        pages = _Pages(painter, writer, name, total)
        _paint_cover(pages, session, all_records, records, column, rows,
                     _selection_text(records, all_records, shot_ids, statuses, per_page))
        _paint_shot_pages(pages, session, records, per_page, progress)
    except BaseException:
        painter.end()
        del writer
        tmp.unlink(missing_ok=True)
        raise
    painter.end()
    del writer  # closes the file
    os.replace(tmp, out_path)
    return SheetReport(out_path, pages.number, [r.shot_id for r in records])


def _writer(path: Path, title: str) -> QtGui.QPdfWriter:
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise WakelineError(f"{path.parent}: cannot create folder ({exc.strerror})") from None
    writer = QtGui.QPdfWriter(str(path))
    writer.setPageSize(QtGui.QPageSize(QtGui.QPageSize.PageSizeId.A4))
    writer.setPageOrientation(QtGui.QPageLayout.Orientation.Portrait)
    writer.setPageMargins(QtCore.QMarginsF(0, 0, 0, 0))
    writer.setResolution(DPI)
    writer.setTitle(f"wakeline shot sheet: {title}")
    writer.setCreator("wakeline")
    return writer


def _selection_text(records, all_records, shot_ids, statuses, per_page) -> str:
    parts = [f"This sheet: {len(records)} of {len(all_records)} shots"]
    if statuses:
        parts.append("status " + " or ".join(statuses))
    if shot_ids:
        parts.append("chosen by id")
    parts.append(f"{per_page} per page")
    return ", ".join(parts) + "."


def _paint_shot_pages(pages: _Pages, session, records, per_page: int, progress) -> None:
    cells = None
    for index, record in enumerate(records):
        slot = index % per_page
        if slot == 0:
            first = record.shot_id
            last = records[min(index + per_page, len(records)) - 1].shot_id
            pages.new_page(f"shots {first} - {last}" if first != last else f"shot {first}")
            cells = _panel_cells(per_page, pages.body())
        result = session.load_result(record.shot_id) if record.state == "processed" else None
        _paint_shot(pages.painter, cells[slot], record, result)
        if progress is not None:
            progress(index + 1, len(records))
