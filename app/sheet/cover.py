"""The cover of the shot sheet: the session's name, counts by review status and processing
state, the session overview plot and where the statistics per condition are.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PySide6 import QtCore, QtGui

from app.review import colours
from app.review.columns import BACK_TO_REVIEW, status_text
from app.review.overview import PLOTTED_STATUSES, OverviewPoints, left_out_text, overview_points
from app.sheet.content import (
    process_counts,
    session_date,
    status_counts,
)
from app.sheet.kit import (
    Pages,
    font,
    mm,
    nice_ticks,
    pen,
    qcolor,
    rect_mm,
    saved,
    text,
    tick_label,
    triangle,
)
from core.store import ProcessState, ReviewStatus


def paint_cover(pages: Pages, session, all_records, records, column: str,
                has_conditions: bool, selection_text: str) -> None:
    p = pages.painter
    pages.new_page("cover")
    x, y, w, _h = pages.body()
    name = getattr(session, "name", "") or Path(session.path).stem
    size = _name_size(p, name, w)
    used = text(p, rect_mm(x, y, w, 20), name, size, bold=True, colour=colours.ACCENT)
    y += used.height() / mm(1) + 1.5
    info = (f"Session file: {Path(session.path).name}    Date: {session_date(session, all_records)}"
            f"    Shots in session: {len(all_records)}")
    text(p, rect_mm(x, y, w, 5), info, 8.5, colour=colours.MUTED_INK)
    y += 5
    text(p, rect_mm(x, y, w, 5), selection_text, 8.5, colour=colours.MUTED_INK)
    y += 8
    stale = sum(r.state == ProcessState.PROCESSED and session.needs_processing(r.shot_id)
                for r in all_records) if hasattr(session, "needs_processing") else 0
    if len(records) < len(all_records):  # the counts below are the session's, not the sheet's
        text(p, rect_mm(x, y - 2, w, 5), f"The whole session ({len(all_records)} shots):", 8.5,
             bold=True, colour=colours.INK)
        y += 4
    y = _paint_status_boxes(p, x, y, w, all_records, stale)
    y += 5
    text(p, rect_mm(x, y, w, 6), "Session overview", 11, bold=True)
    y += 6.5
    pts = overview_points(records, column)
    _paint_overview(p, rect_mm(x, y, w, 88), pts)
    y += 90
    text(p, rect_mm(x, y, w, 5), left_out_text(pts) or " ", 7.5, colour=colours.MUTED_INK)
    y += 6
    # the statistics per condition are the next page's, in the form the window's Conditions
    # dock and the conditions table give them: one form for one handover
    text(p, rect_mm(x, y, w, 5), conditions_pointer(has_conditions), 8.5, colour=colours.INK)


def _name_size(p, name: str, width_mm: float) -> float:
    """The largest size (20 pt down to 11) at which the session's name fits in two lines."""
    for size in (20.0, 17.0, 14.0, 12.0, 11.0):
        p.setFont(font(size, bold=True))
        metrics = p.fontMetrics()
        box = metrics.boundingRect(QtCore.QRect(0, 0, int(mm(width_mm)), 10**6),
                                   int(QtCore.Qt.TextFlag.TextWordWrap), name)
        if box.height() <= 2.2 * metrics.lineSpacing():
            return size
    return 11.0


def _paint_status_boxes(p, x: float, y: float, w: float, records, stale: int = 0) -> float:
    """The count of each review status, then of each processing state (``stale``: shots
    processed with other settings than the session's now)."""
    counts = status_counts(records)
    processing = process_counts(records)
    sent_back = sum(status_text(r) == BACK_TO_REVIEW for r in records)
    box_w = (w - 3 * 3) / 4
    for i, status in enumerate(ReviewStatus):
        bx = x + i * (box_w + 3)
        colour = colours.STATUS_COLOURS[status]
        p.fillRect(rect_mm(bx, y, box_w, 15), qcolor(colour, 28))
        p.fillRect(rect_mm(bx, y, 1.6, 15), qcolor(colour))
        text(p, rect_mm(bx + 4, y + 1.2, box_w - 5, 8), str(counts.get(status, 0)), 16, bold=True,
             colour=colour)
        label = (f"{status}, {sent_back} sent back" if status == ReviewStatus.TO_REVIEW
                 and sent_back else str(status))
        text(p, rect_mm(bx + 4, y + 9.2, box_w - 5, 5), label, 8.5, colour=colours.INK)
    y += 17
    parts = [f"{n} {state}" + (f" ({stale} with other settings than the session's now or by "
                               "an older wakeline: process again)"
                               if stale and state == ProcessState.PROCESSED else "")
             for state, n in sorted(processing.items())]
    text(p, rect_mm(x, y, w, 5), "Processing: " + ", ".join(parts), 8,
         colour=colours.DISAGREEMENT if stale else colours.MUTED_INK)
    return y + 5


