"""The shot sheet: a vector PDF handing over a session, drawn with Qt's own PDF writer.

Page 1 (the cover) names the session, counts shots by review status, shows the session overview
and a summary table (mean and spread of each side's final angle per value of one column). A
summary page of the conditions follows (``conditions_page``: separation against the condition
with error bars, the table of conditions, ensemble proposals when given, the agreement with an
imported second review). Then
one panel per shot: vorticity map with vectors, ball outline, flight arrow, the plane normal to
the flight, both separation marks (final and, when adjusted, the proposal), the numbers, the
metadata and the analyst's review. Every page has a title block, a footer with the units and
conventions, and a page number. Works headless (an offscreen Qt application is made if needed).
What goes on the pages is chosen in ``content``; ``kit``, ``cover`` and ``shot_panel`` paint it.
"""

from __future__ import annotations

import math
import shutil
from collections.abc import Callable
from pathlib import Path

from PySide6 import QtCore, QtGui

from app.review.overview import MEASURED_SPEED, SHOT_ORDER, default_column, numeric_columns
from app.review.scales import shared_limit
from app.sheet.conditions_page import conditions_page_count, paint_conditions_page
from app.sheet.content import (
    PER_PAGE_CHOICES,
    SheetReport,
    select_records,
    selection_text,
    sheet_name_problem,
    shot_page_count,
)
from app.sheet.cover import paint_cover
from app.sheet.kit import DPI, Pages, ensure_gui_application
from app.sheet.shot_panel import paint_shot, panel_cells
from core import WakelineError
from core.plausibility import session_direction, shot_checks
from core.store import ProcessState
from core.store.companions import refuse_session_output
from core.store.files import atomic_write, failure_cause, near_miss_hint, writing
from core.store.records import ResultUnreadable

SESSION_RANGE = "session"  # one vorticity colour range for every panel, from the sheet's shots


class ColumnError(WakelineError):
    """The column asked for the overview's axis is not a numeric column of the shots printed
    (the command tells it as bad usage)."""


def make_sheet(
    session,
    out_path: str | Path,
    *,
    shot_ids: list[str] | None = None,
    per_page: int = 2,
    statuses: tuple[str, ...] | None = None,
    column: str | None = None,
    vorticity_limit_1_s: float | str | None = None,
    progress: Callable[[int, int], None] | None = None,
    ensembles: dict | None = None,
) -> SheetReport:
    """Write the shot sheet of ``session`` as a PDF.

    Parameters
    ----------
    session : core.store.Session
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
    vorticity_limit_1_s : float or "session", optional
        The vorticity colour range of every panel, 1/s (symmetric about zero), so panels can
        be compared; "session": one range for all of them from the shots on the sheet
        (``app.review.scales.shared_limit``); None (default): each panel its own range.
    progress : callable(done, total), optional
        Called after each shot panel; an exception it raises stops the sheet (no file is left).
    ensembles : dict, optional
        Condition label -> ``core.ensemble.EnsembleView``: drawn on the summary page of the
        conditions (grouped by the session's columns) beside the shots' means.

    Raises
    ------
    core.WakelineError
        Unknown shot, bad ``per_page`` or status, no shot left to print, unwritable output.
    """
    if per_page not in PER_PAGE_CHOICES:
        raise WakelineError(f"--per-page: must be one of {PER_PAGE_CHOICES}, not {per_page}")
    refuse_session_output(Path(out_path), session)  # the window's export as the command's
    if problem := sheet_name_problem(out_path):
        raise WakelineError(f"{out_path}: {problem}; nothing written")
    ensure_gui_application()
    all_records = list(session.values())
    records = select_records(session, shot_ids, statuses)
    if not records:
        raise WakelineError(f"{session.path}: no shot matches the selection; nothing to print")
    if column is None:
        column = default_column(records)
    elif column not in numeric_columns(records):
        # the window's names for the pseudo-columns: speed_m_s (its filter), shot_order
        column = {"speed_m_s": MEASURED_SPEED, "shot_order": SHOT_ORDER}.get(column, column)
    if column not in numeric_columns(records):
        choices = numeric_columns(records)
        raise ColumnError(
            f"--column: {column!r} is not a numeric column of this session"
            f"{near_miss_hint([column], choices)} (choose from {', '.join(choices)})"
        )
    if vorticity_limit_1_s == SESSION_RANGE:
        vorticity_limit_1_s = shared_limit(_vorticity_fields(session, records))
    elif vorticity_limit_1_s is not None and not (
            isinstance(vorticity_limit_1_s, (int, float)) and 0 < vorticity_limit_1_s < math.inf):
        raise WakelineError(f"--vorticity-limit: a positive number or '{SESSION_RANGE}', not "
                            f"{vorticity_limit_1_s!r}")
    # a condition is the session's, whichever of its shots the sheet prints (a summary of a
    # chosen few, say the adjusted ones, would read as the condition's)
    by, conditions = sheet_conditions(session, all_records)
    total = (1 + conditions_page_count(conditions)
             + shot_page_count(len(records), per_page))
    out_path = Path(out_path)
    name = getattr(session, "name", "") or Path(session.path).stem
    # a failed write of the sheet or its temporary file, in plain words naming the sheet
    with writing(out_path), atomic_write(out_path, suffix=".part") as tmp:
        try:  # the system's reason, where Qt would only print a warning of its own
            tmp.open("wb").close()
        except OSError as exc:  # worded as the table's and the pair's outputs are
            raise WakelineError(f"{out_path}: cannot write here ({failure_cause(exc)})") from None
        writer = _writer(tmp, name)
        painter = QtGui.QPainter()
        if not painter.begin(writer):
            raise WakelineError(f"{out_path}: cannot write the PDF here")
        try:
            pages = Pages(painter, writer, name, total)
            paint_cover(pages, session, all_records, records, column, bool(conditions),
                        selection_text(records, all_records, shot_ids, statuses, per_page,
                                       vorticity_limit_1_s))
            if conditions:
                paint_conditions_page(pages, session, all_records, conditions, by, ensembles,
                                      printed=len(records))
            damaged = _paint_shot_pages(pages, session, records, per_page,
                                        vorticity_limit_1_s, progress,
                                        session_direction(all_records))
        finally:
            painter.end()
            del writer  # closes the file
        _check_whole_pdf(tmp, out_path)  # before it replaces an earlier sheet
    return SheetReport(out_path, pages.number, [r.shot_id for r in records], damaged)


