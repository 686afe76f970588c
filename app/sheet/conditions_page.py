"""The summary page of the shot sheet: separation against the condition with error bars, the
table of conditions (``core.conditions``), each condition's ensemble proposal when it was
computed, and how an imported second review agrees (``core.agreement``).
"""

from __future__ import annotations

import math

import numpy as np
from PySide6 import QtCore, QtGui

from app.review import colours
from app.review.conditions import (
    TABLE_HEADER,
    common_text,
    compact_ensemble_text,
    condition_cell_notes,
    condition_cells,
    plot_points,
)
from app.sheet.cover import paint_axes
from app.sheet.kit import Pages, mm, one_line, pen, qcolor, rect_mm, saved, text, triangle
from core.agreement import agreement_lines, compare_reviews, latest_layer
from core.conditions import CONFIDENCE, ensemble_outside

ROWS_FIRST_PAGE = 9  # leaves room below the table for an imported review's agreement
ROWS_PER_PAGE = 28
ROW_MM = 7.6  # a table row: the values, and under them the spread and counts in small print
SIDE_COLOURS = {"upper": colours.UPPER_SIDE, "lower": colours.LOWER_SIDE}
_RIGHT = QtCore.Qt.AlignmentFlag.AlignRight | QtCore.Qt.AlignmentFlag.AlignVCenter
_LEFT = QtCore.Qt.AlignmentFlag.AlignLeft | QtCore.Qt.AlignmentFlag.AlignVCenter


def conditions_page_count(conditions) -> int:
    """Pages the summary needs (none without conditions)."""
    if not conditions:
        return 0
    extra = max(0, len(conditions) - ROWS_FIRST_PAGE)
    return 1 + math.ceil(extra / ROWS_PER_PAGE)


def paint_conditions_page(pages: Pages, session, records, conditions, by,
                          ensembles=None, printed: int | None = None) -> None:
    """The summary page (and continuation pages for a long table) of the session's
    ``records``; ``printed``: how many of them the sheet prints, when not all."""
    p = pages.painter
    pages.new_page("conditions")
    x, y, w, _h = pages.body()
    text(p, rect_mm(x, y, w, 7), "Separation by condition", 13, bold=True,
         colour=colours.ACCENT)
    y += 7.5
    same = common_text(conditions)
    whole = ("" if printed is None or printed >= len(records) else
             f" (all {len(records)} of the session's shots, not only the {printed} this sheet "
             "prints)")
    note = (f"Shots grouped by {', '.join(by)}{whole}"
            + (f"; every condition: {same}" if same else "")
            + ". Per condition: the shots' final angles (the analyst's, else the proposal; "
            f"unusable shots left out), mean ± half-width of the {CONFIDENCE:.0%} interval: "
            "Student t on the shot-to-shot spread, or the shots' own mean ± over √n where "
            "wider; one shot: its own ±. Small print under each value: the shots' standard "
            "deviation (sd), \"shots' ±\" where their own ± set the interval.")
    if ensembles:
        note += (" Hollow diamonds: the condition's ensemble proposal (shots aligned on the "
                 "ball, one layer fitted to all of them) with its interval (the fit's, the "
                 "launches' spread and how far their mean lies); † in the table: the ensemble "
                 "lies outside the shots' interval.")
    axis, points = plot_points(conditions, ensembles)
    if any(pt.tag for pt in points):
        note += (f" Conditions at the same {axis} stand side by side, named above the axis by "
                 "what tells them apart.")
    used = text(p, rect_mm(x, y, w, 30), note, 7.5, colour=colours.MUTED_INK)
    y += used.height() / mm(1) + 2
    _paint_plot(p, rect_mm(x, y, w, 82), axis, points)
    y += 86
    cells = [(condition_cells(c, conditions, compact=True), condition_cell_notes(c))
             for c in conditions]
    if ensembles:
        for (row, notes), condition in zip(cells, conditions, strict=True):
            view = ensembles.get(condition.label)
            row.append(compact_ensemble_text(view, ensemble_outside(condition, view)))
            notes.append("")
    y = _paint_table(p, x, y, w, cells[:ROWS_FIRST_PAGE], bool(ensembles))
    layer = latest_layer(session.review_layers()) if hasattr(session, "review_layers") else None
    if layer is not None and len(cells) <= ROWS_FIRST_PAGE:
        lines = agreement_lines(compare_reviews(records, layer))
        text(p, rect_mm(x, y + 3, w, 30), "\n".join(lines), 7.5)
    rest = cells[ROWS_FIRST_PAGE:]
    while rest:
        pages.new_page("conditions, continued")
        x, y, w, _h = pages.body()
        _paint_table(p, x, y, w, rest[:ROWS_PER_PAGE], bool(ensembles))
        rest = rest[ROWS_PER_PAGE:]


