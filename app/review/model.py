"""Observable state of the review window: the open session, the current shot, the analyst's picks.

``SessionModel`` wraps a ``core.store.Session`` (which knows nothing of Qt) and emits a signal
only when something really changes; the window reaches the store through it alone. Every pick
edit goes straight to the store's journal (``Session.set_pick`` returns after the edit is on
disk), so the window never holds unsaved work. Only QtCore is used here (for the signals): no
widgets.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PySide6.QtCore import QObject, Signal

from core import WakelineError
from core.batch import iter_process
from core.plausibility import session_direction, shot_checks
from core.store import (
    MANIFEST_NAME,
    JournalDamaged,
    Pick,
    ProcessState,
    ReviewStatus,
    Session,
    SessionLocked,
    SessionReadOnly,
    ShotRecord,
    take_corrections,
    write_table_csv,
)
from core.store import import_folder as store_import_folder
from core.store.companions import companion_files
from core.store.files import writing
from core.store.records import AUTHORSHIP_FIELDS, ResultUnreadable

__all__ = [
    "MANIFEST_NAME",
    "PICK_FIELDS",
    "JournalDamaged",
    "ProcessState",
    "ResultUnreadable",
    "ReviewStatus",
    "SessionLocked",
    "SessionModel",
    "SessionReadOnly",
    "authorship",
    "import_folder",
    "is_companion_file",
    "pick_values",
    "proposals",
    "take_corrections",
]

PICK_FIELDS = ("status", "upper_deg", "lower_deg", "reason", "note")
_SESSION_SUFFIXES = (".h5", ".hdf5")
#: what the store adds to a session's name for the files it keeps beside it (journal, pending
#: arrays, a half-written snapshot) and for its lock
_COMPANION_ENDINGS = (*(p.name[len("s.h5"):] for p in companion_files(Path("s.h5")).values()),
                      ".lock")


def is_companion_file(name: str) -> bool:
    """A file or folder the store keeps beside a session ``S.h5`` (``S.h5.journal``,
    ``S.h5.pending``, ``S.h5.lock``, ``S.h5.tmp``): not for the analyst to open or choose."""
    return any(name.endswith(end) and name[: -len(end)].lower().endswith(_SESSION_SUFFIXES)
               for end in _COMPANION_ENDINGS)


def import_folder(src_dir, session_path, **options):
    """``core.store.import_folder``, refusing ball types the measurement does not know."""
    from core.ball import NOMINAL_BALL_DIAMETER_MM

    return store_import_folder(src_dir, session_path, ball_types=NOMINAL_BALL_DIAMETER_MM,
                               **options)


def pick_values(pick: Pick) -> dict:
    """The editable fields of a pick as a plain dict (what undo commands store)."""
    return {name: getattr(pick, name) for name in PICK_FIELDS}


def proposals(record) -> tuple:
    """A shot's proposed angles (upper, lower; None where none): what a decision was made on."""
    return tuple(record.proposed_deg(side) for side in ("upper", "lower"))


def authorship(pick: Pick) -> dict:
    """Who made a pick's decision and note, and when (what undo puts back with the fields)."""
    return {name: getattr(pick, name) for name in AUTHORSHIP_FIELDS}


def _compared(pick: Pick) -> dict:
    """What the analyst set in a pick (decision, note, circles, flight): its change is news."""
    return {**pick_values(pick), **pick.geometry()}


@dataclass
class _Lru:
    """A tiny least-recently-used cache keyed by shot id."""

    size: int

    def __post_init__(self) -> None:
        self._items: OrderedDict = OrderedDict()

    def get(self, key):
        if key not in self._items:
            return None
        self._items.move_to_end(key)
        return self._items[key]

    def put(self, key, value) -> None:
        self._items[key] = value
        self._items.move_to_end(key)
        while len(self._items) > self.size:
            self._items.popitem(last=False)

    def drop(self, key) -> None:
        self._items.pop(key, None)

    def clear(self) -> None:
        self._items.clear()


