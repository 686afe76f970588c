"""The review window's session handling: open (recent files, the last session at the last shot,
drag and drop), import a folder, save and close. A part of ``MainWindow`` (``app.qt.window``);
the store is reached through the window's ``SessionModel`` only.
"""

from __future__ import annotations

import json
from pathlib import Path

from PySide6.QtWidgets import QMessageBox

from app.qt.file_dialogs import SESSION_FILTER, ask_path, new_session_path
from app.qt.workers import BackgroundJob, JobOutcome, corrections_job, import_job
from app.review.model import MANIFEST_NAME, JournalDamaged, SessionLocked, SessionReadOnly
from core import WakelineError

MAX_RECENT = 8


class SessionActions:
    """Opening, importing, saving and closing sessions (mixed into ``MainWindow``)."""

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

    def _forget_recent(self, path: str) -> None:
        """Drop a recent session whose file is gone, and say so."""
        self.settings.setValue("recent", [p for p in self.recent_sessions() if p != path])
        self._rebuild_recent()
        self.statusBar().showMessage(f"{path} is gone: removed from the recent sessions.", 10000)

    def _rebuild_recent(self) -> None:
        self.recent_menu.clear()
        recent = self.recent_sessions()
        for index, path in enumerate(recent, start=1):
            action = self.recent_menu.addAction(f"&{index} {path}")
            action.triggered.connect(lambda _=False, p=path: self.open_recent(p))
        self.recent_menu.setEnabled(bool(recent))

    def open_recent(self, path: str) -> bool:
        """Open a recent session; one whose file is gone is dropped from the list with a note."""
        if not Path(path).is_file():
            self._forget_recent(path)
            return False
        return self.open_session(path)

    def reopen_last_session(self) -> bool:
        """Open the most recent session that still exists (at the shot last worked on)."""
        for path in self.recent_sessions():
            if Path(path).is_file():
                return self.open_session(path)
            self._forget_recent(path)
        return False

    def _last_shots(self) -> dict[str, str]:
        """Session path -> the shot that was current when the analyst left it."""
        try:
            value = json.loads(str(self.settings.value("last_shots", "{}")))
        except ValueError:
            return {}
        return value if isinstance(value, dict) else {}

    def _remember_last_shot(self, shot_id: str) -> None:
        if self.model.path is None or not shot_id:
            return
        recent = set(self.recent_sessions())
        shots = {p: s for p, s in self._last_shots().items() if p in recent}
        shots[str(self.model.path.resolve())] = shot_id
        self.settings.setValue("last_shots", json.dumps(shots))


    # -- session -----------------------------------------------------------------------------
    def open_session_dialog(self) -> None:
        path = ask_path(self, "Open session", self._last_folder(), SESSION_FILTER)
        if path:
            self.open_session(path)

    def open_session(self, path, writable: bool = True, up_to_damage: bool = False) -> bool:
        """Open a session file; problems are shown to the user, never raised. True on success.
        A damaged journal line: offered read-only as saved up to it (``up_to_damage``)."""
        path = Path(path)
        current = self.model.path
        if current is not None and current.resolve() == path.resolve():
            if writable != self.model.read_only:
                return True  # already open as asked
            self.close_session()  # reopening the same file: our own lock must go first
        self.readout.save_typed_note()  # for the session it was typed in, before any other
        try:
            # the open session stays if this fails
            self.model.open(path, writable=writable, up_to_damage=up_to_damage)
        except SessionLocked as exc:
            if writable and self._ask_read_only(str(exc)):
                return self.open_session(path, writable=False)
            self.show_problem("Session read-only" if isinstance(exc, SessionReadOnly)
                              else "Session in use", str(exc))
            return False
        except JournalDamaged as exc:
            choice = self.ask("Session journal damaged", str(exc),
                              (f"Open read-only without line {exc.number} on", "Cancel"))
            if choice == 0:
                return self.open_session(path, writable=False, up_to_damage=True)
            return False
        except WakelineError as exc:
            self.show_problem("Cannot open session", str(exc))
            return False
        except OSError as exc:
            self.show_problem("Cannot open session", f"{path}: {exc.strerror or exc}")
            return False
        if self.model.session.damage_note:
            self.show_problem("Session opened read-only", self.model.session.damage_note)
        self._remember_recent(path)
        self.settings.setValue("last_folder", str(path.parent))
        ids = self.shot_list.visible_ids()
        last = self._last_shots().get(str(path.resolve()))
        if ids:
            self.model.set_current(last if last in ids else ids[0])
        self.shot_list.view.setFocus()
        unprocessed = self.model.unprocessed_ids()
        if unprocessed and self.act_auto.isChecked() and not self.model.read_only:
            self.start_processing(unprocessed)
        return True

    def _ask_read_only(self, text: str) -> bool:
        answer = QMessageBox.question(self, "Open read-only?",
                                      f"{text}\n\nOpen it read-only to look at it?")
        return answer == QMessageBox.StandardButton.Yes

    def close_session(self) -> None:
        self.readout.save_typed_note()  # the field is not left first (Ctrl+F4)
        try:
            found = self.model.close()  # its closing signal stops the job and clears undo
        except WakelineError as exc:
            self.show_problem("Closing the session", str(exc))
            return
        self._tell_damage("Closing the session", found)

    def _tell_damage(self, title: str, found: list[str]) -> None:
        """What a save found damaged or lost in the file, one line per shot part."""
        if found:
            self.show_problem(title, "The session was saved without these damaged parts:\n"
                              + "\n".join(found[:15]))

    def _on_session_closing(self) -> None:
        if self.job is not None:
            self.job.cancel_and_wait()
        self.undo_stack.clear()

    def save_session(self) -> None:
        if self.model.read_only:
            self.statusBar().showMessage("Nothing to save.", 4000)
            return
        try:
            found = self.model.compact()
        except WakelineError as exc:
            self.show_problem("Save", str(exc))
            return
        if found:
            self._tell_damage("Save", found)
            return
        self.statusBar().showMessage(
            "Every edit was already saved when you made it; the session file is now compacted.",
            6000,
        )

    def import_folder_dialog(self, folder: str | None = None) -> None:
        if folder is None:
            folder = ask_path(self, "Import a folder of shots", self._last_folder(),
                              mode="folder")
        if not folder:
            return
        default = new_session_path(folder, (self._last_folder(), Path.home()))
        target = ask_path(self, "Session file to create or add to", str(default),
                          SESSION_FILTER, mode="save")
        if target:
            self.import_folder(folder, target)

    def import_folder(self, folder, session_path) -> BackgroundJob | None:
        """Import ``folder`` into ``session_path`` in the background, then open the session.
        Shots already there with the same frames but other values in ``shots.csv`` are
        offered as corrections (:meth:`_ask_take_corrections`)."""
        if self.job is not None:
            self.show_problem("Busy", "Wait for the running job to finish or cancel it.")
            return None
        open_path = None if self.model.path is None else self.model.path.resolve()
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

    def _on_import_finished(self, outcome: JobOutcome, session_path, imported=None) -> None:
        """After an import, or (``imported``: that import's report) after the corrections it
        found were taken."""
        self._end_job()
        if outcome.error:
            self.show_problem("Import", outcome.error)
            return
        report = outcome.value
        if report is None:  # stopped while the window closed
            return
        if imported is None and report.differing and not outcome.cancelled and \
                self._ask_take_corrections(list(report.differing)):
            job = corrections_job(session_path, report.differing, self)
            job.finished.connect(
                lambda done: self._on_import_finished(done, session_path, report))
            self._start_job(job, "Taking the corrected values", 0)
            return
        first = imported or report
        taken = set(report.corrected)  # their rows' refusals no longer hold
        problems = [p for p in first.problems
                    if not any(f"(shot {shot}):" in p for shot in taken)]
        if problems:
            self.show_problem("Import: some rows were not imported",
                              "\n".join(problems[:15] + first.notes))
        elif first.notes:  # every row went in, with something to check
            self.show_problem("Import: notes to check", "\n".join(first.notes[:15]))
        word = "Import stopped" if outcome.cancelled else "Imported"
        corrected = (f"; the values of {len(report.corrected)} corrected, the picks kept, "
                     f"{len(report.outdated)} to be processed again" if report.corrected else "")
        self.statusBar().showMessage(
            f"{word}: {len(first.imported)} shots imported{corrected}.", 6000)
        if Path(session_path).exists():  # every row refused into a new session: none was made
            self.open_session(session_path)

    def _ask_take_corrections(self, shots: list[str]) -> bool:
        """Whether the new values of these shots (same frames, other values in shots.csv)
        replace those in the session: a dt or scale corrected after import."""
        named = ", ".join(shots[:6]) + (" ..." if len(shots) > 6 else "")
        answer = QMessageBox.question(
            self, "Corrected values?",
            f"{len(shots)} shot(s) already in the session have other values in "
            f"{MANIFEST_NAME} than when they were imported ({named}).\n\nTake the new values? "
            "Their picks stay; those the new values measure differently are to be processed "
            "again.")
        return answer == QMessageBox.StandardButton.Yes

    def _last_folder(self) -> str:
        return str(self.settings.value("last_folder", str(Path.home())))

    # -- drag and drop ---------------------------------------------------------------------
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
