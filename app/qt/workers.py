"""Background work for the window: a job on a QThread with per-item progress and cancel.

``BackgroundJob`` runs one callable ``fn(report, should_stop)`` on a worker thread; ``report``
sends an item to the GUI thread (signal ``item_done``) and ``should_stop`` tells the callable a
cancel was asked for. ``process_job`` is the batch processing of a session's shots
(``SessionModel.iter_process``): every shot is saved by the batch code as it finishes, and the
window refreshes that shot's row when the item arrives. The session serialises file access from
the two threads with its own lock.
"""

from __future__ import annotations

import logging
import threading
import traceback
from dataclasses import dataclass, field

from PySide6.QtCore import QObject, QThread, QTimer, Signal, Slot

from app.review.model import import_folder, take_corrections
from core import WakelineError

log = logging.getLogger("wakeline.window")


@dataclass
class JobOutcome:
    """How a job ended: its return value, or a one-line error; ``cancelled`` if stopped."""

    value: object = None
    error: str = ""
    cancelled: bool = False


class _Worker(QObject):
    item = Signal(object)
    done = Signal(object)

    def __init__(self, fn, stop: threading.Event) -> None:
        super().__init__()
        self._fn = fn
        self._stop = stop

    @Slot()
    def run(self) -> None:
        outcome = JobOutcome()
        try:
            outcome.value = self._fn(self.item.emit, self._stop.is_set)
        except WakelineError as exc:
            outcome.error = str(exc)
        except Exception as exc:  # noqa: BLE001 - report any failure, never end silently
            # text, not exc_info: a kept traceback would hold the session and the window
            log.error("background job failed\n%s", traceback.format_exc())
            outcome.error = _failure_words(exc)
        outcome.cancelled = self._stop.is_set()
        self.done.emit(outcome)


def _failure_words(exc: Exception) -> str:
    """An unexpected failure in a line: the system's own words for a failed file or process
    operation (the file it names first), else Python's name for it; the log has the rest."""
    if isinstance(exc, OSError) and exc.strerror:
        where = f"{exc.filename}: " if exc.filename else ""
        return f"{where}{exc.strerror.lower()} (details in the log)"
    return f"{type(exc).__name__}: {exc} (details in the log)"


class BackgroundJob(QObject):
    """One run of ``fn(report, should_stop)`` on its own QThread.

    Signals
    -------
    item_done(object)
        Each item the callable reported, delivered on the GUI thread.
    finished(JobOutcome)
        Once, when the callable returned (or raised), on the GUI thread.
    """

    item_done = Signal(object)
    finished = Signal(object)

    def __init__(self, fn, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self._fn = fn
        self._stop = threading.Event()
        self._thread: QThread | None = None
        self._worker: _Worker | None = None
        self._running = False

    def start(self) -> None:
        if self._running:
            raise RuntimeError("job already running")
        self._running = True
        self._thread = QThread()
        self._worker = _Worker(self._fn, self._stop)
        self._worker.moveToThread(self._thread)
        self._thread.started.connect(self._worker.run)
        self._worker.item.connect(self.item_done)
        self._worker.done.connect(self._on_done)
        self._thread.start()

    def cancel(self) -> None:
        """Ask the callable to stop; ``finished`` follows once it has."""
        self._stop.set()

    def is_running(self) -> bool:
        return self._running

    def cancel_and_wait(self) -> None:
        """Stop and block until the worker thread ended (used when closing a session)."""
        if not self._running:
            return
        self._stop.set()
        self._thread.quit()
        self._thread.wait()
        self._finish(JobOutcome(cancelled=True))

    @Slot(object)
    def _on_done(self, outcome: JobOutcome) -> None:
        if self._running:
            self._finish(outcome)

    def _finish(self, outcome: JobOutcome) -> None:
        self._running = False
        self._thread.quit()
        self._thread.wait()
        self._worker = None
        self._thread = None
        self.finished.emit(outcome)


@dataclass
class ProcessSummary:
    """What a processing run did (the value of a finished ``ProcessJob``)."""

    processed: int = 0
    failed: int = 0
    total: int = 0
    reopened: int = 0  # decided shots back to review
    decisions: list = field(default_factory=list)  # (shot, what became of its decision)


def process_job(model, shot_ids=None, workers: int | None = None, force: bool = False,
                parent: QObject | None = None) -> BackgroundJob:
    """A job that processes shots of the model's session; items are ``core.batch.ShotOutcome``.

    Parameters
    ----------
    model : app.review.model.SessionModel
        With a session open for writing.
    shot_ids : list of str, optional
        Shots to process (default: every shot that needs it).
    workers : int, optional
        Worker processes (None: all cores; 0: in the job's own thread, one shot at a time).
    force : bool
        Reprocess shots already processed with the same settings.
    """
    def run(report, should_stop) -> ProcessSummary:
        summary = ProcessSummary()
        for outcome in model.iter_process(shot_ids, workers=workers, force=force,
                                          should_stop=should_stop):
            summary.total = outcome.total
            if outcome.ok:
                summary.processed += 1
                summary.reopened += outcome.reopened
                if outcome.decision:
                    summary.decisions.append((outcome.shot_id, outcome.decision))
            else:
                summary.failed += 1
            report(outcome)
        return summary

    return BackgroundJob(run, parent)


def import_job(src_dir, session_path, parent: QObject | None = None) -> BackgroundJob:
    """A job importing a folder (``shots.csv`` + frames) into a session file; items are
    ``(shot_id, ok, message)``; the value is the store's ``ImportReport``."""

    def run(report, should_stop):
        return import_folder(src_dir, session_path,
                             on_shot=lambda sid, ok, msg: report((sid, ok, msg)),
                             should_stop=should_stop)

    return BackgroundJob(run, parent)


def corrections_job(session_path, corrections: dict[str, dict],
                    parent: QObject | None = None) -> BackgroundJob:
    """A job giving shots the corrected values an import found (``ImportReport.differing``);
    the value is the store's ``ImportReport`` of what it did."""

    def run(_report, _should_stop):
        return take_corrections(session_path, corrections)

    return BackgroundJob(run, parent)


def later(owner: QObject, slot) -> QTimer:
    """A single-shot timer of 0 ms that calls ``slot`` once the event loop is back (a layout
    settled, a resize shared out), owned by ``owner``: ``start()`` it. Unlike
    ``QTimer.singleShot(0, slot)`` with a bound method, a call still pending when ``owner`` is
    deleted goes with it instead of keeping ``owner`` alive."""
    timer = QTimer(owner)
    timer.setSingleShot(True)
    timer.setInterval(0)
    timer.timeout.connect(slot)
    return timer