class SessionModel(QObject):
    """The open session and the current shot, with change signals for the views."""

    closing = Signal()  # the open session is about to close: stop what uses it
    session_changed = Signal()  # a session was opened or closed
    current_changed = Signal(str)  # the current shot id ("" for none)
    record_changed = Signal(str)  # one shot's pick, result or processing state changed
    edit_refused = Signal(str)  # an undo or redo the store refused: its one-line reason
    edit_replayed = Signal(list, str)  # an undo or redo made: the shots it changed, what it did
    conditions_changed = Signal()  # the grouping columns or the imported reviews changed

    def __init__(self, parent: QObject | None = None, cache_size: int = 6,
                 frame_cache_size: int = 3) -> None:
        super().__init__(parent)
        self._session: Session | None = None
        self._records: dict[str, ShotRecord] = {}
        self._order: list[str] = []
        self._current = ""
        self._grouping: list[str] | None = None  # a read-only session's grouping, this window
        self._results = _Lru(cache_size)
        self._frames = _Lru(frame_cache_size)  # frame pairs are big (2 x 16 MB at 2048 px)
        self._usual_direction: list = []  # [the session's usual flight direction], once known

    # -- session -----------------------------------------------------------------------------
    @property
    def session(self) -> Session | None:
        """The open store, for reading whole (the shot sheet); edits go through the model."""
        return self._session

    @property
    def path(self) -> Path | None:
        return None if self._session is None else Path(self._session.path)

    @property
    def name(self) -> str:
        return "" if self._session is None else self._session.name

    def open(self, path, writable: bool = True, up_to_damage: bool = False) -> None:
        """Open the session file at ``path``; the open one is closed only once it succeeded
        (``up_to_damage``: ``Session.open``'s).

        Raises
        ------
        core.WakelineError
            When the file cannot be opened (``SessionLocked`` when another process holds it).
        """
        session = Session.open(path, writable=writable, up_to_damage=up_to_damage)
        try:
            self._drop_session()  # a failure to save the old one is raised once the new is in
        finally:
            self._session = session
            self._order = list(session)
            self._records = dict(session.items())
            self._current = ""
            self.session_changed.emit()
            self.current_changed.emit("")

    def close(self) -> list[str]:
        """Close the open session; returns what its last save found damaged or lost (one line
        per shot part, ``Session.problems``)."""
        had = self._session is not None
        try:
            return self._drop_session()
        finally:
            if had:
                self.session_changed.emit()
                self.current_changed.emit("")

    def _drop_session(self) -> list[str]:
        """Forget the open session, then close it: a close that fails (a full disk: every
        change stays in its journal) raises with the model already empty."""
        session = self._session
        if session is not None:
            self.closing.emit()
        self._session = None
        self._grouping = None
        self._records.clear()
        self._order = []
        self._current = ""
        self._results.clear()
        self._frames.clear()
        self._usual_direction.clear()
        if session is None:
            return []
        seen = len(session.problems)
        session.close()
        return session.problems[seen:]

    @property
    def read_only(self) -> bool:
        return self._session is None or bool(self._session.read_only)

    # -- records -----------------------------------------------------------------------------
    def shot_ids(self) -> list[str]:
        return list(self._order)

    def record(self, shot_id: str) -> ShotRecord:
        return self._records[shot_id]

    def records(self) -> list[ShotRecord]:
        return [self._records[sid] for sid in self._order]

    def refresh(self, shot_id: str) -> None:
        """Re-read one shot's record from the store and tell the views."""
        self._records[shot_id] = self._session[shot_id]
        self._results.drop(shot_id)
        self._usual_direction.clear()
        self.record_changed.emit(shot_id)

    # -- current shot ------------------------------------------------------------------------
    @property
    def current_id(self) -> str:
        return self._current

    def set_current(self, shot_id: str) -> None:
        if shot_id and shot_id not in self._records:
            raise KeyError(shot_id)
        if shot_id != self._current:
            self._current = shot_id
            self.current_changed.emit(shot_id)

    # -- data of one shot --------------------------------------------------------------------
    def result(self, shot_id: str):
        """The shot's stored ``ShotResult`` (None when not processed; a failed shot's is its
        last run that succeeded, if any), cached."""
        cached = self._results.get(shot_id)
        if cached is None and self._records[shot_id].state != ProcessState.UNPROCESSED:
            cached = self._session.load_result(shot_id)
            if cached is not None:
                self._results.put(shot_id, cached)
        return cached

    def frames(self, shot_id: str) -> tuple[np.ndarray, np.ndarray]:
        """The shot's frame pair, cached. Raises core.WakelineError when frames are missing."""
        cached = self._frames.get(shot_id)
        if cached is None:
            cached = self._session.load_frames(shot_id)
            self._frames.put(shot_id, cached)
        return cached

    def prefetch(self, shot_id: str) -> None:
        """Read a shot's result and frames into the cache ahead of need; problems wait until
        the shot is shown."""
        if not shot_id or shot_id not in self._records or self._session is None:
            return
        try:
            self.result(shot_id)
            self.frames(shot_id)
        except (WakelineError, OSError, KeyError):
            pass  # reported when the shot is shown

    # -- edits -------------------------------------------------------------------------------
    def apply_pick(self, shot_id: str, **changes) -> Pick:
        """Write a pick edit through the store's journal, then tell the views if it changed.

        ``changes`` takes the keywords of ``Session.set_pick`` (status, upper_deg, lower_deg,
        reason, note); the edit is on disk when this returns.

        Raises
        ------
        core.WakelineError
            The store refused or could not save the edit (any ``OSError`` too, so the window's
            one handler puts the marks back and says the edit was not saved).
        """
        return self.apply_picks({shot_id: changes})[shot_id]

    def apply_picks(self, edits: dict[str, dict]) -> dict[str, Pick]:
        """Several pick edits at once (``Session.set_picks``: all or none, one write), then
        tell the views of each shot that changed. Raises as ``apply_pick``."""
        before = {shot_id: _compared(self._records[shot_id].pick) for shot_id in edits}
        try:
            picks = self._session.set_picks(edits)
        except OSError as exc:
            what = f"shot {next(iter(edits))}" if len(edits) == 1 else f"{len(edits)} shots"
            raise WakelineError(f"{self._session.path}: edit of {what} not saved "
                                f"({exc.strerror or exc})") from None
        for shot_id, pick in picks.items():
            self._records[shot_id] = self._session[shot_id]
            if _compared(pick) != before[shot_id]:
                self.record_changed.emit(shot_id)
        return picks

    # -- the analyst's ball and flight -------------------------------------------------------
    def checks(self, shot_id: str) -> list[str]:
        """Where the shot's ball and flight disagree with what else is known (manifest, the
        session's usual direction, the two circles, the wake), one line each."""
        if not self._usual_direction:
            self._usual_direction.append(session_direction(self.records()))
        return shot_checks(self._records[shot_id], self._usual_direction[0])

    def remeasuring(self, shot_id: str):
        """A callable that measures the shot again with its circles and flight as the pick has
        them now (``core.shot.remeasure_ball``); it reads nothing from the session, so it may
        run on a worker thread. Save what it returns with ``keep_result``.

        Raises
        ------
        core.WakelineError
            The shot has no result, or its frames or result cannot be read.
        """
        from core.shot import remeasure_ball

        stored = self.result(shot_id)
        if stored is None:
            raise WakelineError(f"shot {shot_id}: not measured yet; process it first")
        frame_a, frame_b = self.frames(shot_id)
        settings = self._session.settings_for(shot_id)
        return lambda: remeasure_ball(frame_a, frame_b, stored, settings)

    def keep_result(self, shot_id: str, result, measured: bool = True) -> str | None:
        """Save a result of the shot and tell the views; returns what became of the analyst's
        decision on it (``Session.save_result``: "" when it stands). A freshly ``measured`` one
        is kept only when measured with the shot's settings as they are now (an undo may have
        come between): None when it is dropped. Raises ``core.WakelineError`` when not saved."""
        current = self._session.settings_for(shot_id).fingerprint()
        if measured and result.settings.fingerprint() != current:
            return None
        try:
            decision = self._session.save_result(shot_id, result)
        except OSError as exc:
            raise WakelineError(f"{self._session.path}: result of shot {shot_id} not saved "
                                f"({exc.strerror or exc})") from None
        self._records[shot_id] = self._session[shot_id]
        self._results.put(shot_id, result)  # before the views ask for it
        self._usual_direction.clear()
        self.record_changed.emit(shot_id)
        return decision

    def unprocessed_ids(self) -> list[str]:
        return [sid for sid in self._order
                if self._records[sid].state == ProcessState.UNPROCESSED]

    # -- processing and files ----------------------------------------------------------------
    def count_to_process(self, shot_ids=None, force: bool = False) -> int:
        """Shots a processing run would measure: ``shot_ids``, or all with ``force``, or those
        not processed with the current settings."""
        if shot_ids:
            return len(shot_ids)
        if force:
            return len(self._order)
        return sum(self._session.needs_processing(s) for s in self._order)

    def processing_settings(self) -> dict:
        return {} if self._session is None else self._session.processing_settings()

    def set_processing_settings(self, settings: dict) -> bool:
        """Keep new session-wide processing settings; False when they are the same."""
        if settings == self._session.processing_settings():
            return False
        self._session.set_processing_settings(settings)
        return True

    def iter_process(self, shot_ids=None, workers=None, force: bool = False, should_stop=None):
        """Process shots (``core.batch.iter_process``); runs on a worker thread, so the views
        learn of each finished shot by ``refresh`` on the GUI thread."""
        return iter_process(self._session, shot_ids, workers=workers, force=force,
                            should_stop=should_stop)

    def check_frames(self, should_stop=None, shot_ids=None,
                     checksums: bool = True) -> dict[str, str]:
        return self._session.check_frames(should_stop, shot_ids, checksums)

    def compact(self) -> list[str]:
        """Fold the journal into the session file (every edit is already on disk); returns what
        it found damaged or lost, one line per shot part (such a shot's result is dropped and
        the shot is failed: processing it again heals it)."""
        seen = len(self._session.problems)
        self._session.compact()
        found = self._session.problems[seen:]
        for shot_id in self._order:
            if any(line.startswith(f"shot {shot_id}:") for line in found):
                self.refresh(shot_id)
        return found

    def write_table(self, path) -> int:
        """The table of picks as CSV (as ``wakeline table``); returns the row count. A file
        that cannot be written raises ``core.WakelineError`` naming it and why."""
        with writing(Path(path)):
            return write_table_csv(self._session, path)

    # -- conditions and other analysts' reviews (core.conditions, core.store.reviews) ---------
    def conditions_by(self) -> list[str]:
        """The session's grouping columns, or the default ones until the analyst chose."""
        from core.conditions import default_columns

        if self._session is None:
            return []
        if self.read_only and self._grouping is not None:
            return list(self._grouping)
        stored = self._session.conditions_by()
        return stored if stored is not None else default_columns(self.records())

    def set_conditions_by(self, columns) -> None:
        """Keep new grouping columns in the session (read-only: for this window only)."""
        columns = list(columns)
        if columns == self.conditions_by():
            return
        if self.read_only:
            self._grouping = columns
        else:
            self._session.set_conditions_by(columns)
        self.conditions_changed.emit()

    def conditions(self):
        """The session's conditions with their statistics (``core.conditions.Condition``)."""
        from core.conditions import group_conditions

        return group_conditions(self.records(), self.conditions_by())

    def review_layers(self) -> dict:
        return {} if self._session is None else self._session.review_layers()

    def read_review(self, path, name: str | None = None):
        """Another analyst's table as a layer of this session's shots, not kept yet
        (``core.store.reviews.read_review_csv``; raises its one-line ``WakelineError``)."""
        from core.store.reviews import read_review_csv

        return read_review_csv(path, self._order, name)

    def keep_review(self, layer) -> None:
        """Keep a layer in the session (one of the same name is replaced). Raises
        ``core.WakelineError`` for a read-only session or a failed save."""
        self._session.add_review_layer(layer)
        self.conditions_changed.emit()

    def ensemble(self, shot_ids, should_stop=None, report=None):
        """The ensemble view of some shots (``core.ensemble.session_ensemble``); runs on a
        worker thread. ``report((done, total, message))`` tells the progress; ``should_stop()``
        ends it early (``core.piv.Cancelled``)."""
        from core.ensemble import session_ensemble

        def progress(done, total, message):
            if report is not None:
                report((done, total, message))
            return bool(should_stop is not None and should_stop())

        return session_ensemble(self._session, shot_ids, progress=progress)
