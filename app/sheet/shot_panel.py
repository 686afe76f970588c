"""One shot's panel on the sheet: its title bar, the field picture (vorticity, vectors, ball,
flight, separation marks, legend) and its numbers.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from PySide6 import QtCore, QtGui

from app.review import colours
from app.review.columns import BACK_TO_REVIEW, status_text
from app.review.marks import fitted_layer_lines, moved_from_proposal
from app.review.scales import ARROW_CELL_SHARE, round_length, shot_limit
from app.review.text import (
    MISSING,
    SHEET_DECIMALS,
    flight_text,
    outdated_uncertainty_note,
    proposal_remarks,
    reviewed_wake_text,
    reynolds_text,
    vectors_text,
)
from app.sheet.content import (
    final_text,
    metadata_line,
    note_text,
    review_text,
    sheet_angle,
    side_detail,
    timing_text,
)
from app.sheet.kit import (
    PANEL_GAP_MM,
    draw_arrow,
    font,
    mm,
    one_line,
    pen,
    qcolor,
    rect_mm,
    saved,
    text,
)
from core.geometry import flight_unit, mid_circle, point_at_angle, side_normal
from core.store import ReviewStatus

HEADER_METADATA_PT = (7.5, 7.0, 6.5)  # the panel header's metadata, largest that fits
NUMBER_SIZES_PT = (8.2, 7.4, 6.8, 6.2, 5.8)  # the panel's numbers, largest at which all fit
PICTURE_MIN_SHARE = 0.4  # of a stacked panel's height, kept for the picture
LEGEND_MM = 9.0  # the colour bar, scale bar and reference vector under the picture
LEGEND_MIN_MM = 100.0  # the width the legend needs in one line


def panel_cells(per_page: int, body) -> list[tuple[float, float, float, float]]:
    x, y, w, h = body
    if per_page == 4:
        cw, ch = (w - PANEL_GAP_MM) / 2, (h - PANEL_GAP_MM) / 2
        return [(x + c * (cw + PANEL_GAP_MM), y + r * (ch + PANEL_GAP_MM), cw, ch)
                for r in range(2) for c in range(2)]
    ch = (h - (per_page - 1) * PANEL_GAP_MM) / per_page
    return [(x, y + i * (ch + PANEL_GAP_MM), w, ch) for i in range(per_page)]


def paint_shot(p, cell, record, result, vorticity_limit_1_s: float | None = None,
               checks=(), unreadable: str | None = None) -> None:
    """One shot's panel in ``cell`` (mm); the vorticity colours run to ``vorticity_limit_1_s``
    (None: the shot's own range); ``checks``: where its ball and flight look wrong
    (``core.plausibility.shot_checks``); ``unreadable``: why its stored result could not be
    read (the panel shows it in place of the field)."""
    x, y, w, h = cell
    colour = colours.STATUS_COLOURS.get(record.pick.status, colours.MUTED_INK)
    p.fillRect(rect_mm(x, y, w, 8), qcolor(colours.PAPER_TINT))
    p.fillRect(rect_mm(x, y, 1.6, 8), qcolor(colour))
    title = f"Shot {record.shot_id}"
    shown, size = one_line(p, rect_mm(x + 3.5, y, w - 37, 8), title, (12.5, 11.0, 9.5),
                           bold=True)
    p.setFont(font(size, bold=True))
    title_w = p.fontMetrics().horizontalAdvance(shown) / mm(1)
    # as the shot list says it: "back to review" where the measurement sent a decision back
    pill = (BACK_TO_REVIEW if status_text(record) == BACK_TO_REVIEW
            else str(record.pick.status)).upper()
    p.setBrush(qcolor(colour))
    p.setPen(QtCore.Qt.PenStyle.NoPen)
    p.drawRoundedRect(rect_mm(x + w - 30, y + 1.5, 28, 5), mm(2.4), mm(2.4))
    one_line(p, rect_mm(x + w - 29, y + 1.5, 26, 5), pill, (8, 7, 6), bold=True,
             colour="#ffffff", flags=QtCore.Qt.AlignmentFlag.AlignCenter)
    narrow = w < 120  # two panels across: the metadata goes with the numbers instead
    if not narrow:  # one line between the title and the status, shrunk or cut short with "…"
        left = x + 3.5 + title_w + 4
        one_line(p, rect_mm(left, y, x + w - 33 - left, 8), metadata_line(record),
                 HEADER_METADATA_PT, colour=colours.MUTED_INK,
                 flags=QtCore.Qt.AlignmentFlag.AlignRight)
    rows = number_rows(record, with_metadata=narrow, checks=checks)
    pic, info = _split(p, (x, y + 10, w, h - 10), rows, result, narrow)
    if result is None:
        reason = unreadable or record.failure or "not processed yet"
        p.fillRect(rect_mm(*pic), qcolor(colours.PAPER_TINT))
        text(p, rect_mm(pic[0] + 4, pic[1] + pic[3] / 2 - 15, pic[2] - 8, 30),
             f"No field: {reason}", 9, italic=True, colour=colours.MUTED_INK,
             flags=QtCore.Qt.AlignmentFlag.AlignCenter)
    else:
        _paint_field(p, pic, record, result, vorticity_limit_1_s)
        if record.failure:
            p.fillRect(rect_mm(pic[0], pic[1], pic[2], 4.6), qcolor(colours.PAPER_TINT))
            one_line(p, rect_mm(pic[0] + 1, pic[1], pic[2] - 2, 4.6),
                     # what failed leads, its explanation may give way (the table keeps it)
                     "Last good run shown; the latest failed: "
                     + failure_words(record.failure, record.shot_id),
                     (7.5, 6.5), colour=colours.DISAGREEMENT)
    _paint_numbers(p, info, rows)


def failure_words(failure: str, shot_id: str) -> str:
    """A failed run's reason as a panel of its shot shows it: without the shot's name, which
    the panel's title gives, and with files by their names (the table keeps the whole line)."""
    words = failure.removeprefix(f"shot {shot_id}: ")
    return _FILE_PATH.sub(r"\1", words)


#: An absolute path to a file the measurement reads (folders may hold spaces), its name kept.
_FILE_PATH = re.compile(r"(?<![\w.])/[^\n]*?/([^/\n]+?\.(?:tiff?|png|h5|csv|npy))\b",
                        re.IGNORECASE)


def _split(p, area, rows, result, narrow: bool):
    """The panel below its title bar, ``area`` (mm), split into the field picture and the
    numbers: side by side on a wide panel (the numbers get the width the picture leaves
    unused), else stacked (the picture gives up height, to ``PICTURE_MIN_SHARE``, where the
    numbers need it)."""
    x, y, w, h = area
    if w > 1.25 * h:
        text_w = min(72.0, w * 0.42)
        if result is not None:
            _x0, _y0, bw, bh = _crop_box(result, (w - text_w - 4) / (h - LEGEND_MM))
            used = (h - LEGEND_MM) * bw / bh
            text_w = min(max(text_w, w - 4 - max(used, LEGEND_MIN_MM)), w * 0.5)
        return (x, y, w - text_w - 4, h), (x + w - text_w, y, text_w, h)
    pic_h = h * (0.5 if narrow else 0.56)
    need = _rows_height(p, rows, w, NUMBER_SIZES_PT[-2])
    pic_h = max(PICTURE_MIN_SHARE * h, min(pic_h, h - 3 - need))
    return (x, y, w, pic_h), (x, y + pic_h + 3, w, h - pic_h - 3)



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


def scale_bar_mm(result, scale: float) -> float:
    """The scale bar's length (mm of the object) under a picture of ``scale`` device units per
    image px: a round length of about the ball's size, so that every panel of a ball shows one
    bar (following each picture's crop, identical shots got 50 and 100 mm); where that would
    be under 6 or over 22 mm on the page, the longest round length under 20 mm there."""
    from core.shot import stated_ball_diameter_mm

    scale_mm_px = result.scale_mm_per_px
    diameter = stated_ball_diameter_mm(result.settings)
    bar_mm = round_length(0.7 * diameter) if diameter else 0.0
    if not mm(6) <= bar_mm / scale_mm_px * scale <= mm(22):
        bar_mm = round_length(mm(20) / scale * scale_mm_px)
    return bar_mm


def _crop_box(result, aspect: float) -> tuple[float, float, float, float]:
    """Image-px box (x0, y0, w, h) around the ball and its wake, with the given w/h aspect."""
    vf = result.field
    spacing = float(vf.spacing_px)
    fx0, fx1 = float(np.nanmin(vf.x_px)) - spacing / 2, float(np.nanmax(vf.x_px)) + spacing / 2
    fy0, fy1 = float(np.nanmin(vf.y_px)) - spacing / 2, float(np.nanmax(vf.y_px)) + spacing / 2
    circle = mid_circle(result.ball_a, result.ball_b)
    if circle is None or result.flight is None:
        bx0, by0, bx1, by1 = fx0, fy0, fx1, fy1
    else:
        (cx, cy), r = circle
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


def _paint_field(p, pic, record, result, vorticity_limit_1_s: float | None) -> None:
    x, y, w, h = pic
    frame = rect_mm(x, y, w, h - LEGEND_MM)
    x0, y0, bw, bh = _crop_box(result, frame.width() / frame.height())
    scale = min(frame.width() / bw, frame.height() / bh)
    view = _View(x0, y0, scale, frame.left() + (frame.width() - bw * scale) / 2,
                 frame.top() + (frame.height() - bh * scale) / 2)
    shown = QtCore.QRectF(view(x0, y0), view(x0 + bw, y0 + bh))
    with saved(p):
        p.fillRect(shown, qcolor("#e4e1da"))
        p.setClipRect(shown)
        limit = _paint_vorticity(p, view, result, vorticity_limit_1_s)
        arrow = _paint_vectors(p, view, result, (x0, y0, bw, bh))
        _paint_ball(p, view, record, result)
        p.setClipping(False)
        p.setPen(pen(colours.MUTED_INK, 0.25))
        p.setBrush(QtCore.Qt.BrushStyle.NoBrush)
        p.drawRect(shown)
    _paint_field_legend(p, (x, x + w), shown.left() / mm(1), shown.bottom() / mm(1) + 1.2,
                        limit, view, result, arrow)


def _paint_vorticity(p, view: _View, result, limit: float | None) -> float:
    w = result.vorticity_1_s
    vf = result.field
    if w is None:
        return float("nan")
    limit = shot_limit(w) if limit is None else limit  # as the window draws the shot
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
    ref = round_length(float(np.percentile(speed, 95))) if np.percentile(speed, 95) > 0 else 1.0
    length_px = ARROW_CELL_SHARE * stride * float(vf.spacing_px)  # image px for the reference speed
    p.setPen(pen("#111111", 0.18))
    for xv, yv, uv, vv in zip(xs[inside], ys[inside], us[inside], vs[inside]):
        draw_arrow(p, view(xv, yv), view(xv + uv / ref * length_px, yv + vv / ref * length_px))
    return ref, length_px * view.scale



def _paint_ball(p, view: _View, record, result) -> None:
    """The ball at mid-exposure (where the angles were fitted), the plane normal to the flight,
    the flight arrow, each side's fitted layer and proposal's uncertainty, and the marks."""
    circle = mid_circle(result.ball_a, result.ball_b)
    if circle is None:
        return
    centre, rr = circle
    p.setPen(pen(colours.BALL_OUTLINE, 0.35))
    p.setBrush(qcolor("#d9d6cf"))
    p.drawEllipse(view(*centre), rr * view.scale, rr * view.scale)
    flight = result.flight
    if flight is None:
        return
    d = flight.direction_deg
    fx, fy = flight_unit(d)
    nx, ny = side_normal(d, "upper")
    cx, cy = centre
    p.setPen(pen(colours.PLANE_LINE, 0.3, QtCore.Qt.PenStyle.DashLine))
    p.drawLine(view(cx - 1.5 * rr * nx, cy - 1.5 * rr * ny), view(cx + 1.5 * rr * nx, cy + 1.5 * rr * ny))
    p.setPen(pen(colours.FLIGHT_ARROW, 0.45))
    draw_arrow(p, view(cx + 0.15 * rr * fx, cy + 0.15 * rr * fy),
           view(cx + 0.85 * rr * fx, cy + 0.85 * rr * fy), head_mm=1.6)
    for side, colour in (("upper", colours.UPPER_SIDE), ("lower", colours.LOWER_SIDE)):
        _paint_layer(p, view, circle, d, side, result, colour)
        _paint_uncertainty(p, view, circle, d, side, record, colour)
        _paint_mark(p, view, circle, d, side, record, colour)


def _paint_layer(p, view: _View, circle, direction_deg: float, side: str, result,
                 colour: str) -> None:
    """The side's fitted dividing line, as far as the band it was fitted to."""
    layer = getattr(result.separation, side).layer if result.separation else None
    lines = fitted_layer_lines(circle, direction_deg, side, layer)
    if lines is None:
        return
    p.setPen(pen(colour, 0.3))
    p.drawPolyline(QtGui.QPolygonF([view(x, y) for x, y in lines["dividing"]]))


def _paint_uncertainty(p, view: _View, circle, direction_deg: float, side: str, record,
                       colour: str) -> None:
    """An arc just outside the outline over the proposal's uncertainty (95 %)."""
    proposed, spread = record.proposed_deg(side), record.uncertainty_deg(side)
    if proposed is None or not spread:
        return
    angles = np.linspace(proposed - spread, proposed + spread, 33)
    centre, rr = circle
    arc = [view(*point_at_angle(centre, rr * 1.07, direction_deg, side, a)) for a in angles]
    p.setPen(pen(colour, 0.7))
    p.setBrush(QtCore.Qt.BrushStyle.NoBrush)
    p.drawPolyline(QtGui.QPolygonF(arc))


def _paint_mark(p, view: _View, circle, direction_deg: float, side: str, record,
                colour: str) -> None:
    """Final separation (filled, labelled) and the proposal where it differs (hollow, dashed).

    A shot not yet reviewed has no final angle: its proposal is drawn in the side's colour and
    labelled with a question mark, so the sheet still shows where the machine put it.
    """
    final = record.final_deg(side)
    proposed = record.proposed_deg(side)
    centre, rr = circle
    open_proposal = final is None and record.pick.status == ReviewStatus.TO_REVIEW
    if proposed is not None and (final is None or moved_from_proposal(final, proposed)):
        a = view(*point_at_angle(centre, rr * 1.0, direction_deg, side, proposed))
        b = view(*point_at_angle(centre, rr * 1.4, direction_deg, side, proposed))
        p.setPen(pen(colour if open_proposal else colours.PROPOSAL_MARK, 0.4,
                     QtCore.Qt.PenStyle.DashLine))
        p.drawLine(a, b)
        p.setBrush(qcolor("#ffffff"))
        p.drawEllipse(a, mm(1.0), mm(1.0))
        if open_proposal:
            _mark_label(p, view(*point_at_angle(centre, rr * 1.75, direction_deg, side, proposed)),
                        f"{side[0].upper()} {sheet_angle(proposed)} ?", colour)
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
                f"{side[0].upper()} {sheet_angle(final)}", colour)


