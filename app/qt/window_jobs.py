"""The review window's background jobs: processing shots, checking frame files, the processing
settings, and the progress shown in the status bar. A part of ``MainWindow`` (``app.qt.window``).
"""

from __future__ import annotations

from PySide6.QtCore import Qt

from app.qt.processing_dialog import ProcessingDialog
from app.qt.workers import BackgroundJob, JobOutcome, process_job
from app.review.text import decisions_text
from core import WakelineError


class JobActions:
    """Background work of the window (mixed into ``MainWindow``); one job at a time."""

    def check_frames(self) -> BackgroundJob | None:
        """Check every shot's frame files (checksums) in the background and report problems."""
        if self.model.session is None or self.job is not None:
            return None
        job = BackgroundJob(lambda _report, stop: self.model.check_frames(stop), self)
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

    def start_processing(self, shot_ids=None, force: bool = False) -> BackgroundJob | None:
        """Process shots in the background (default: every shot that needs it)."""
        if self.model.read_only:
            self.statusBar().showMessage("Open a session for writing to process shots.", 5000)
            return None
        if self.job is not None:
            self.statusBar().showMessage("Processing is already running.", 4000)
            return None
        total = self.model.count_to_process(shot_ids, force)
        if total == 0:
            self.statusBar().showMessage("Every shot is processed.", 4000)
            return None
        job = process_job(self.model, shot_ids, workers=self._workers(), force=force, parent=self)
        job.item_done.connect(self._on_shot_processed)
        job.finished.connect(self._on_processing_finished)
        self._start_job(job, "Processing", total)
        return job

    def reprocess_current(self) -> None:
        shot_id = self.model.current_id
        if not shot_id:
            return
        # a frame gone would only fail the run: say so now, the result stays (a changed one the
        # run itself finds: reading the frames again here would hold the window)
        problem = self.model.check_frames(shot_ids=[shot_id], checksums=False).get(shot_id)
        if problem:
            kept = "; the shot's last result is kept" if self.model.record(shot_id).summary else ""
            self.show_problem("Reprocess", problem + kept)
            return
        self.start_processing([shot_id], force=True)

    def edit_processing_settings(self) -> ProcessingDialog:
        """Open the processing settings; the session's are saved in it on OK."""
        locked = ("No session is open" if self.model.session is None
                  else "The session is open read-only" if self.model.read_only else "")
        dialog = ProcessingDialog(self.model.processing_settings(), self._workers(), locked, self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.accepted.connect(lambda: self._apply_processing_settings(dialog))
        dialog.open()
        return dialog

    def _apply_processing_settings(self, dialog: ProcessingDialog) -> None:
        count = dialog.worker_count()
        self.settings.setValue("processing/workers", "" if count is None else count)
        if self.model.read_only:
            return
        try:
            if not self.model.set_processing_settings(dialog.settings()):
                return
        except WakelineError as exc:
            self.show_problem("Processing settings", str(exc))
            return
        stale = self.model.count_to_process()
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
        self._start_queued()  # a shot waiting to be measured again with the analyst's ball

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
            f"{summary.processed} processed, {summary.failed} failed"
            + decisions_text(summary.reopened, len(summary.decisions) - summary.reopened))
        if summary is not None and summary.decisions:  # what became of each decision
            shot_id, decision = summary.decisions[0]
            more = len(summary.decisions) - 1
            done = (f"{done}: shot {shot_id}: {decision}"
                    + (f" (and {more} more)" if more else ""))
        word = "Processing cancelled" if outcome.cancelled else "Processing finished"
        self.statusBar().showMessage(f"{word}: {done}" if done else word, 15000)
