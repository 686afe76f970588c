"""Hand-over from the review window: the session overview panel and File > Export actions.

``install_overview(window)`` docks the overview under the canvas and keeps it in step with the
session model (clicking a point makes that shot current, which the shot list follows);
``install_export_actions(window)`` fills ``window.export_menu`` with the shot sheet (PDF) and
the table (CSV), the same files ``wakeline sheet`` and ``wakeline table`` write. The sheet uses
the window's vorticity colour range when it is fixed for the session.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QApplication, QDockWidget, QProgressDialog

from app.qt.docks import dock_action
from app.qt.file_dialogs import ask_path
from app.qt.overview import SessionOverview
from app.review.overview import numeric_columns
from core import WakelineError


class _Cancelled(Exception):
    """The user stopped the shot sheet."""


def install_overview(window) -> SessionOverview:
    """Dock a session overview at the bottom of ``window`` and wire it to the session model."""
    overview = SessionOverview(window)
    dock = QDockWidget("Session overview", window)
    dock.setObjectName("session_overview_dock")
    dock.setWidget(overview)
    dock.setFeatures(QDockWidget.DockWidgetFeature.DockWidgetClosable
                     | QDockWidget.DockWidgetFeature.DockWidgetMovable
                     | QDockWidget.DockWidgetFeature.DockWidgetFloatable)
    window.addDockWidget(Qt.DockWidgetArea.BottomDockWidgetArea, dock)
    window.resizeDocks([dock], [250], Qt.Orientation.Vertical)
    toggle = dock_action(window, dock, "Session &overview", "separation angles of every shot "
                         "against the seam angle or another column", shortcut="O")
    view_menu = getattr(window, "view_menu", None)
    if view_menu is not None:
        view_menu.addSeparator()
        view_menu.addAction(toggle)
    model = window.model
    overview.follow(model.records)
    model.session_changed.connect(overview.refresh_soon)
    model.record_changed.connect(overview.refresh_soon)
    model.current_changed.connect(overview.set_current)
    overview.shot_clicked.connect(model.set_current)
    window.overview, window.overview_dock = overview, dock
    return overview


def install_export_actions(window) -> dict[str, QAction]:
    """Add "Shot sheet (PDF)…" and "Table (CSV)…" to ``window.export_menu``."""
    sheet = QAction("Shot sheet (&PDF)…", window)
    sheet.setStatusTip("a printable sheet: cover with overview and summary, one panel per shot")
    sheet.triggered.connect(lambda: _export_dialog(
        window, "Write the shot sheet", "_sheet.pdf", "PDF files (*.pdf)", export_sheet))
    # the shot list's filter and status choice say which shots (as the command's --shots and
    # --status do): the adjusted ones, a condition, a seam-angle range...
    listed = QAction("Shot sheet of the &listed shots (PDF)…", window)
    listed.setStatusTip("the sheet with a panel for each shot the list shows now (its filter "
                        "and status choice); the cover still summarises the whole session")
    listed.triggered.connect(lambda: _listed_sheet_dialog(window))
    table = QAction("&Table (CSV)…", window)
    table.setStatusTip("one row per shot: metadata, proposed and final angles, review")
    table.triggered.connect(lambda: _export_dialog(
        window, "Write the table", "_table.csv", "CSV files (*.csv)", export_table))
    window.export_menu.addAction(sheet)
    window.export_menu.addAction(listed)
    window.export_menu.addAction(table)
    window.act_export_sheet, window.act_export_table = sheet, table
    window.act_export_listed_sheet = listed
    return {"sheet": sheet, "listed sheet": listed, "table": table}


def _default_path(window, suffix: str) -> str:
    path = window.model.path
    return str(path.with_name(f"{path.stem}{suffix}"))


def _export_dialog(window, title: str, suffix: str, file_filter: str, export) -> None:
    """Ask where to write, next to the session by default, then ``export(window, path)``."""
    if window.model.session is None:
        return
    path = ask_path(window, title, _default_path(window, suffix), file_filter, mode="save")
    if path:
        export(window, path)


def export_sheet(window, path, **options):
    """Write the open session's shot sheet to ``path`` with a cancellable progress dialog.

    ``options`` go to ``app.sheet.make_sheet`` (which reads the model's session whole); the
    overview's column and the canvas's fixed vorticity range are used unless given. Problems
    are shown by the window; returns the ``SheetReport``, or None then or when cancelled.
    """
    from app.sheet import make_sheet  # not needed until a sheet is written (start-up time)

    session = window.model.session
    if session is None:
        return None
    overview = getattr(window, "overview", None)
    if ("column" not in options and overview is not None
            and overview.column() in numeric_columns(window.model.records())):
        options["column"] = overview.column()
    options.setdefault("vorticity_limit_1_s", window.canvas.fixed_limit())
    dialog = QProgressDialog("Writing the shot sheet…", "Cancel", 0, len(session), window)
    dialog.setWindowTitle("Shot sheet")
    dialog.setWindowModality(Qt.WindowModality.WindowModal)
    dialog.setMinimumDuration(400)

    def progress(done: int, total: int) -> None:
        dialog.setMaximum(total)
        dialog.setValue(done)
        if dialog.wasCanceled():
            raise _Cancelled

    statistics = getattr(window, "statistics", None)  # ensembles computed in this window
    if statistics is not None and statistics.ensembles:
        options.setdefault("ensembles", dict(statistics.ensembles))
    QApplication.setOverrideCursor(Qt.CursorShape.WaitCursor)
    try:
        report = make_sheet(session, path, progress=progress, **options)
    except _Cancelled:
        window.statusBar().showMessage("Shot sheet cancelled; nothing written.", 6000)
        return None
    except (WakelineError, OSError) as exc:  # make_sheet names its file in plain words
        window.show_problem("Shot sheet", str(exc))
        return None
    finally:
        QApplication.restoreOverrideCursor()
        dialog.reset()
        dialog.deleteLater()
    damaged = (f"; stored result damaged (its panel says so): {' '.join(report.damaged)}: "
               "Process ▸ Reprocess this shot" if report.damaged else "")
    window.statusBar().showMessage(
        f"Shot sheet written: {report.path} ({report.pages} pages, {len(report.shot_ids)} shots"
        f"){damaged}", 8000 if not damaged else 0)
    return report


def _listed_sheet_dialog(window) -> None:
    """Ask where to write the listed shots' sheet, once the list is known to show some."""
    if window.model.session is not None and not window.shot_list.visible_ids():
        window.show_problem("Shot sheet", LISTS_NOTHING)
        return
    _export_dialog(window, "Write the shot sheet of the listed shots", "_listed_sheet.pdf",
                   "PDF files (*.pdf)", export_listed_sheet)


LISTS_NOTHING = ("the list shows no shot (its filter or status choice leaves none); nothing "
                 "written")


def export_listed_sheet(window, path):
    """:func:`export_sheet` of the shots the list shows now; None when it shows none."""
    shown = window.shot_list.visible_ids()
    if not shown:
        window.show_problem("Shot sheet", LISTS_NOTHING)
        return None
    return export_sheet(window, path, shot_ids=shown)


def export_table(window, path) -> int | None:
    """Write the open session's table of picks (as ``wakeline table``); the row count or None."""
    if window.model.session is None:
        return None
    try:
        count = window.model.write_table(path)
    except (WakelineError, OSError) as exc:
        window.show_problem("Table", str(exc))
        return None
    window.statusBar().showMessage(f"Table written: {path} ({count} shots)", 8000)
    return count