def _check_whole_pdf(tmp: Path, out_path: Path) -> None:
    """Qt's PDF writer fails without a word when the disk fills (a warning on the terminal, an
    empty or cut file): a written PDF ends with its end-of-file mark."""
    try:
        with open(tmp, "rb") as fh:
            fh.seek(max(0, tmp.stat().st_size - 64))
            whole = b"%%EOF" in fh.read()
    except OSError as exc:
        raise WakelineError(f"{out_path}: cannot write here ({failure_cause(exc)})") from None
    if not whole:
        full = shutil.disk_usage(tmp.parent).free < 16 << 20
        raise WakelineError(f"{out_path}: cannot write here ("
                            + ("the disk is full" if full else "the PDF came out incomplete")
                            + ")")


def sheet_conditions(session, records) -> tuple[list[str], list]:
    """The grouping columns and conditions of the summary page: the session's columns (the
    default ones until chosen); none when nothing groups the shots."""
    from core.conditions import default_columns, group_conditions

    stored = session.conditions_by() if hasattr(session, "conditions_by") else None
    by = stored if stored is not None else default_columns(records)
    return by, (group_conditions(records, by) if by else [])


def _writer(path: Path, title: str) -> QtGui.QPdfWriter:
    writer = QtGui.QPdfWriter(str(path))
    writer.setPageSize(QtGui.QPageSize(QtGui.QPageSize.PageSizeId.A4))
    writer.setPageOrientation(QtGui.QPageLayout.Orientation.Portrait)
    writer.setPageMargins(QtCore.QMarginsF(0, 0, 0, 0))
    writer.setResolution(DPI)
    writer.setTitle(f"wakeline shot sheet: {title}")
    writer.setCreator("wakeline")
    return writer



def _stored_result(session, record):
    """A shot's stored result (None before its first run) and, where it cannot be read, why:
    its panel says so and the rest of the sheet is made."""
    if record.state == ProcessState.UNPROCESSED:
        return None, None
    try:
        return session.load_result(record.shot_id), None
    except ResultUnreadable as exc:
        return None, f"{exc.damage}; process it again by force"


def _vorticity_fields(session, records):
    for record in records:
        result, _ = _stored_result(session, record)
        yield None if result is None else result.vorticity_1_s


def _paint_shot_pages(pages: Pages, session, records, per_page: int,
                      vorticity_limit_1_s: float | None, progress,
                      usual_direction_deg: float | None = None) -> list[str]:
    """The shots' panels; returns the shots whose stored result could not be read."""
    cells, damaged = None, []
    for index, record in enumerate(records):
        slot = index % per_page
        if slot == 0:
            first = record.shot_id
            last = records[min(index + per_page, len(records)) - 1].shot_id
            pages.new_page(f"shots {first} - {last}" if first != last else f"shot {first}")
            cells = panel_cells(per_page, pages.body())
        # a failed shot shows its last run that succeeded, if any (the panel says so)
        result, unreadable = _stored_result(session, record)
        if unreadable:
            damaged.append(record.shot_id)
        paint_shot(pages.painter, cells[slot], record, result, vorticity_limit_1_s,
                   shot_checks(record, usual_direction_deg), unreadable=unreadable)
        if progress is not None:
            progress(index + 1, len(records))
    return damaged