def _mark_label(p, at: QtCore.QPointF, tag: str, colour: str) -> None:
    box = QtCore.QRectF(at.x() - mm(10), at.y() - mm(2.2), mm(20), mm(4.4))
    p.setPen(QtCore.Qt.PenStyle.NoPen)
    p.setBrush(qcolor("#ffffff", 215))
    p.drawRoundedRect(box, mm(1), mm(1))
    text(p, box, tag, 7.5, bold=True, colour=colour, flags=QtCore.Qt.AlignmentFlag.AlignCenter)


def _paint_field_legend(p, span: tuple[float, float], x: float, y: float, limit: float,
                        view: _View, result, arrow: tuple[float, float] | None) -> None:
    """Colour bar, scale bar and reference vector in one line under the field picture, from
    its left edge ``x`` (mm) at ``y``, drawn further left and with a shorter colour bar where
    the panel's width ``span`` (left, right in mm) needs it: nothing reaches beyond it."""
    small = 6.8
    reference = None
    if arrow is not None:
        speed, length = arrow
        unit = "m/s" if result.u_m_s is not None else "px"
        label = f"{speed:.3g} {unit}"
        p.setFont(font(small))
        reference = (label, length, max(length, p.fontMetrics().horizontalAdvance(label)) / mm(1))
    ref_w = 0.0 if reference is None else reference[2]
    room = span[1] - span[0]
    bar_w = min(30.0, max(14.0, room - 46.0 - ref_w))
    needed = bar_w + 46.0 + ref_w
    x = max(span[0], min(x, span[1] - needed))
    if math.isfinite(limit):
        text(p, rect_mm(x, y + 0.4, 20, 4), "vorticity", small, colour=colours.MUTED_INK)
        bar = rect_mm(x + 12.5, y + 1, bar_w, 2.4)
        lut = colours.vorticity_lut(64)
        step = bar.width() / len(lut)
        for i, (r, g, b) in enumerate(lut):
            p.fillRect(QtCore.QRectF(bar.left() + i * step, bar.top(), step + 1, bar.height()),
                       QtGui.QColor(int(r), int(g), int(b)))
        centre = QtCore.Qt.AlignmentFlag.AlignHCenter
        for value, at in ((-limit, 0.0), (0.0, 0.5), (limit, 1.0)):
            label = _signed(value) if value else "0"
            text(p, rect_mm(x + 12.5 + bar_w * at - 8, y + 3.6, 16, 4), label, small - 0.4,
                 colour=colours.MUTED_INK, flags=centre)
        text(p, rect_mm(x + 14 + bar_w, y + 0.4, 10, 4), "1/s", small, colour=colours.MUTED_INK)
    scale_mm_px = result.scale_mm_per_px
    if scale_mm_px:
        bar_mm = scale_bar_mm(result, view.scale)
        length = bar_mm / scale_mm_px * view.scale
        left = mm(x + bar_w + 23)
        p.setPen(pen(colours.INK, 0.45))
        p.drawLine(QtCore.QPointF(left, mm(y + 2.2)), QtCore.QPointF(left + length, mm(y + 2.2)))
        text(p, QtCore.QRectF(left, mm(y + 3.6), mm(20), mm(4)), f"{bar_mm:g} mm", small,
             colour=colours.MUTED_INK)
    if reference is not None:
        label, length, width = reference
        left = mm(x + needed - width)
        p.setPen(pen("#111111", 0.25))
        draw_arrow(p, QtCore.QPointF(left, mm(y + 2.2)), QtCore.QPointF(left + length, mm(y + 2.2)))
        text(p, QtCore.QRectF(left, mm(y + 3.6), mm(width), mm(4)), label, small,
             colour=colours.MUTED_INK)