def _paint_overview(p: QtGui.QPainter, frame: QtCore.QRectF, pts: OverviewPoints) -> None:
    """The session overview as vector graphics: angles against ``pts.column``."""
    with saved(p):
        _paint_overview_inside(p, frame, pts)


def _paint_overview_inside(p: QtGui.QPainter, frame: QtCore.QRectF,
                           pts: OverviewPoints) -> None:
    plot = frame.adjusted(mm(16), mm(2), -mm(3), -mm(21))
    if not len(pts):
        p.fillRect(plot, qcolor(colours.PAPER_TINT))
        text(p, plot, "No shot with a separation angle to draw.", 9, italic=True,
             colour=colours.MUTED_INK, flags=QtCore.Qt.AlignmentFlag.AlignCenter)
        return
    p.fillRect(plot, qcolor("#ffffff"))
    ys = np.concatenate([pts.upper_deg + np.nan_to_num(pts.upper_u_deg),
                         pts.upper_deg - np.nan_to_num(pts.upper_u_deg),
                         pts.lower_deg + np.nan_to_num(pts.lower_u_deg),
                         pts.lower_deg - np.nan_to_num(pts.lower_u_deg)])
    ys = ys[np.isfinite(ys)]
    ylo, yhi = (float(ys.min()), float(ys.max())) if ys.size else (-10.0, 30.0)
    ylo, yhi = min(ylo, 0.0), max(yhi, 0.0)
    pad = max(2.0, 0.08 * (yhi - ylo))
    ylo, yhi = ylo - pad, yhi + pad
    xs = pts.drawn_x()
    single = pts.single_x_range()
    if single is not None:
        xlo, xhi = single
    else:
        xlo, xhi = float(xs.min()), float(xs.max())
        xlo, xhi = xlo - 0.06 * (xhi - xlo), xhi + 0.06 * (xhi - xlo)

    def to_page(xv: float, yv: float) -> QtCore.QPointF:
        px = plot.left() + (xv - xlo) / (xhi - xlo) * plot.width()
        py = plot.bottom() - (yv - ylo) / (yhi - ylo) * plot.height()
        return QtCore.QPointF(px, py)

    paint_axes(p, plot, (xlo, xhi), (ylo, yhi), to_page, pts.column,
               x_ticks=None if single is None else [pts.single_x()])
    p.setClipRect(plot)
    p.setPen(pen(colours.PLANE_LINE, 0.3, QtCore.Qt.PenStyle.DashLine))
    p.drawLine(to_page(xlo, 0.0), to_page(xhi, 0.0))
    p.setPen(pen(colours.RULE, 0.35))
    for i in range(len(pts)):
        if np.isfinite(pts.upper_deg[i]) and np.isfinite(pts.lower_deg[i]):
            p.drawLine(to_page(xs[i], pts.upper_deg[i]), to_page(xs[i], pts.lower_deg[i]))
    _paint_error_bars(p, pts, xs, to_page)
    for i in range(len(pts)):
        colour = colours.STATUS_COLOURS[pts.status[i]]
        for value, up in ((pts.upper_deg[i], True), (pts.lower_deg[i], False)):
            if np.isfinite(value):
                triangle(p, to_page(xs[i], value), up, colour, bool(pts.is_final[i]))
    p.setClipping(False)
    _paint_overview_legend(p, frame.left() + mm(16), frame.bottom() - mm(9.5))


