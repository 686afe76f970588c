"""The review window: shot list (left), canvas (centre), readout (right), menus and background work.

``run_window(session_path)`` is the GUI entry point of the ``wakeline`` command. The window holds
no unsaved state: each review edit is an undoable command written through the session journal at
once, and processing results are saved by the batch code as each shot finishes. ``MainWindow``
is built here; its session handling, background jobs and review live in ``window_session``,
``window_jobs`` and ``window_review``. It reaches the store only through its ``SessionModel``.
"""

from __future__ import annotations

import json
import logging
import os
import signal
import sys
import traceback
import weakref
from pathlib import Path

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import pyqtgraph as pg
from PySide6.QtCore import QEvent, QSettings, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence, QUndoStack
from PySide6.QtWidgets import (
    QApplication,
    QDialog,
    QDockWidget,
    QLabel,
    QMainWindow,
    QMenu,
    QMessageBox,
    QProgressBar,
    QPushButton,
    QSplitter,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from app.qt.analyst_marks import install_analyst_marks
from app.qt.canvas import MOUSE_KEYS, ShotCanvas
from app.qt.conditions_panel import install_statistics
from app.qt.docks import in_front
from app.qt.export import install_export_actions, install_overview
from app.qt.icons import app_icon, status_icon
from app.qt.picture_export import install_picture_actions
from app.qt.platform_libs import platform_problem, unreachable_display
from app.qt.readout import NOTE_KEYS, ReadoutPanel
from app.qt.shot_list import LIST_KEYS, ShotListPanel
from app.qt.window_ball import BallActions
from app.qt.window_jobs import JobActions
from app.qt.window_review import ReviewActions
from app.qt.window_session import SessionActions
from app.qt.workers import BackgroundJob, later
from app.review.model import MANIFEST_NAME, ReviewStatus, SessionModel
from core import WakelineError
from core.paths import user_data_dir

log = logging.getLogger("wakeline.window")

ORGANISATION = "wakeline"
APPLICATION = "wakeline"
NUDGE_DEG = 0.5
PREFETCH_DELAY_MS = 60
FINE_NUDGE_DEG = 0.1
#: Width (px) the picture takes from the side panels on a narrow window
#: (MainWindow._make_room_for_canvas).
CANVAS_ROOM_PX = 520
#: Height (px) the panels above the session overview keep when the window gets lower: the
#: overview docked below gives up its height for them, down to its least
#: (MainWindow._make_height_for_canvas).
CANVAS_HEIGHT_PX = 470

# (action key, menu text, shortcut, tip) of the review keys; shown in Help > Keyboard shortcuts
REVIEW_KEYS = (
    (ReviewStatus.ACCEPTED, "&Accept proposal", "A", "accept the proposed angles"),
    (ReviewStatus.ADJUSTED, "Mark a&djusted", "D",
     "keep the marks where they are as the analyst's values"),
    (ReviewStatus.UNUSABLE, "Mark &unusable…", "U", "the shot cannot be used; asks for a reason"),
    (ReviewStatus.TO_REVIEW, "Back to &review", "R", "undecided again"),
)
REVIEW_BUTTON_TEXT = {ReviewStatus.ACCEPTED: "Accept", ReviewStatus.ADJUSTED: "Adjusted",
                      ReviewStatus.UNUSABLE: "Unusable…", ReviewStatus.TO_REVIEW: "To review"}
# (the readout's buttons: short for a narrow panel)
NUDGE_KEYS = (
    ("upper", +NUDGE_DEG, "E"), ("upper", -NUDGE_DEG, "Q"),
    ("lower", +NUDGE_DEG, "C"), ("lower", -NUDGE_DEG, "Z"),
    ("upper", +FINE_NUDGE_DEG, "Shift+E"), ("upper", -FINE_NUDGE_DEG, "Shift+Q"),
    ("lower", +FINE_NUDGE_DEG, "Shift+C"), ("lower", -FINE_NUDGE_DEG, "Shift+Z"),
)


def app_settings() -> QSettings:
    """The user's wakeline preferences: an INI file in ``$WAKELINE_HOME`` when that is set (all
    of wakeline's per-user files in one folder: ``core.paths``), else in Qt's place for the
    user's settings (tests point QSettings' path at a temp dir)."""
    home = os.environ.get("WAKELINE_HOME")
    if home:
        return QSettings(str(user_data_dir() / f"{APPLICATION}.ini"),
                         QSettings.Format.IniFormat)
    return QSettings(QSettings.Format.IniFormat, QSettings.Scope.UserScope, ORGANISATION,
                     APPLICATION)


class MainWindow(SessionActions, JobActions, ReviewActions, BallActions, QMainWindow):
    """The review window.

    Parameters
    ----------
    workers : int, optional
        Worker processes for background processing (None: the saved preference, default all
        cores; 0: one shot at a time in the worker thread).
    """

    def __init__(self, workers: int | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.settings = app_settings()
        self._workers_override = workers
        self.model = SessionModel(self)
        self.undo_stack = QUndoStack(self)
        # the panels' sizes once a resize has settled
        self._room_later = later(self, self._make_room_for_canvas)
        self._height_later = later(self, self._make_height_for_canvas)
        self.job: BackgroundJob | None = None
        self.last_problem = ""
        self._shown_key = None
        self._previous_id = ""
        self._prefetch_id = ""
        self._prefetch_timer = QTimer(self)
        self._prefetch_timer.setSingleShot(True)
        # read ahead once the analyst pauses on a shot: a held-down key pays no extra reads
        self._prefetch_timer.setInterval(PREFETCH_DELAY_MS)
        self._prefetch_timer.timeout.connect(self._prefetch)
        self._message_boxes: list[QMessageBox] = []
        self.setWindowIcon(app_icon())
        self.setAcceptDrops(True)
        self._build_panels()
        self._build_status_bar()
        self._build_actions()
        self._build_menus()
        self._connect()
        install_overview(self)
        install_statistics(self)
        install_analyst_marks(self)
        install_export_actions(self)
        install_picture_actions(self)
        self._restore_settings()
        self._update_title()
        self._update_enabled()

    # -- construction ------------------------------------------------------------------------
    def _build_panels(self) -> None:
        self.shot_list = ShotListPanel(self.model, self)
        self.canvas = ShotCanvas(self)
        self.readout = ReadoutPanel(self)
        self.splitter = QSplitter(Qt.Orientation.Horizontal, self)
        for widget, stretch in ((self.shot_list, 0), (self.canvas, 1), (self.readout, 0)):
            self.splitter.addWidget(widget)
            self.splitter.setStretchFactor(self.splitter.count() - 1, stretch)
        self.splitter.setSizes([365, 885, 350])  # the list's default columns whole
        self.splitter.setChildrenCollapsible(False)
        self._panels_set_by_hand = False
        self._side_widths = None  # the side panels' widths before the picture took room
        self.splitter.splitterMoved.connect(self._on_panels_set_by_hand)
        self.splitter.installEventFilter(self)
        self.setCentralWidget(self.splitter)
        self.resize(1600, 900)

    def _build_status_bar(self) -> None:
        bar = self.statusBar()
        self.progress = QProgressBar(self)
        self.progress.setMaximumWidth(260)
        self.progress.setTextVisible(True)
        self.progress_label = QLabel(self)
        self.cancel_button = QPushButton("Cancel", self)
        self.cancel_button.setToolTip("stop the running job; what it has done stays")
        self.cancel_button.clicked.connect(self.cancel_processing)
        for widget in (self.progress_label, self.progress, self.cancel_button):
            bar.addPermanentWidget(widget)
            widget.hide()

    def _action(self, text: str, slot, shortcut=None, tip: str = "",
                checkable: bool = False) -> QAction:
        action = QAction(text, self)
        if shortcut is not None:
            action.setShortcut(QKeySequence(shortcut))
        if tip:
            action.setToolTip(tip)
            action.setStatusTip(tip)
        action.setCheckable(checkable)
        action.triggered.connect(slot)
        self.addAction(action)  # shortcuts work while the menu bar is hidden or closed
        return action

    def _build_actions(self) -> None:
        a = self._action
        self.act_open = a("&Open session…", lambda: self.open_session_dialog(),
                          QKeySequence.StandardKey.Open, "open a session file")
        self.act_import = a("&Import folder…", lambda: self.import_folder_dialog(), "Ctrl+I",
                            f"make a session from a folder of frames with its {MANIFEST_NAME}")
        self.act_save = a("&Save", self.save_session, QKeySequence.StandardKey.Save,
                          "edits are saved as you make them; this also compacts the file")
        self.act_close = a("&Close session", self.close_session, QKeySequence.StandardKey.Close)
        self.act_quit = a("&Quit", self.close)
        # the desktop's Quit key; Ctrl+Q where the desktop names none
        self.act_quit.setShortcuts(QKeySequence.keyBindings(QKeySequence.StandardKey.Quit)
                                   or [QKeySequence("Ctrl+Q")])
        self.act_undo = self.undo_stack.createUndoAction(self, "&Undo")
        self.act_undo.setShortcut(QKeySequence.StandardKey.Undo)
        self.act_redo = self.undo_stack.createRedoAction(self, "&Redo")
        self.act_redo.setShortcuts([QKeySequence("Ctrl+Shift+Z"), QKeySequence("Ctrl+Y")])
        for action in (self.act_undo, self.act_redo):
            self.addAction(action)
        self.review_actions = {
            key: a(text, lambda _=False, k=key: self.set_status(k), shortcut, tip)
            for key, text, shortcut, tip in REVIEW_KEYS
        }
        for key, action in self.review_actions.items():
            action.setIcon(status_icon(key))
            action.setIconText(REVIEW_BUTTON_TEXT[key])
        self.nudge_actions = []
        for side, step, shortcut in NUDGE_KEYS:
            text = f"Nudge {side} mark {'rearward' if step > 0 else 'forward'} {abs(step):g}°"
            self.nudge_actions.append(
                a(text, lambda _=False, s=side, d=step: self.nudge(s, d), shortcut)
            )
        self.act_next = a("&Next shot", lambda: self.step_shot(1), "N",
                          "next shot in the list (also Down in the list)")
        self.act_prev = a("&Previous shot", lambda: self.step_shot(-1), "P",
                          "previous shot in the list (also Up in the list)")
        self.act_next_open = a("Next shot &to review", self.next_to_review, "Shift+N")
        self.act_advance = a("&Go on to the next shot to review after a decision",
                             self._on_advance_toggled, checkable=True,
                             tip="after A, D or U the next shot still to review becomes current")
        self.act_picture = a("Cycle &picture (A, B, flicker, none)", self.canvas.cycle_picture,
                             "F")
        self.act_vectors = a("Toggle &vectors", self.canvas.vectors_box.toggle, "V")
        self.act_vorticity = a("Toggle v&orticity", self.canvas.vorticity_box.toggle, "W")
        self.act_marks = a("Toggle separation &marks", self.canvas.marks_box.toggle, "M")
        self.act_fine = a("Toggle the fine field near the &ball", self.canvas.fine_box.toggle,
                          "G", "the finer correlation the separation uses, beside the ball")
        self.act_layers = a("Toggle the fitted shear &layers", self.canvas.layers_box.toggle,
                            "L", "each side's fitted layer and the band of images it was "
                            "fitted to")
        self.act_frame = a("Lab frame / ball frame", self.canvas.toggle_frame, "T",
                           "vectors and cursor velocities with the ball's velocity subtracted "
                           "(as in a wind tunnel) or not")
        self.act_side = a("&Side by side", self.canvas.side_box.toggle, "S")
        self.act_keep = a("&Keep this shot for comparison", self.keep_for_comparison, "K",
                          "show this shot beside the others (side by side, same colour range, "
                          "zoom linked); K again on it lets it go")
        self.act_fixed_range = a("Fi&xed vorticity range for the session",
                                 self.canvas.fixed_box.toggle,
                                 tip="the colour range stays as set for every shot and on the "
                                 "shot sheet; off: each shot gets its own")
        self.act_fit = a("&Fit shot in view", lambda: self.canvas.view.autoRange(padding=0.02),
                         "Ctrl+0")
        self.act_process = a("&Process shots that need it", lambda: self.start_processing(),
                             "Ctrl+P", "shots not processed yet, or processed with other settings")
        self.act_reprocess = a("&Reprocess this shot", self.reprocess_current, "Ctrl+Shift+P")
        self.act_cancel = a("&Cancel the running job", self.cancel_processing, "Ctrl+.")
        self.act_check = a("Check &frame files", lambda: self.check_frames(),
                           tip="look for frame files that are missing or changed since import")
        self.act_auto = a("Process new shots when a session &opens", self._on_auto_toggled,
                          checkable=True)
        self.act_settings = a("Processing &settings…", self.edit_processing_settings,
                              tip="PIV passes, outlier test, ball and flight; processes to use")
        self.act_keys = a("&Keyboard shortcuts", self.show_shortcuts,
                          QKeySequence.StandardKey.HelpContents)
        self.act_about = a("&About wakeline", self.show_about)
        self._build_ball_actions()

    def _build_menus(self) -> None:
        menu = self.menuBar()
        file_menu = menu.addMenu("&File")
        file_menu.addAction(self.act_open)
        file_menu.addAction(self.act_import)
        self.recent_menu = file_menu.addMenu("Open &recent")
        file_menu.addSeparator()
        file_menu.addAction(self.act_save)
        self.export_menu: QMenu = file_menu.addMenu("&Export")
        self.export_menu.setToolTip("shot sheets and tables of the open session")
        file_menu.addSeparator()
        file_menu.addAction(self.act_close)
        file_menu.addAction(self.act_quit)
        edit = self.edit_menu = menu.addMenu("&Edit")
        edit.addAction(self.act_undo)
        edit.addAction(self.act_redo)
        review = menu.addMenu("&Review")
        for action in self.review_actions.values():
            review.addAction(action)
        review.addSeparator()
        for action in self.nudge_actions:
            review.addAction(action)
        review.addSeparator()
        for action in (self.act_next, self.act_prev, self.act_next_open):
            review.addAction(action)
        review.addSeparator()
        review.addAction(self.act_advance)
        view = self.view_menu = menu.addMenu("&View")
        for action in (self.act_picture, self.act_vectors, self.act_vorticity,
                       self.act_fixed_range, self.act_marks, self.act_fine, self.act_layers,
                       self.act_frame, self.act_side, self.act_keep, self.act_fit):
            view.addAction(action)
        self._build_ball_menu()
        process = menu.addMenu("&Process")
        for action in (self.act_process, self.act_reprocess, self.act_cancel, self.act_check):
            process.addAction(action)
        process.addSeparator()
        process.addAction(self.act_settings)
        process.addAction(self.act_auto)
        help_menu = menu.addMenu("&Help")
        help_menu.addAction(self.act_keys)
        help_menu.addAction(self.act_about)
        self.readout.set_actions(self.review_actions)

    def _connect(self) -> None:
        self.shot_list.shot_selected.connect(self.model.set_current)
        self.model.current_changed.connect(self._on_current_changed)
        self.model.record_changed.connect(self._on_record_changed)
        self.model.edit_refused.connect(lambda text: self.show_problem("Edit not saved", text))
        self.model.edit_replayed.connect(self._on_edit_replayed)
        self.model.session_changed.connect(self._on_session_changed)
        self.model.closing.connect(self._on_session_closing)
        self.canvas.mark_moved.connect(self.readout.show_live)
        self.canvas.mark_released.connect(self._on_mark_released)
        self.canvas.mark_cancelled.connect(lambda _side: self.readout.show_current())
        self.canvas.layers_changed.connect(self._save_layers)
        self.readout.note_committed.connect(self._on_note_committed)
        self.readout.note.finished.connect(self.shot_list.view.setFocus)
        self.shot_list.columns_changed.connect(lambda: self.settings.setValue(
            "shot_list/columns", self.shot_list.wanted_columns()))
        self.undo_stack.indexChanged.connect(lambda _i: self._update_enabled())

    # -- settings ----------------------------------------------------------------------------
    def _restore_settings(self) -> None:
        geometry = self.settings.value("window/geometry")
        if geometry is not None:
            self.restoreGeometry(geometry)
        splitter = self.settings.value("window/splitter")
        if splitter is not None:
            self.splitter.restoreState(splitter)
        docks = self.settings.value("window/docks")  # the overview's place and visibility
        if docks is not None:
            self.restoreState(docks)
        layers = self.settings.value("canvas/layers", "")
        if layers:
            try:
                self.canvas.restore_layers(json.loads(layers))
            except (ValueError, TypeError):
                log.warning("ignoring unreadable saved canvas layers")
        self.act_auto.setChecked(self._flag("processing/auto_on_open"))
        self.act_advance.setChecked(self._flag("review/advance_after_decision"))
        columns = self.settings.value("shot_list/columns")
        if columns is not None:
            self.shot_list.show_columns([columns] if isinstance(columns, str) else columns)
        self._rebuild_recent()

    def _flag(self, key: str, default: bool = True) -> bool:
        """A yes/no preference (QSettings' INI file gives text back)."""
        return str(self.settings.value(key, default)).lower() in ("true", "1")

    def _save_layers(self) -> None:
        self.settings.setValue("canvas/layers", json.dumps(self.canvas.layer_state()))

    def _on_auto_toggled(self, checked: bool) -> None:
        self.settings.setValue("processing/auto_on_open", bool(checked))

    def _on_advance_toggled(self, checked: bool) -> None:
        self.settings.setValue("review/advance_after_decision", bool(checked))

    def _workers(self) -> int | None:
        if self._workers_override is not None:
            return self._workers_override
        value = self.settings.value("processing/workers", "")
        try:
            return int(value) if str(value).strip() != "" else None
        except ValueError:
            return None

    # -- state of the window -----------------------------------------------------------------
    def _update_title(self) -> None:
        if self.model.path is None:
            self.setWindowTitle("wakeline")
            return
        tag = " [read-only]" if self.model.read_only else ""
        self.setWindowTitle(f"wakeline — {self.model.name} ({self.model.path}){tag}")

    def _update_enabled(self) -> None:
        has_session = self.model.session is not None
        writable = has_session and not self.model.read_only
        has_shot = bool(self.model.current_id)
        busy = self.job is not None
        record = self.model.record(self.model.current_id) if has_shot else None
        has_proposal = record is not None and record.summary is not None
        for key, action in self.review_actions.items():
            needs_proposal = key in (ReviewStatus.ACCEPTED, ReviewStatus.ADJUSTED)
            action.setEnabled(writable and has_shot and (has_proposal or not needs_proposal))
        for action in self.nudge_actions:
            action.setEnabled(writable and has_proposal)
        self.act_save.setEnabled(writable)
        self.readout.set_read_only(has_session and not writable)
        self.act_close.setEnabled(has_session)
        self.act_process.setEnabled(writable and not busy)
        self.act_reprocess.setEnabled(writable and has_shot and not busy)
        self.act_cancel.setEnabled(busy)
        self.act_check.setEnabled(has_session and not busy)
        self.act_settings.setEnabled(not busy)  # not while a job reads the settings
        self.act_import.setEnabled(not busy)
        self.export_menu.setEnabled(has_session and bool(self.export_menu.actions()))
        self._update_ball_actions(writable and has_shot and record.state == "processed")

    def show_problem(self, title: str, text: str) -> None:
        """Tell the user about a problem without blocking (the session stays open)."""
        self.last_problem = f"{title}: {text}"
        log.warning("%s", self.last_problem)
        self.statusBar().showMessage(self.last_problem.splitlines()[0], 10000)
        box = QMessageBox(QMessageBox.Icon.Warning, title, text, QMessageBox.StandardButton.Ok,
                          self)
        box.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        box.finished.connect(lambda _r, b=box: self._message_boxes.remove(b)
                             if b in self._message_boxes else None)
        self._message_boxes.append(box)
        box.open()

    def show_shortcuts(self) -> None:
        dialog = QDialog(self)
        dialog.setWindowTitle("Keyboard shortcuts")
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        text = QTextBrowser(dialog)
        text.setHtml(self.shortcut_table_html())
        box = QVBoxLayout(dialog)
        box.addWidget(text)
        dialog.resize(520, 600)
        dialog.open()

    def shortcut_rows(self) -> list[tuple[str, str]]:
        """(keys, what they do) of every key: the list's and the note field's own keys, every
        action with a shortcut (read from the actions, so the list cannot drift), the mouse."""
        rows = list(LIST_KEYS)
        for action in self.actions():
            keys = ", ".join(key.toString(QKeySequence.SequenceFormat.NativeText)
                             for key in action.shortcuts())
            if keys and action.text():
                # undo and redo name the step they would take: the list names the key's job
                text = {self.act_undo: "Undo the last edit",
                        self.act_redo: "Redo the edit undone"}.get(action, action.text())
                rows.append((keys, text.replace("&", "").rstrip("…")))
        return [*rows, *NOTE_KEYS, *MOUSE_KEYS]

    def shortcut_table_html(self) -> str:
        rows = self.shortcut_rows()
        body = "".join(f"<tr><td><b>{k}</b></td><td>{t}</td></tr>" for k, t in rows)
        return f"<table cellspacing='6'>{body}</table>"

    def show_about(self) -> None:
        from core import __version__

        QMessageBox.about(self, "About wakeline",
                          f"wakeline {__version__}\nPIV of seamed balls in flight: velocity, "
                          "vorticity and separation angles per shot, with review.")

    # -- a small screen ----------------------------------------------------------------------
    def eventFilter(self, watched, event) -> bool:
        if watched is self.splitter and event.type() == QEvent.Type.Resize:
            # once the splitter has shared its new width out (a smaller window, a dock moved
            # beside it)
            self._room_later.start()
        return super().eventFilter(watched, event)

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if not event.spontaneous():  # a window that opens low (not one brought back)
            self._height_later.start()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        if event.oldSize().isValid() and event.size().height() < event.oldSize().height():
            self._height_later.start()  # once the layout has settled

    def _make_height_for_canvas(self) -> None:
        """When the window is or gets low, the panel docked below the others (the session
        overview, the conditions) gives up height until they are ``CANVAS_HEIGHT_PX`` high (down to its least height); the
        analyst's own dock height stays as long as the window keeps its size."""
        below = [dock for dock in self.findChildren(QDockWidget)
                 if not dock.isFloating() and in_front(self, dock)
                 and self.dockWidgetArea(dock) == Qt.DockWidgetArea.BottomDockWidgetArea]
        short = CANVAS_HEIGHT_PX - self.splitter.height()
        if not below or short <= 0:
            return
        dock = below[0]
        height = max(dock.minimumSizeHint().height(), dock.height() - short)
        if height < dock.height():
            self.resizeDocks([dock], [height], Qt.Orientation.Vertical)

    def _on_panels_set_by_hand(self, *_args) -> None:
        self._panels_set_by_hand = True
        self._side_widths = None

    def _make_room_for_canvas(self) -> None:
        """On a narrow window the picture takes room from the shot list and the readout, down
        to their least widths, until it is ``CANVAS_ROOM_PX`` wide (the splitter otherwise keeps
        the side panels whole and squeezes the picture alone); on a wider one again they get
        it back, up to the widths they had. Not once the analyst has set the panels' widths by
        hand in this window."""
        sizes = self.splitter.sizes()
        if self._panels_set_by_hand or len(sizes) != 3 or not all(sizes):
            return
        sides = (0, 2)
        if sizes[1] > CANVAS_ROOM_PX and self._side_widths is not None:
            self._give_back_room(sizes)
            return
        if sizes[1] >= CANVAS_ROOM_PX:
            return
        least = {i: max(self.splitter.widget(i).minimumWidth(),
                        self.splitter.widget(i).minimumSizeHint().width()) for i in sides}
        spare = {i: max(0, sizes[i] - least[i]) for i in sides}
        total = sum(spare.values())
        if total == 0:
            return
        take = min(CANVAS_ROOM_PX - sizes[1], total)
        if self._side_widths is None:
            self._side_widths = {i: sizes[i] for i in sides}
        for i in sides:
            given = round(take * spare[i] / total)
            sizes[i] -= given
            sizes[1] += given
        self.splitter.setSizes(sizes)

    def _give_back_room(self, sizes: list[int]) -> None:
        """The side panels take back the room the picture took (``_make_room_for_canvas``), as
        far as the picture stays ``CANVAS_ROOM_PX`` wide."""
        owed = {i: max(0, width - sizes[i]) for i, width in self._side_widths.items()}
        spare = sizes[1] - CANVAS_ROOM_PX
        total = sum(owed.values())
        if total <= spare:
            self._side_widths = None  # all of it given back
        for i, debt in owed.items():
            given = debt if total <= spare else int(spare * debt / total)
            sizes[i] += given
            sizes[1] -= given
        self.splitter.setSizes(sizes)

    def _panel_sizes_to_keep(self) -> list[int]:
        """The splitter's sizes as the next window should start with them: the side panels at
        the widths they had before the picture took room."""
        sizes = self.splitter.sizes()
        for i, width in (self._side_widths or {}).items():
            sizes[1] -= width - sizes[i]
            sizes[i] = width
        return sizes

    # -- closing -----------------------------------------------------------------------------
    def closeEvent(self, event) -> None:
        self.settings.setValue("window/geometry", self.saveGeometry())
        if self._side_widths is not None:  # the next, maybe larger, window starts as before
            self.splitter.setSizes(self._panel_sizes_to_keep())
        self.settings.setValue("window/splitter", self.splitter.saveState())
        self.settings.setValue("window/docks", self.saveState())
        self._save_layers()
        self.settings.sync()
        self.hide()  # gone at once; folding the journal into the file may take a moment
        shown = len(self._message_boxes)
        self.close_session()
        late = [(box.windowTitle(), box.text()) for box in self._message_boxes[shown:]]
        for box in list(self._message_boxes):
            box.close()
        for title, text in late:  # a failed last save: told, not closed with the window
            self.tell_at_exit(title, text)
        super().closeEvent(event)

    def tell_at_exit(self, title: str, text: str) -> None:
        """A problem of the window's last moments (its last save): on standard error, and in a
        box the analyst closes where there is a screen to show it on."""
        print(f"wakeline: {title}: {text}", file=sys.stderr)
        if QApplication.platformName() not in ("offscreen", "minimal"):
            QMessageBox.warning(None, title, text)


# -- the entry point --------------------------------------------------------------------------
def log_file() -> Path:
    return user_data_dir() / "wakeline.log"


def _setup_logging() -> logging.Handler:
    """Send wakeline's log to the user's log file (once per file)."""
    path = str(log_file())
    root = logging.getLogger("wakeline")
    for handler in root.handlers:
        if isinstance(handler, logging.FileHandler) and handler.baseFilename == path:
            return handler
    handler = logging.FileHandler(path, encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    root.addHandler(handler)
    root.setLevel(logging.INFO)
    return handler


def install_excepthook(window: MainWindow) -> None:
    """Log unexpected exceptions to the user's log file and show them; the session stays open."""
    window_ref = weakref.ref(window)  # the hook must not keep a closed window alive

    def hook(exc_type, exc, tb) -> None:
        live = window_ref()
        if issubclass(exc_type, KeyboardInterrupt) or live is None:
            sys.__excepthook__(exc_type, exc, tb)
            return
        text = "".join(traceback.format_exception(exc_type, exc, tb))
        log.error("unexpected error\n%s", text)
        first = str(exc).splitlines()[0] if str(exc) else exc_type.__name__
        live.show_problem(
            "Unexpected error",
            f"{exc_type.__name__}: {first}\n\nYour session is still open and every edit made "
            f"so far is saved. Details are in {log_file()}.",
        )

    sys.excepthook = hook


def run_window(session_path: str | None = None) -> int:
    """Open the review window on a session (None: the last one) and run until it is closed.

    Raises
    ------
    core.WakelineError
        When Qt's platform plugin cannot load here (names the Debian packages to install), or
        the X display set cannot be reached.
    """
    if QApplication.instance() is None:
        problem = platform_problem()
        if problem:
            raise WakelineError(problem)
        unreachable = unreachable_display()  # Qt's xcb plugin would abort the program
        if unreachable:
            raise WakelineError(f"no display to open the window on ({unreachable}); the "
                                "headless commands are listed by 'wakeline --help'")
    app = QApplication.instance() or QApplication(sys.argv)
    app.setOrganizationName(ORGANISATION)
    app.setApplicationName(APPLICATION)
    app.setWindowIcon(app_icon())
    pg.setConfigOptions(imageAxisOrder="row-major")
    _setup_logging()
    window = MainWindow()
    previous_hook = sys.excepthook
    install_excepthook(window)
    window.show()
    QTimer.singleShot(0, lambda: window.open_session(session_path) if session_path
                      else window.reopen_last_session())
    restore = _close_on_signals(window)
    try:
        return int(app.exec())
    finally:
        restore()
        sys.excepthook = previous_hook


#: Signals that close the window as its close button does (the session folded and unlocked):
#: a logout or ``kill`` (SIGTERM), a closed terminal (SIGHUP), Ctrl+C in it (SIGINT).
CLOSING_SIGNALS = tuple(getattr(signal, name) for name in ("SIGTERM", "SIGHUP", "SIGINT")
                        if hasattr(signal, name))


def _close_on_signals(window: MainWindow):
    """Close ``window`` on ``CLOSING_SIGNALS``; returns what puts the old handlers back.

    Python runs a signal handler only when the interpreter next gets control, which Qt's event
    loop does not give it while idle: a timer hands it control a few times a second."""
    previous = {signum: signal.signal(signum, lambda *_: QTimer.singleShot(0, window.close))
                for signum in CLOSING_SIGNALS}
    wake = QTimer()  # no parent: it outlives the window, which may be deleted on closing
    wake.timeout.connect(lambda: None)
    wake.start(250)

    def restore() -> None:
        wake.stop()
        for signum, handler in previous.items():
            signal.signal(signum, handler)

    return restore