def _signed(value: float) -> str:
    """Colour-bar end labels: three significant figures without exponents."""
    if abs(value) >= 100:
        return f"{value:+.0f}"
    return f"{value:+.3g}"



@dataclass
class NumberRow:
    """One row of a panel's numbers: a label and its text, sizes relative to the panel's."""

    label: str
    value: str
    colour: str = colours.INK
    larger_pt: float = 0.0
    bold: bool = False
    gap_mm: float = 1.1


def number_rows(record, with_metadata: bool = False, checks=()) -> list[NumberRow]:
    """The shot's numbers as the panel lists them, most important first."""
    summary = record.summary
    md = record.metadata or {}
    rows = []
    for side, colour in (("upper", colours.UPPER_SIDE), ("lower", colours.LOWER_SIDE)):
        rows.append(NumberRow(side, final_text(record, side), colour, 2.2, True, 0.2))
        rows.append(NumberRow("", side_detail(record, side), colours.MUTED_INK, -0.6,
                              gap_mm=1.6))
    rows.append(NumberRow("review", review_text(record),
                          colours.STATUS_COLOURS.get(record.pick.status, colours.INK),
                          bold=True))
    if record.pick.reason:
        rows.append(NumberRow("reason", record.pick.reason))
    rows.append(NumberRow("note", note_text(record)))
    rows.append(NumberRow("wake", reviewed_wake_text(record, SHEET_DECIMALS)))
    rows.append(NumberRow("flight", flight_text(None if summary is None else summary.flight,
                                                SHEET_DECIMALS)))
    if summary is not None and summary.reynolds is not None:
        rows.append(NumberRow("Reynolds", reynolds_text(summary)))
    if with_metadata:
        rows.append(NumberRow("shot", metadata_line(record).replace("   ", ", ") or MISSING))
    rows.append(NumberRow("vectors",
                          MISSING if summary is None else vectors_text(summary.vectors)))
    rows.append(NumberRow("dt, scale", timing_text(record)))
    if md.get("notes"):
        rows.append(NumberRow("shot notes", str(md["notes"])))
    if checks:
        rows.append(NumberRow("check", "; ".join(checks[:2]),
                              colours.STATUS_COLOURS[ReviewStatus.ADJUSTED]))
    outdated = outdated_uncertainty_note(record, "processing it again (wakeline process)")
    if outdated:
        rows.append(NumberRow("uncertainty", outdated,
                              colours.STATUS_COLOURS[ReviewStatus.ADJUSTED]))
    remarks = proposal_remarks(summary)
    if remarks:
        rows.append(NumberRow("proposals", "; ".join(remarks),
                              colours.STATUS_COLOURS[ReviewStatus.ADJUSTED]))
    warnings = () if summary is None else [w for w in summary.warnings
                                           if w not in summary.ball_warnings]  # with checks
    if warnings:
        rows.append(NumberRow("warnings", "; ".join(warnings[:2]), colours.MUTED_INK))
    return rows