def _paint_plot(p: QtGui.QPainter, frame: QtCore.QRectF, axis: str, points) -> None:
    with saved(p):
        _paint_plot_inside(p, frame, axis, points)


def _paint_plot_inside(p: QtGui.QPainter, frame: QtCore.QRectF, axis: str, points) -> None:
    plot = frame.adjusted(mm(16), mm(2), -mm(3), -mm(17))
    p.fillRect(plot, qcolor("#ffffff"))
    if not points:
        text(p, plot, "No condition with a separation angle to draw.", 9, italic=True,
             colour=colours.MUTED_INK, flags=QtCore.Qt.AlignmentFlag.AlignCenter)
        return
    values = [v for pt in points for v in (pt.mean, pt.low, pt.high) if v is not None]
    ylo, yhi = min(min(values), 0.0), max(max(values), 0.0)
    pad = max(2.0, 0.08 * (yhi - ylo))
    ylo, yhi = ylo - pad, yhi + pad
    if any(pt.tag for pt in points):
        ylo -= 0.14 * (yhi - ylo)  # room for the tags under the lowest bar
    xs = np.array([pt.x for pt in points])
    span = float(xs.max() - xs.min())
    if span > 0:
        xlo, xhi = float(xs.min()) - 0.08 * span, float(xs.max()) + 0.08 * span
    else:  # one value: a span of its order of magnitude about it (seam 10 deg: 5 to 15)
        half = 0.5 * (10.0 ** math.floor(math.log10(abs(xs[0]))) if xs[0] else 1.0)
        xlo, xhi = float(xs[0]) - half, float(xs[0]) + half
    # upper left of lower, each ensemble further out beside its shots' mean, so that no bar runs
    # through another's marker; conditions at the same x side by side
    side, shift, apart = (f * (xhi - xlo) for f in (0.008, 0.014, 0.045))

    def to_page(xv: float, yv: float) -> QtCore.QPointF:
        return QtCore.QPointF(plot.left() + (xv - xlo) / (xhi - xlo) * plot.width(),
                              plot.bottom() - (yv - ylo) / (yhi - ylo) * plot.height())

    paint_axes(p, plot, (xlo, xhi), (ylo, yhi), to_page, axis)
    p.setClipRect(plot)
    p.setPen(pen(colours.PLANE_LINE, 0.3, QtCore.Qt.PenStyle.DashLine))
    p.drawLine(to_page(xlo, 0.0), to_page(xhi, 0.0))
    tags = {}
    for pt in points:
        x = pt.x + (pt.place[0] - 0.5 * (pt.place[1] - 1)) * apart
        if pt.tag:
            tags[x] = pt.tag
        outward = -1.0 if pt.side == "upper" else 1.0
        x += outward * (side + (shift if pt.kind == "ensemble" else 0.0))
        colour = SIDE_COLOURS[pt.side]
        if pt.low is not None:
            _error_bar(p, to_page(x, pt.low), to_page(x, pt.high), colour)
        centre = to_page(x, pt.mean)
        if pt.kind == "ensemble":
            _diamond(p, centre, colour)
        else:
            triangle(p, centre, pt.side == "upper", colour, True)
    for k, (x, tag) in enumerate(sorted(tags.items())):
        # staggered in two rows above the axis, so that neighbours' names do not run together
        under = to_page(x, ylo)
        box = QtCore.QRectF(under.x() - mm(12), under.y() - mm(3.6 if k % 2 else 7.0), mm(24),
                            mm(3.2))
        one_line(p, box, tag, (6.5, 5.5), colour=colours.MUTED_INK,
                 flags=QtCore.Qt.AlignmentFlag.AlignHCenter)
    p.setClipping(False)
    _legend(p, frame.left() + mm(16), frame.bottom() - mm(5.5),
            any(pt.kind == "ensemble" for pt in points))


