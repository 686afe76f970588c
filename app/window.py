"""The review window: shot list (left), canvas (centre), readout (right), menus and background work.

``run_window(session_path)`` is the GUI entry point of the ``wakeline`` command. The window holds
no unsaved state: each review edit is an undoable command written through the session journal at
once, and processing results are saved by the batch code as each shot finishes.
"""

from __future__ import annotations

import json
import logging
import os
import sys
import traceback
import weakref
from pathlib import Path

os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import pyqtgraph as pg
from PySide6.QtCore import QSettings, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence, QUndoStack
from PySide6.QtWidgets import (
    QApplication,
    QDialog,
    QFileDialog,
    QInputDialog,
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

from app.canvas import CanvasShot, ShotCanvas
from app.commands import MarkMove, PickEdit
from app.export import install_export_actions, install_overview
from app.icons import app_icon, status_icon
from app.model import SessionModel
from app.processing_dialog import ProcessingDialog
from app.readout import ReadoutPanel
from app.shot_list import ShotListPanel
from app.workers import BackgroundJob, JobOutcome, import_job, process_job
from core import WakelineError
from core.paths import user_data_dir
from core.session import MANIFEST_NAME, Session, SessionLocked

log = logging.getLogger("wakeline.window")

ORGANISATION = "wakeline"
APPLICATION = "wakeline"
MAX_RECENT = 8
NUDGE_DEG = 0.5
FINE_NUDGE_DEG = 0.1
SESSION_FILTER = "wakeline sessions (*.h5 *.hdf5);;All files (*)"

# (action key, menu text, shortcut, tip) of the review keys; shown in Help > Keyboard shortcuts
REVIEW_KEYS = (
    ("accepted", "&Accept proposal", "A", "accept the proposed angles"),
    ("adjusted", "Mark a&djusted", "D", "keep the marks where they are as the analyst's values"),
    ("unusable", "Mark &unusable…", "U", "the shot cannot be used; asks for a reason"),
    ("to review", "Back to &review", "R", "undecided again"),
)
REVIEW_BUTTON_TEXT = {"accepted": "Accept", "adjusted": "Adjusted", "unusable": "Unusable…",
                      "to review": "To review"}  # the readout's buttons: short for a narrow panel
NUDGE_KEYS = (
    ("upper", +NUDGE_DEG, "E"), ("upper", -NUDGE_DEG, "Q"),
    ("lower", +NUDGE_DEG, "C"), ("lower", -NUDGE_DEG, "Z"),
    ("upper", +FINE_NUDGE_DEG, "Shift+E"), ("upper", -FINE_NUDGE_DEG, "Shift+Q"),
    ("lower", +FINE_NUDGE_DEG, "Shift+C"), ("lower", -FINE_NUDGE_DEG, "Shift+Z"),
)


def app_settings() -> QSettings:
    """The user's wakeline preferences (INI file; tests point QSettings' path at a temp dir)."""
    return QSettings(QSettings.Format.IniFormat, QSettings.Scope.UserScope, ORGANISATION,
                     APPLICATION)


class MainWindow(QMainWindow):
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
        self.job: BackgroundJob | None = None
        self.last_problem = ""
        self._shown_key = None
        self._previous_id = ""
        self._prefetch_id = ""
        self._prefetch_timer = QTimer(self)
        self._prefetch_timer.setSingleShot(True)
        self._prefetch_timer.setInterval(0)
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
        install_export_actions(self)
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
        self.splitter.setSizes([345, 905, 350])
        self.splitter.setChildrenCollapsible(False)
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
        self.act_quit = a("&Quit", self.close, QKeySequence.StandardKey.Quit)
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
        self.act_next = a("&Next shot", lambda: self.shot_list.step(1), "N",
                          "next shot in the list (also Down in the list)")
        self.act_prev = a("&Previous shot", lambda: self.shot_list.step(-1), "P",
                          "previous shot in the list (also Up in the list)")
        self.act_next_open = a("Next shot &to review", self.next_to_review, "Shift+N")
        self.act_picture = a("Cycle &picture (A, B, flicker, none)", self.canvas.cycle_picture,
                             "F")
        self.act_vectors = a("Toggle &vectors", self.canvas.vectors_box.toggle, "V")
        self.act_vorticity = a("Toggle v&orticity", self.canvas.vorticity_box.toggle, "W")
        self.act_marks = a("Toggle separation &marks", self.canvas.marks_box.toggle, "M")
        self.act_side = a("&Side by side", self.canvas.side_box.toggle, "S")
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
        edit = menu.addMenu("&Edit")
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
        view = self.view_menu = menu.addMenu("&View")
        for action in (self.act_picture, self.act_vectors, self.act_vorticity, self.act_marks,
                       self.act_side, self.act_fit):
            view.addAction(action)
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
        self.model.session_changed.connect(self._on_session_changed)
        self.canvas.mark_moved.connect(self.readout.show_live)
        self.canvas.mark_released.connect(self._on_mark_released)
        self.canvas.mark_cancelled.connect(lambda _side: self.readout.show_current())
        self.canvas.layers_changed.connect(self._save_layers)
        self.readout.note_committed.connect(self._on_note_committed)
        self.readout.note.escaped.connect(self.shot_list.view.setFocus)
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
        auto = self.settings.value("processing/auto_on_open", True)
        self.act_auto.setChecked(str(auto).lower() in ("true", "1"))
        self._rebuild_recent()

    def _save_layers(self) -> None:
        self.settings.setValue("canvas/layers", json.dumps(self.canvas.layer_state()))

    def _on_auto_toggled(self, checked: bool) -> None:
        self.settings.setValue("processing/auto_on_open", bool(checked))

    def _workers(self) -> int | None:
        if self._workers_override is not None:
            return self._workers_override
        value = self.settings.value("processing/workers", "")
        try:
            return int(value) if str(value).strip() != "" else None
        except ValueError:
            return None

    def recent_sessions(self) -> list[str]:
        value = self.settings.value("recent", [])
        if isinstance(value, str):
            value = [value] if value else []
        return [str(v) for v in value]

    def _remember_recent(self, path: Path) -> None:
        text = str(Path(path).resolve())
        items = [text] + [p for p in self.recent_sessions() if p != text]
        self.settings.setValue("recent", items[:MAX_RECENT])
        self._rebuild_recent()

    def _rebuild_recent(self) -> None:
        self.recent_menu.clear()
        recent = self.recent_sessions()
        for index, path in enumerate(recent, start=1):
            action = self.recent_menu.addAction(f"&{index} {path}")
            action.triggered.connect(lambda _=False, p=path: self.open_session(p))
        self.recent_menu.setEnabled(bool(recent))

    # -- session -----------------------------------------------------------------------------
    def open_session_dialog(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open session", self._last_folder(),
                                              SESSION_FILTER)
        if path:
            self.open_session(path)

    def open_session(self, path, writable: bool = True) -> bool:
        """Open a session file; problems are shown to the user, never raised. True on success."""
        path = Path(path)
        current = self.model.session
        if current is not None and Path(current.path).resolve() == path.resolve():
            if writable != self.model.read_only:
                return True  # already open as asked
            self.close_session()  # reopening the same file: our own lock must go first
        try:
            session = Session.open(path, writable=writable)
        except SessionLocked as exc:
            if writable and self._ask_read_only(str(exc)):
                return self.open_session(path, writable=False)
            self.show_problem("Session in use", str(exc))
            return False
        except WakelineError as exc:
            self.show_problem("Cannot open session", str(exc))
            return False
        except OSError as exc:
            self.show_problem("Cannot open session", f"{path}: {exc.strerror or exc}")
            return False
        self.close_session()  # only now: a file that fails to open leaves the current one open
        self.model.adopt(session)
        self._remember_recent(path)
        self.settings.setValue("last_folder", str(path.parent))
        ids = self.shot_list.visible_ids()
        if ids:
            self.model.set_current(ids[0])
        self.shot_list.view.setFocus()
        unprocessed = self.model.unprocessed_ids()
        if unprocessed and self.act_auto.isChecked() and not self.model.read_only:
            self.start_processing(unprocessed)
        return True

    def _ask_read_only(self, text: str) -> bool:
        answer = QMessageBox.question(self, "Session in use",
                                      f"{text}\n\nOpen it read-only to look at it?")
        return answer == QMessageBox.StandardButton.Yes

    def check_frames(self) -> BackgroundJob | None:
        """Check every shot's frame files (checksums) in the background and report problems."""
        session = self.model.session
        if session is None or self.job is not None:
            return None
        job = BackgroundJob(lambda _report, stop: session.check_frames(stop), self)
        job.finished.connect(self._on_frames_checked)
        self._start_job(job, "Checking frame files", 0)
        return job

    def _on_frames_checked(self, outcome: JobOutcome) -> None:
        self._end_job()
        if outcome.error:
            self.show_problem("Checking frame files", outcome.error)
            return
        problems = outcome.value or {}
        if not problems:
            text = ("Frame check stopped; no problem in the shots checked." if outcome.cancelled
                    else "Every frame file is present and unchanged.")
            self.statusBar().showMessage(text, 6000)
            return
        lines = [problems[k] for k in sorted(problems)][:10]
        more = len(problems) - len(lines)
        text = "\n".join(lines) + (f"\n… and {more} more" if more > 0 else "")
        self.show_problem("Frame files changed or missing", text)

    def close_session(self) -> None:
        if self.job is not None:
            self.job.cancel_and_wait()
        self.undo_stack.clear()
        try:
            self.model.close()
        except WakelineError as exc:
            self.show_problem("Closing the session", str(exc))

    def save_session(self) -> None:
        session = self.model.session
        if session is None or session.read_only:
            self.statusBar().showMessage("Nothing to save.", 4000)
            return
        try:
            session.compact()
        except WakelineError as exc:
            self.show_problem("Save", str(exc))
            return
        self.statusBar().showMessage(
            "Every edit was already saved when you made it; the session file is now compacted.",
            6000,
        )

    def import_folder_dialog(self, folder: str | None = None) -> None:
        if folder is None:
            folder = QFileDialog.getExistingDirectory(self, "Import a folder of shots",
                                                      self._last_folder())
        if not folder:
            return
        default = str(Path(folder).with_suffix(".h5"))
        target, _ = QFileDialog.getSaveFileName(self, "Session file to create or add to",
                                                default, SESSION_FILTER)
        if target:
            self.import_folder(folder, target)

    def import_folder(self, folder, session_path) -> BackgroundJob | None:
        """Import ``folder`` into ``session_path`` in the background, then open the session."""
        if self.job is not None:
            self.show_problem("Busy", "Wait for the running job to finish or cancel it.")
            return None
        open_path = None if self.model.session is None else Path(self.model.session.path).resolve()
        if open_path == Path(session_path).resolve():
            self.close_session()
        job = import_job(folder, session_path, self)
        job.item_done.connect(self._on_import_item)
        job.finished.connect(lambda outcome: self._on_import_finished(outcome, session_path))
        self._start_job(job, "Importing", 0)
        return job

    def _on_import_item(self, item) -> None:
        shot_id, _ok, _message = item
        self.progress_label.setText(f"Importing {shot_id}")

    def _on_import_finished(self, outcome: JobOutcome, session_path) -> None:
        self._end_job()
        if outcome.error:
            self.show_problem("Import", outcome.error)
            return
        report = outcome.value
        if report is None:  # stopped while the window closed
            return
        if report.problems:
            self.show_problem("Import: some rows were not imported",
                              "\n".join(report.problems[:15] + report.notes))
        word = "Import stopped" if outcome.cancelled else "Imported"
        self.statusBar().showMessage(f"{word}: {len(report.imported)} shots imported.", 6000)
        self.open_session(session_path)

    def _last_folder(self) -> str:
        return str(self.settings.value("last_folder", str(Path.home())))

    # -- background processing ---------------------------------------------------------------
    def start_processing(self, shot_ids=None, force: bool = False) -> BackgroundJob | None:
        """Process shots in the background (default: every shot that needs it)."""
        session = self.model.session
        if session is None or session.read_only:
            self.statusBar().showMessage("Open a session for writing to process shots.", 5000)
            return None
        if self.job is not None:
            self.statusBar().showMessage("Processing is already running.", 4000)
            return None
        if shot_ids:
            total = len(shot_ids)
        elif force:
            total = len(session.shot_ids())
        else:
            total = sum(session.needs_processing(s) for s in session.shot_ids())
        if total == 0:
            self.statusBar().showMessage("Every shot is processed.", 4000)
            return None
        job = process_job(session, shot_ids, workers=self._workers(), force=force, parent=self)
        job.item_done.connect(self._on_shot_processed)
        job.finished.connect(self._on_processing_finished)
        self._start_job(job, "Processing", total)
        return job

    def reprocess_current(self) -> None:
        shot_id = self.model.current_id
        if shot_id:
            self.start_processing([shot_id], force=True)

    def edit_processing_settings(self) -> ProcessingDialog:
        """Open the processing settings; the session's are saved in it on OK."""
        session = self.model.session
        locked = ("No session is open" if session is None
                  else "The session is open read-only" if session.read_only else "")
        settings = {} if session is None else session.processing_settings()
        dialog = ProcessingDialog(settings, self._workers(), locked, self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.accepted.connect(lambda: self._apply_processing_settings(dialog))
        dialog.open()
        return dialog

    def _apply_processing_settings(self, dialog: ProcessingDialog) -> None:
        count = dialog.worker_count()
        self.settings.setValue("processing/workers", "" if count is None else count)
        session = self.model.session
        if session is None or session.read_only or dialog.settings() == session.processing_settings():
            return
        try:
            session.set_processing_settings(dialog.settings())
        except WakelineError as exc:
            self.show_problem("Processing settings", str(exc))
            return
        stale = sum(session.needs_processing(s) for s in session.shot_ids())
        self.statusBar().showMessage(
            f"Processing settings saved in the session; {stale} shots need processing "
            "(Process ▸ Process shots that need it, Ctrl+P).", 10000)

    def cancel_processing(self) -> None:
        if self.job is not None:
            self.job.cancel()
            self.progress_label.setText("Stopping…")

    def _start_job(self, job: BackgroundJob, verb: str, total: int) -> None:
        self.job = job
        self.progress.setRange(0, total)
        self.progress.setValue(0)
        self.progress.setFormat("%v / %m" if total else "")
        self.progress_label.setText(f"{verb}…")
        for widget in (self.progress_label, self.progress, self.cancel_button):
            widget.show()
        self._update_enabled()
        job.start()

    def _end_job(self) -> None:
        job, self.job = self.job, None
        if job is not None:
            job.deleteLater()  # its function holds the session: let both go
        for widget in (self.progress_label, self.progress, self.cancel_button):
            widget.hide()
        self._update_enabled()

    def _on_shot_processed(self, outcome) -> None:
        if self.model.session is None:
            return
        self.progress.setMaximum(outcome.total)
        self.progress.setValue(outcome.done)
        state = "done" if outcome.ok else "failed"
        self.progress_label.setText(f"Processing: {outcome.shot_id} {state}")
        self.model.refresh(outcome.shot_id)

    def _on_processing_finished(self, outcome: JobOutcome) -> None:
        self._end_job()
        if outcome.error:
            self.show_problem("Processing stopped", outcome.error)
            return
        summary = outcome.value
        done = "" if summary is None else (
            f"{summary.processed} processed, {summary.failed} failed")
        word = "Processing cancelled" if outcome.cancelled else "Processing finished"
        self.statusBar().showMessage(f"{word}: {done}" if done else word, 8000)

    # -- showing the current shot ------------------------------------------------------------
    def _on_session_changed(self) -> None:
        self._shown_key = None
        self._update_title()
        self._update_enabled()
        if self.model.session is None:
            self.canvas.show_shot(None)
            self.readout.show_record(None)

    def _on_current_changed(self, shot_id: str) -> None:
        previous = self._previous_id
        self._previous_id = shot_id
        self._show_current(full=True)
        self._update_enabled()
        if shot_id:
            # read the next shot in the direction of travel while the analyst looks at this one
            back = bool(previous) and self.shot_list.neighbour(shot_id, 1) == previous
            self._prefetch_id = self.shot_list.neighbour(shot_id, -1 if back else 1)
            self._prefetch_timer.start()

    def _prefetch(self) -> None:
        if self.job is None:  # while processing, leave the session file to the worker
            self.model.prefetch(self._prefetch_id)

    def _on_record_changed(self, shot_id: str) -> None:
        if shot_id == self.model.current_id:
            self._show_current(full=False)
            self._update_enabled()

    def _show_current(self, full: bool) -> None:
        shot_id = self.model.current_id
        if not shot_id:
            self._shown_key = None
            self.canvas.show_shot(None)
            self.readout.show_record(None)
            return
        record = self.model.record(shot_id)
        key = (shot_id, record.state, record.processed_utc, record.fingerprint)
        if full or key != self._shown_key:
            shot = self._canvas_shot(record)
            self.canvas.show_shot(shot)
            self._shown_key = key
        else:
            self.canvas.update_marks(*self._mark_values(record), editable=self._editable(record))
        self.readout.show_record(record)

    def _canvas_shot(self, record) -> CanvasShot:
        messages = []
        result = None
        if record.state == "processed":
            try:
                result = self.model.result(record.shot_id)
            except (WakelineError, OSError, KeyError) as exc:  # a damaged stored result
                # log text only: a kept exception would hold this window through its traceback
                log.warning("shot %s: stored result unreadable: %s", record.shot_id, str(exc))
                messages.append(f"shot {record.shot_id}: stored result cannot be read ({exc}); "
                                "reprocess it (Ctrl+Shift+P)")
        elif record.state == "failed":
            messages.append(f"Processing failed: {record.failure or 'no reason given'}")
        else:
            messages.append("Not processed yet" + (
                " — processing is running." if self.job is not None else
                " — use Process ▸ Process shots that need it (Ctrl+P)."))
        frame_a = frame_b = None
        try:
            frame_a, frame_b = self.model.frames(record.shot_id)
        except (WakelineError, OSError) as exc:
            messages.append(str(exc))
        proposed, final = self._mark_values(record)
        return CanvasShot(
            shot_id=record.shot_id, frame_a=frame_a, frame_b=frame_b, result=result,
            proposed_deg=proposed, final_deg=final, message="\n".join(messages),
            editable=self._editable(record),
        )

    @staticmethod
    def _mark_values(record) -> tuple[dict, dict]:
        sides = ("upper", "lower")
        proposed = {s: record.proposed_deg(s) for s in sides}
        final = {s: record.final_deg(s) for s in sides}
        return proposed, final

    def _editable(self, record) -> bool:
        return not self.model.read_only and record.pick.status != "unusable"

    # -- review edits ------------------------------------------------------------------------
    def _can_edit(self) -> bool:
        return bool(self.model.current_id) and not self.model.read_only

    def _push(self, command) -> None:
        """Apply an edit (saved at once) and put it on the undo stack; report a refusal."""
        try:
            command.apply()
        except WakelineError as exc:
            self.show_problem("Edit not saved", str(exc))
            self._show_current(full=False)
            return
        self.undo_stack.push(command)

    def set_status(self, status: str, reason: str | None = None) -> None:
        """Review the current shot: accepted, adjusted, unusable (asks a reason) or to review."""
        if not self._can_edit():
            return
        shot_id = self.model.current_id
        record = self.model.record(shot_id)
        if status == "unusable":
            if reason is None:
                reason = self._ask_reason(record.pick.reason)
            if not reason:
                return
            changes = {"status": "unusable", "reason": reason}
        elif status == "adjusted":
            changes = {"status": "adjusted", "reason": ""}
            for side in ("upper", "lower"):
                changes[f"{side}_deg"] = self.canvas.mark_angle(side) if \
                    self.canvas.shot is not None and self.canvas.shot.shot_id == shot_id else \
                    record.shown_deg(side)
        else:
            changes = {"status": status, "reason": ""}
        if status == record.pick.status and status != "adjusted":
            return
        self._push(PickEdit(self.model, shot_id, changes, f"Mark shot {shot_id} {status}"))

    def _ask_reason(self, previous: str) -> str:
        text, ok = QInputDialog.getText(self, "Unusable shot", "Why can this shot not be used?",
                                        text=previous)
        return text.strip() if ok else ""

    def nudge(self, side: str, step_deg: float) -> None:
        if not self._can_edit() or self.canvas.shot is None:
            return
        record = self.model.record(self.model.current_id)
        if record.pick.status == "unusable" or record.state != "processed":
            return
        current = self.canvas.mark_angle(side)
        angle = round((0.0 if current is None else current) + step_deg, 6)
        self._push(MarkMove(self.model, record.shot_id, side, angle, nudge=True))

    def _on_mark_released(self, side: str, angle_deg: float) -> None:
        if not self._can_edit():
            return
        shot_id = self.model.current_id
        self._push(MarkMove(self.model, shot_id, side, angle_deg))

    def _on_note_committed(self, text: str) -> None:
        shot_id = self.readout.shot_id
        if not shot_id or self.model.read_only or self.model.session is None:
            return
        if self.model.record(shot_id).pick.note == text:
            return
        self._push(PickEdit(self.model, shot_id, {"note": text}, f"Edit note of shot {shot_id}"))

    def next_to_review(self) -> None:
        ids = self.shot_list.visible_ids()
        if not ids:
            return
        start = ids.index(self.model.current_id) + 1 if self.model.current_id in ids else 0
        for shot_id in ids[start:] + ids[:start]:
            if self.model.record(shot_id).pick.status == "to review":
                self.model.set_current(shot_id)
                return
        self.statusBar().showMessage("No shot left to review.", 5000)

    # -- state of the window -----------------------------------------------------------------
    def _update_title(self) -> None:
        session = self.model.session
        if session is None:
            self.setWindowTitle("wakeline")
            return
        tag = " [read-only]" if session.read_only else ""
        self.setWindowTitle(f"wakeline — {session.name} ({session.path}){tag}")

    def _update_enabled(self) -> None:
        has_session = self.model.session is not None
        writable = has_session and not self.model.read_only
        has_shot = bool(self.model.current_id)
        busy = self.job is not None
        record = self.model.record(self.model.current_id) if has_shot else None
        has_proposal = record is not None and record.summary is not None
        for key, action in self.review_actions.items():
            needs_proposal = key in ("accepted", "adjusted")
            action.setEnabled(writable and has_shot and (has_proposal or not needs_proposal))
        for action in self.nudge_actions:
            action.setEnabled(writable and has_proposal)
        self.act_save.setEnabled(writable)
        self.act_close.setEnabled(has_session)
        self.act_process.setEnabled(writable and not busy)
        self.act_reprocess.setEnabled(writable and has_shot and not busy)
        self.act_cancel.setEnabled(busy)
        self.act_check.setEnabled(has_session and not busy)
        self.act_settings.setEnabled(not busy)  # not while a job reads the settings
        self.act_import.setEnabled(not busy)
        self.export_menu.setEnabled(has_session and bool(self.export_menu.actions()))

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

    def shortcut_table_html(self) -> str:
        rows = [("Up / Down, PageUp / PageDown, Ctrl+Home / Ctrl+End",
                 "step through shots in the list")]
        for action in self.actions():
            keys = action.shortcut().toString(QKeySequence.SequenceFormat.NativeText)
            if keys and action.text():
                rows.append((keys, action.text().replace("&", "").rstrip("…")))
        rows.append(("drag a round mark", "move a separation mark along the ball outline"))
        body = "".join(f"<tr><td><b>{k}</b></td><td>{t}</td></tr>" for k, t in rows)
        return f"<table cellspacing='6'>{body}</table>"

    def show_about(self) -> None:
        from core import __version__

        QMessageBox.about(self, "About wakeline",
                          f"wakeline {__version__}\nPIV of seamed balls in flight: velocity, "
                          "vorticity and separation angles per shot, with review.")

    # -- drag and drop -----------------------------------------------------------------------
    def dragEnterEvent(self, event) -> None:
        urls = event.mimeData().urls() if event.mimeData().hasUrls() else []
        if urls and all(u.isLocalFile() for u in urls):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dropEvent(self, event) -> None:
        urls = event.mimeData().urls()
        if not urls:
            return
        event.acceptProposedAction()
        self.open_dropped(Path(urls[0].toLocalFile()))

    def open_dropped(self, path: Path) -> None:
        """A session file opens; a shot folder (or its shots.csv) is offered for import."""
        if path.is_dir() or path.name == MANIFEST_NAME:
            folder = path if path.is_dir() else path.parent
            if not (folder / MANIFEST_NAME).is_file():
                self.show_problem("Not a shot folder",
                                  f"{folder}: no {MANIFEST_NAME} describing the shots")
                return
            self.import_folder_dialog(str(folder))
            return
        if not path.is_file():
            self.show_problem("Cannot open", f"{path}: not found")
            return
        self.open_session(path)

    # -- closing -----------------------------------------------------------------------------
    def closeEvent(self, event) -> None:
        self.settings.setValue("window/geometry", self.saveGeometry())
        self.settings.setValue("window/splitter", self.splitter.saveState())
        self.settings.setValue("window/docks", self.saveState())
        self._save_layers()
        self.settings.sync()
        self.close_session()
        for box in list(self._message_boxes):
            box.close()
        super().closeEvent(event)


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
    """Open the review window (optionally with a session) and run until it is closed."""
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
    if session_path:
        QTimer.singleShot(0, lambda: window.open_session(session_path))
    try:
        return int(app.exec())
    finally:
        sys.excepthook = previous_hook