def _label_width(size_pt: float) -> float:
    return 17.0 * size_pt / NUMBER_SIZES_PT[0]


def _row_height(p, row: NumberRow, w: float, size_pt: float) -> float:
    """The height (mm) ``row`` takes in a column ``w`` mm wide at text size ``size_pt``."""
    p.setFont(font(size_pt + row.larger_pt, row.bold))
    width = int(mm(w - _label_width(size_pt)))
    box = p.fontMetrics().boundingRect(QtCore.QRect(0, 0, width, 10**7),
                                       int(QtCore.Qt.TextFlag.TextWordWrap), row.value)
    scale = size_pt / NUMBER_SIZES_PT[0]
    return max(box.height() / mm(1), 3.4 * scale) + row.gap_mm * scale


def _rows_height(p, rows, w: float, size_pt: float) -> float:
    return sum(_row_height(p, row, w, size_pt) for row in rows)


def _paint_numbers(p, info, rows: list[NumberRow]) -> None:
    """The rows in ``info`` (mm) at the largest of ``NUMBER_SIZES_PT`` at which they all fit;
    where even the smallest cannot hold them, the last rows give way to a line saying "…" and
    which are left out."""
    x, y, w, h = info
    sizes = NUMBER_SIZES_PT if h >= 60 else NUMBER_SIZES_PT[1:]
    size = next((s for s in sizes if _rows_height(p, rows, w, s) <= h), sizes[-1])
    shown = list(rows)
    if _rows_height(p, rows, w, size) > h:
        mark = NumberRow("", "")
        while shown:
            shown.pop()
            left_out = [r.label for r in rows[len(shown):] if r.label]
            mark = NumberRow("", "… not shown: " + ", ".join(left_out), colours.MUTED_INK)
            if _rows_height(p, [*shown, mark], w, size) <= h:
                break
        shown.append(mark)
    label_w = _label_width(size)
    cy = y
    for row in shown:
        text(p, rect_mm(x, cy + 0.3, label_w, 4.5), row.label, size - 0.6,
             colour=colours.MUTED_INK)
        text(p, rect_mm(x + label_w, cy, w - label_w, y + h - cy), row.value,
             size + row.larger_pt, bold=row.bold, colour=row.colour)
        cy += _row_height(p, row, w, size)