def _paint_error_bars(p, pts: OverviewPoints, xs: np.ndarray, to_page) -> None:
    """Each proposal's uncertainty (95 %) as a bar with end caps; none where moved by hand."""
    p.setPen(pen(colours.MUTED_INK, 0.25))
    cap = mm(0.8)
    for values, spreads in ((pts.upper_deg, pts.upper_u_deg), (pts.lower_deg, pts.lower_u_deg)):
        for x, value, spread in zip(xs, values, spreads, strict=True):
            if not (np.isfinite(value) and np.isfinite(spread)):
                continue
            top, bottom = to_page(x, value + spread), to_page(x, value - spread)
            p.drawLine(top, bottom)
            for end in (top, bottom):
                p.drawLine(QtCore.QPointF(end.x() - cap, end.y()),
                           QtCore.QPointF(end.x() + cap, end.y()))


def paint_axes(p, plot: QtCore.QRectF, xr, yr, to_page, column: str, x_ticks=None) -> None:
    """Grid, tick labels, frame and axis titles; ``x_ticks`` in place of evenly spread ones."""
    grid = pen(colours.RULE, 0.15)
    p.setPen(grid)
    for xv in nice_ticks(*xr, 8) if x_ticks is None else x_ticks:
        a = to_page(xv, yr[0])
        p.setPen(grid)
        p.drawLine(a, QtCore.QPointF(a.x(), plot.top()))
        text(p, QtCore.QRectF(a.x() - mm(8), plot.bottom() + mm(1), mm(16), mm(4)),
             tick_label(xv), 7.5, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    for yv in nice_ticks(*yr, 7):
        a = to_page(xr[0], yv)
        p.setPen(grid)
        p.drawLine(a, QtCore.QPointF(plot.right(), a.y()))
        text(p, QtCore.QRectF(plot.left() - mm(11), a.y() - mm(2), mm(10), mm(4)),
             tick_label(yv), 7.5,
             flags=QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignVCenter)
    p.setPen(pen(colours.MUTED_INK, 0.3))
    p.setBrush(QtCore.Qt.BrushStyle.NoBrush)
    p.drawRect(plot)
    text(p, QtCore.QRectF(plot.left(), plot.bottom() + mm(5), plot.width(), mm(5)), column, 8.5,
         bold=True, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    with saved(p):
        p.translate(plot.left() - mm(15), plot.center().y())
        p.rotate(-90)
        text(p, QtCore.QRectF(-mm(40), 0, mm(80), mm(4.5)), "separation angle (deg, + rearward)",
             8, bold=True, flags=QtCore.Qt.AlignmentFlag.AlignHCenter)



def _paint_overview_legend(p, x: float, y: float) -> None:
    cx = x
    for label, up in (("upper side", True), ("lower side", False)):
        triangle(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), up, colours.INK, True)
        text(p, QtCore.QRectF(cx + mm(4), y, mm(22), mm(4)), label, 7.5)
        cx += mm(24)
    for status in PLOTTED_STATUSES:
        p.fillRect(QtCore.QRectF(cx, y + mm(0.8), mm(2.6), mm(2.6)),
                   qcolor(colours.STATUS_COLOURS[status]))
        text(p, QtCore.QRectF(cx + mm(4), y, mm(22), mm(4)), status, 7.5)
        cx += mm(22)
    triangle(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), True, colours.MUTED_INK, False)
    text(p, QtCore.QRectF(cx + mm(4), y, mm(48), mm(4)), "hollow: proposal, not yet reviewed",
         7.5)
    y += mm(4.5)  # a second line: the bars
    p.setPen(pen(colours.MUTED_INK, 0.25))
    p.drawLine(QtCore.QPointF(x + mm(1.5), y + mm(0.3)), QtCore.QPointF(x + mm(1.5), y + mm(3.7)))
    text(p, QtCore.QRectF(x + mm(4), y, mm(150), mm(4)), "bar: the proposal's ± (holds the "
         "true angle in 95 % of proposals); none where the analyst moved the mark", 7.5)


def conditions_pointer(has_conditions: bool) -> str:
    """Where the sheet's statistics are: the conditions page, or why there is none."""
    if has_conditions:
        return ("Each condition's mean angles with their 95 % intervals: the next page "
                "(Separation by condition).")
    return ("No manifest column groups these shots into conditions: each shot's angles are on "
            "its panel, and all of them in the table (wakeline table).")