def _error_bar(p, low: QtCore.QPointF, high: QtCore.QPointF, colour: str) -> None:
    p.setPen(pen(colour, 0.3))
    p.drawLine(low, high)
    cap = mm(0.9)
    for end in (low, high):
        p.drawLine(QtCore.QPointF(end.x() - cap, end.y()), QtCore.QPointF(end.x() + cap, end.y()))


def _diamond(p, centre: QtCore.QPointF, colour: str, size_mm: float = 2.8) -> None:
    s = mm(size_mm) / 2
    poly = QtGui.QPolygonF([QtCore.QPointF(centre.x(), centre.y() - s),
                            QtCore.QPointF(centre.x() + s, centre.y()),
                            QtCore.QPointF(centre.x(), centre.y() + s),
                            QtCore.QPointF(centre.x() - s, centre.y())])
    p.setPen(pen(colour, 0.35))
    p.setBrush(qcolor("#ffffff"))
    p.drawPolygon(poly)


def _legend(p, x: float, y: float, ensemble: bool) -> None:
    cx = x
    for label, side in (("upper side: mean of the shots", "upper"),
                        ("lower side", "lower")):
        triangle(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), side == "upper",
                 SIDE_COLOURS[side], True)
        text(p, QtCore.QRectF(cx + mm(4), y, mm(50), mm(4)), label, 7.5)
        cx += mm(52) if side == "upper" else mm(24)
    if ensemble:
        _diamond(p, QtCore.QPointF(cx + mm(1.5), y + mm(2)), colours.INK)
        cx += mm(4)
    text(p, QtCore.QRectF(cx, y, mm(70), mm(4)),
         ("ensemble proposal; " if ensemble else "") + "bars: 95 % intervals", 7.5)


def _paint_table(p, x: float, y: float, w: float, rows, with_ensemble: bool) -> float:
    """The conditions' table from ``y`` (mm); ``rows``: (cells, small notes under them) of
    each condition. Returns where it ends."""
    heads = [*TABLE_HEADER, *(["ensemble"] if with_ensemble else [])]
    widths = [0.22, 0.07, 0.13, 0.13, 0.13, 0.12, 0.20]  # Re: "1.39-1.44 × 10⁵" on one line
    if with_ensemble:
        widths = [0.19, 0.065, 0.10, 0.10, 0.115, 0.09, 0.105, 0.235]
    row_h = 5.0
    p.fillRect(rect_mm(x, y, w, row_h), qcolor(colours.ACCENT))
    cx = x
    for k, (head, frac) in enumerate(zip(heads, widths, strict=True)):
        one_line(p, rect_mm(cx + 1, y, frac * w - 2, row_h), head, (7.5, 6.8, 6.2, 5.8), bold=True,
                 colour="#ffffff", flags=_LEFT if k == 0 else _RIGHT)
        cx += frac * w
    y += row_h
    for k, (row, notes) in enumerate(rows):
        if k % 2:
            p.fillRect(rect_mm(x, y, w, ROW_MM), qcolor(colours.PAPER_TINT))
        cx = x
        for col, (cell, note, frac) in enumerate(zip(row, notes, widths, strict=True)):
            # on one line, smaller where it must (a long condition name, the ensemble's cell)
            flags = _LEFT if col == 0 else _RIGHT
            one_line(p, rect_mm(cx + 1, y + 0.4, frac * w - 2, 4.4), cell, (6.8, 6.2, 5.6),
                     flags=flags)
            if note:
                one_line(p, rect_mm(cx + 1, y + 4.2, frac * w - 2, 3.0), note, (5.6, 5.0, 4.6),
                         colour=colours.MUTED_INK, flags=flags)
            cx += frac * w
        y += ROW_MM
    p.setPen(pen(colours.RULE, 0.3))
    p.drawLine(QtCore.QPointF(mm(x), mm(y)), QtCore.QPointF(mm(x + w), mm(y)))
    return y
