"""The session store's ``Session``: shots, results and the analyst's picks of one session.

A session ``S.h5`` is these files side by side (layout in docs/session_format.md):

- ``S.h5``: the snapshot, an HDF5 file that is only ever replaced whole (``atomic_write``), so it
  is never half-written (format and loaders: ``core.store.snapshot``);
- ``S.h5.journal``: every change since the snapshot (added shot, result, failure, pick, settings),
  one JSON line each, appended and fsynced before the call returns; a torn last line is ignored;
- ``S.h5.pending/``: the arrays named by journal lines (results, embedded frames), each file
  written whole;
- ``S.h5.lock``: host and pid of the one process that has the session open for writing.

Opening reads the snapshot's small index and replays the journal; no field data is read until a
shot's result is asked for. ``compact`` (run by ``close``) folds everything into a new snapshot and
only then removes the journal. Every journal line carries a sequence number and the snapshot keeps
the last one it holds, so a kill between the two steps replays nothing twice.

The store needs no part of the PIV stack: it keeps records (``core.settings``, ``core.results``,
``core.summary``, and ``ShotResult``/``ShotSettings`` from ``core.shot``, whose module level
imports nothing heavier) and never measures.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import threading
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import fields, replace
from pathlib import Path

import h5py
import numpy as np

from core import WakelineError, __version__
from core.geometry import SIDES
from core.results import uncertainty_outdated
from core.shot_result import ShotResult, ShotSettings
from core.store.companions import (
    check_replaceable,
    companion_files,
    remove_companions,
    session_path,
)
from core.store.files import atomic_write, json_ready, now_utc, sha256_of, share_like, write_whole
from core.store.frames import frame_file_problem, in_exposure_order, read_frames
from core.store.journal import Journal
from core.store.lock import Lock, user_name
from core.store.records import (
    Pick,
    ProcessState,
    ResultUnreadable,
    ReviewStatus,
    ShotRecord,
    check_shot_id,
    damage_reason,
    decision_on_new_proposals,
    edited_pick,
)
from core.store.replay import JournalReplay
from core.store.reviews import ReviewContent, review_content
from core.store.snapshot import (
    STORAGE_ERRORS,
    Place,
    Snapshot,
    SnapshotWriting,
    check_signature,
    file_identity,
    h5_image,
    identity_of,
    read_snapshot,
    record_from_index,
    shot_key,
    write_frames_group,
    write_result_group,
)
from core.summary import ShotSummary

#: Metadata columns that are also settings of a shot's processing.
PER_SHOT_SETTINGS = ("dt_s", "scale_mm_per_px", "ball_diameter_mm", "ball_type", "flight_deg",
                     "air_temp_c", "frames_swapped")
_UNSET = object()
#: What to do, in place of freeing space, when a save fails for another reason
_NOT_SPACE = {
    errno.EACCES: "make its folder writable again (or copy the session elsewhere) and",
    errno.EPERM: "make its folder writable again (or copy the session elsewhere) and",
    errno.EROFS: "copy the session to a writable disk and",
    errno.ENOENT: "put the session's folder back and",
}


class UnknownShot(WakelineError, KeyError):
    """A shot id the session does not hold (a ``KeyError`` for mapping use)."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


def _change_words(entry: dict) -> str:
    """A journal entry in words, for a message saying it was not saved."""
    shot = entry.get("shot")
    return {"add_shot": f"shot {shot}", "result": f"the result of shot {shot}",
            "failure": f"the failure of shot {shot}", "pick": f"the edit of shot {shot}",
            "shot_values": f"the corrected values of shot {shot}",
            "conditions": "the grouping of shots into conditions",
            "review_layer": "the imported review"}.get(entry["op"], "the processing settings")


class Session(SnapshotWriting, JournalReplay, ReviewContent, Mapping):
    """An open session. Use ``Session.create`` / ``Session.open``, or ``with Session.open(p):``.

    A read-only mapping of shot id -> ``ShotRecord`` (a copy; import order): ``shot_id in
    session``, ``for shot_id in session``, ``session[shot_id]``, ``session.get(shot_id)``,
    ``session.values()``. All file I/O happens in the calling thread; a lock serialises calls
    made from several threads of one process.
    """

    __eq__ = object.__eq__  # one open session is one object, not a value
    __hash__ = object.__hash__

    def __init__(self, path: Path, snapshot: Snapshot, writable: bool, lock: Lock | None):
        self.path = path
        self.name = snapshot.name
        self.read_only = not writable
        self.created_utc = snapshot.created_utc
        self._lock = lock
        self._mutex = threading.RLock()
        files = companion_files(path)
        self._journal = Journal(files["journal"], path)
        self._pending_dir = files["pending"]
        self._snapshot_seq = snapshot.last_seq
        self._seq = snapshot.last_seq
        self._processing = dict(snapshot.processing)
        self._records: dict[str, ShotRecord] = {}
        self._places: dict[str, Place] = {}
        self._dirty = False
        self._closed = False
        self._runs = 0  # batch runs in progress (``batch_run``); see compact()
        self._touched: set[str] = set()  # shots changed since the snapshot
        self._unused_bytes = snapshot.unused_bytes  # dead space left by replaced arrays
        self._checksummed = snapshot.checksummed
        self._identity = None  # of the snapshot file read or last written (file_identity)
        self._folder_given = path.parent  # the folder as the caller named it (see _relative)
        #: One line per damaged or lost part of a shot found while saving (see compact).
        self.problems: list[str] = []
        #: Opened ``up_to_damage``: the damaged journal line the session stops before, or "".
        self.damage_note = ""
        for number, entry in enumerate(snapshot.shots, start=1):
            try:
                rec = record_from_index(entry)
            except (KeyError, TypeError, ValueError, AttributeError) as exc:
                raise WakelineError(f"{path}: damaged session index (entry {number}: "
                                    f"{damage_reason(exc)})") from None
            self._records[rec.shot_id] = rec
            self._places[rec.shot_id] = Place(
                result="snapshot" if entry.get("has_result") else None,
                frames="snapshot" if rec.frames.get("storage") == "embedded" else None,
            )
        self._conditions_by, self._layers = review_content(snapshot, path)

    # -- opening and closing -------------------------------------------------------------------

    @classmethod
    def create(cls, path, name: str = "") -> Session:
        """Create a new empty session file and open it for writing."""
        given, path = path, session_path(path)
        if path.exists():
            raise WakelineError(f"{path}: already exists")
        if not path.parent.is_dir():
            raise WakelineError(f"{path.parent}: folder not found")
        lock = Lock(path)
        lock.acquire()
        try:
            remove_companions(path)
            snapshot = Snapshot(name=name or path.stem, created_utc=now_utc())
            session = cls(path, snapshot, True, lock)
            session._write_snapshot()
        except BaseException:
            lock.release()
            raise
        session._folder_given = Path(os.path.abspath(given)).parent
        return session

    @classmethod
    def open(cls, path, writable: bool = True, up_to_damage: bool = False) -> Session:
        """Open a session lazily: the shot index and the journal, no field data.

        ``up_to_damage`` (read-only only): a damaged journal line ends the replay instead of
        refusing the session, which then shows what was saved before it (``damage_note``).

        Raises
        ------
        SessionLocked
            When ``writable`` and another live process has it open for writing.
        WakelineError
            When the file is missing, truncated or not a wakeline session.
        """
        if up_to_damage and writable:
            raise ValueError("up_to_damage: read-only sessions only")
        given, path = path, session_path(path)
        if path.is_dir():
            raise WakelineError(f"{path}: is a folder, not a session file (give its .h5 file)")
        lock = Lock(path) if writable else None
        if lock is not None:
            check_signature(path)
            check_replaceable(path)
            lock.acquire()
        try:
            session = cls._load(path, writable, lock, up_to_damage)
        except OSError as exc:  # e.g. a full disk while tidying what a killed writer left
            if lock is not None:
                lock.release()
            what = "for writing " if writable else ""
            raise WakelineError(f"{exc.filename or path}: cannot open the session {what}"
                                f"({exc.strerror or exc})") from None
        except BaseException:
            if lock is not None:
                lock.release()
            raise
        session._folder_given = Path(os.path.abspath(given)).parent
        return session

    @classmethod
    def _load(cls, path: Path, writable: bool, lock: Lock | None,
              up_to_damage: bool = False) -> Session:
        """Snapshot plus journal. A reader retries when a writer replaced the snapshot
        meanwhile, so it never pairs an old snapshot with a newer journal."""
        for _ in range(10):
            before = file_identity(path)
            session = cls(path, read_snapshot(path), writable, lock)
            session._replay_journal(up_to_damage)
            if writable or file_identity(path) == before:
                session._identity = before
                return session
        raise WakelineError(f"{path}: keeps changing while being read; try again")

    def close(self) -> None:
        """Fold the journal into the snapshot (when writable) and release the lock."""
        with self._mutex:
            if self._closed:
                return
            try:
                if not self.read_only and self._dirty:
                    self.compact()
            finally:
                self._journal.close()
                if self._lock is not None:
                    self._lock.release()
                self._closed = True

    def __enter__(self) -> Session:  # noqa: PYI034 - subclasses are not expected
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- reading -------------------------------------------------------------------------------

    def __getitem__(self, shot_id: str) -> ShotRecord:
        """A copy of one shot's cheap record (no file access).

        Raises
        ------
        UnknownShot
            A ``KeyError`` and a ``WakelineError``: "shot <id>: not in <file>".
        """
        with self._mutex:  # another thread may be saving results (core.batch)
            rec = self._get(shot_id)
            return replace(rec, pick=replace(rec.pick), metadata=dict(rec.metadata))

    def __iter__(self) -> Iterator[str]:
        """Shot ids in import order."""
        with self._mutex:
            return iter(list(self._records))

    def __len__(self) -> int:
        return len(self._records)

    def __contains__(self, shot_id) -> bool:
        return shot_id in self._records

    def processing_settings(self) -> dict:
        """Session-wide processing settings: ``{"piv": PivSettings dict, "find_ball": bool}``."""
        return json.loads(json.dumps(self._processing))

    def settings_for(self, shot_id: str) -> ShotSettings:
        """The ShotSettings a shot is processed with: the session processing settings, with the
        shot's own values (``dt_s``, scale, ball, ``flight_deg``) where its metadata has them,
        and the analyst's circles and flight direction where the pick has them (processing
        never replaces what the analyst set)."""
        record = self._get(shot_id)
        meta = record.metadata
        data = dict(self._processing)
        for key in PER_SHOT_SETTINGS:
            value = meta.get(key)
            if key == "frames_swapped":  # the manifest's yes or no
                data[key] = value == "yes"
            elif value is not None and value != "":
                data[key] = value
            elif key != "flight_deg":  # a session-wide flight override applies when unset
                data[key] = None
        data.update({k: v for k, v in record.pick.geometry().items() if v is not None})
        return ShotSettings.from_dict(data)

    def needs_processing(self, shot_id: str) -> bool:
        """True unless the shot was processed successfully with its current settings, by a
        wakeline that makes the proposals' uncertainties as this one does."""
        rec = self._get(shot_id)
        current = self.settings_for(shot_id).fingerprint()
        return (rec.state != ProcessState.PROCESSED or rec.fingerprint != current
                or uncertainty_outdated(rec.software_version))

    def frame_source(self, shot_id: str) -> dict:
        """Where a worker finds the frames: absolute paths and checksums, or an HDF5 location.

        Returns ``{"storage": "files", "path_a", "path_b" (or None), "sha256_a", "sha256_b",
        "session_folder"}`` (the folder relative paths start from; None for absolute ones) or
        ``{"storage": "embedded", "file", "group"}``.
        """
        rec = self._get(shot_id)
        frames = rec.frames
        if frames.get("storage") == "embedded":
            file, group = self._array_location(self._places[shot_id].frames, shot_id, "frames")
            return {"storage": "embedded", "file": str(file), "group": group}
        return {
            "storage": "files",
            "path_a": str(self._resolve(frames["path_a"])),
            "path_b": None if frames.get("path_b") is None else str(self._resolve(frames["path_b"])),
            "sha256_a": frames.get("sha256_a"),
            "sha256_b": frames.get("sha256_b"),
            # frames kept by a relative path are looked for from the session file's folder
            "session_folder": None if Path(frames["path_a"]).is_absolute() else str(
                self.path.parent),
        }

    def load_frames(self, shot_id: str) -> tuple[np.ndarray, np.ndarray]:
        """Frames A and B as float32 ``(H, W)``, in the order they were exposed (the manifest's
        ``frames_swapped``); checks file checksums first.

        Raises
        ------
        WakelineError
            "shot <id>: frame file <path> changed since import" or "... not found".
        """
        with self._mutex:
            frames = read_frames(shot_id, self.frame_source(shot_id))
            swapped = self._get(shot_id).metadata.get("frames_swapped") == "yes"
        return in_exposure_order(*frames, swapped)

    def check_frames(self, should_stop=None, shot_ids=None,
                     checksums: bool = True) -> dict[str, str]:
        """``shot_id -> problem`` for every shot (of ``shot_ids``, default all) whose frame
        files are missing or (``checksums``: their SHA-256 read again) changed.

        ``should_stop``: called before each shot; when it returns True the shots checked so
        far are reported.
        """
        problems = {}
        for shot_id in list(self._records) if shot_ids is None else list(shot_ids):
            if should_stop is not None and should_stop():
                break
            source = self.frame_source(shot_id)
            if source["storage"] != "files":
                continue
            problem = frame_file_problem(shot_id, source, checksums)
            if problem:
                problems[shot_id] = problem
        return problems

    def load_result(self, shot_id: str) -> ShotResult | None:
        """The last successful result of a shot, arrays read now, or None."""
        with self._mutex:
            rec = self._get(shot_id)
            place = self._places[shot_id].result
            if place is None or rec.summary is None:
                return None
            file, group = self._array_location(place, shot_id, "result")
            try:
                with self._arrays_file(file) as f:
                    g = f[group]
                    arrays = {name: g[name][()] for name in g}
                return ShotResult.from_stored(rec.summary.to_dict(), arrays)
            except FileNotFoundError:
                if not self.read_only:
                    raise ResultUnreadable(f"shot {shot_id}: result arrays lost (pending file "
                                           f"{place} missing)", self.path, shot_id) from None
                # a reader: the writer has compacted since and removed the pending file
                raise WakelineError(f"{self.path}: changed on disk by the process writing it; "
                                    "reopen the session") from None
            except STORAGE_ERRORS as exc:
                raise ResultUnreadable(f"shot {shot_id}: result stored in {file} is damaged "
                                       f"({damage_reason(exc)})", self.path, shot_id) from None

    def history(self, shot_id: str) -> list[Pick]:
        """Every pick edit of a shot, oldest first."""
        with self._mutex:
            self._get(shot_id)
            place = self._places[shot_id]
            if place.snapshot_history is None:
                try:
                    place.snapshot_history = self._read_snapshot_history(shot_id)
                except STORAGE_ERRORS as exc:
                    raise WakelineError(f"shot {shot_id}: edit history stored in {self.path} is "
                                        f"damaged ({damage_reason(exc)})") from None
            return [replace(p) for p in place.snapshot_history + place.history]

    # -- writing -------------------------------------------------------------------------------

    def add_shot(
        self, shot_id: str, frame_a_path, frame_b_path=None, metadata: dict | None = None,
        embed: bool = False,
    ) -> None:
        """Add a shot: frames are read (to check them), checksummed, and referenced by path
        relative to the session file, or stored compressed inside it with ``embed``."""
        from core.images import read_frame_pair

        with self._mutex:
            self._check_writable()
            check_shot_id(shot_id)
            if shot_id in self._records:
                raise WakelineError(f"shot {shot_id}: already in {self.path.name}")
            # Kept by the path given, links and all (not resolved to where a link points):
            # a linked folder stands for the frames where the lab keeps them.
            path_a = Path(os.path.abspath(frame_a_path))
            path_b = None if frame_b_path is None else Path(os.path.abspath(frame_b_path))
            frame_a, frame_b = read_frame_pair(path_a, path_b)
            frames = {
                "storage": "embedded" if embed else "files",
                "path_a": self._relative(path_a),
                "path_b": None if path_b is None else self._relative(path_b),
                "sha256_a": sha256_of(path_a),
                "sha256_b": None if path_b is None else sha256_of(path_b),
                "shape": [int(frame_a.shape[0]), int(frame_a.shape[1])],
            }
            seq = self._seq + 1
            pending = None
            if embed:
                pending = self._write_pending(seq, f"shot {shot_id}",
                                              lambda f: write_frames_group(f, frame_a, frame_b))
            entry = {"op": "add_shot", "shot": shot_id, "metadata": dict(metadata or {}),
                     "frames": frames, "pending": pending, "t": now_utc()}
            self._commit(entry)

    def set_shot_values(self, shot_id: str, metadata: dict) -> None:
        """Replace a shot's values from the manifest (a wrong ``dt_s``, scale or ball diameter
        corrected after import). The frames, the last result and the analyst's pick stay (the
        picks are angles on the picture, which the values do not move); a shot whose settings
        the new values change counts as not processed (:meth:`needs_processing`), others (a
        note, a seam angle) stay processed."""
        with self._mutex:
            self._check_writable()
            self._get(shot_id)
            self._commit({"op": "shot_values", "shot": shot_id,
                          "metadata": json_ready(dict(metadata)), "t": now_utc()})

    def set_processing_settings(self, settings: dict) -> None:
        """Replace the session-wide processing settings (``{"piv": {...}, "find_ball": ...}``);
        shots processed with other settings then count as not processed."""
        with self._mutex:
            self._check_writable()
            known = {f.name for f in fields(ShotSettings)} - set(PER_SHOT_SETTINGS) | {
                "flight_deg"}
            unknown = sorted(set(settings) - known)
            if unknown:
                raise WakelineError(f"processing settings: unknown key(s) {', '.join(unknown)}")
            # refuses values of the wrong kind before they are kept
            ShotSettings.from_dict(settings, strict=True)
            self._commit({"op": "settings", "settings": json_ready(settings), "t": now_utc()})

    def save_result(self, shot_id: str, result: ShotResult) -> str:
        """Keep a new result (the proposal) of a shot. A decision resting on the old proposal
        does not silently take the new one (``decision_on_new_proposals``: an accepted pick
        whose proposal moved goes back to review, an adjusted pick keeps its angles), saved
        with the result as one edit. Returns what became of the decision ("" when it stands).
        """
        with self._mutex:
            self._check_writable()
            record = self._get(shot_id)
            seq = self._seq + 1
            summary = ShotSummary.from_dict(json_ready(result.summary()))
            arrays = result.arrays()
            pending = self._write_pending(seq, f"the result of shot {shot_id}",
                                          lambda f: write_result_group(f, summary, arrays))
            now = now_utc()
            pick, said = decision_on_new_proposals(
                record, {side: summary.proposed_deg(side) for side in SIDES}, now, summary)
            # the decision changes in the same journal line as the result: a crash keeps both
            # or neither
            self._commit({
                "op": "result", "shot": shot_id, "summary": summary.to_dict(),
                "summary_version": summary.version, "pending": pending,
                "fingerprint": result.settings.fingerprint(), "version": __version__,
                "t": now, **({} if pick is None else {"pick": pick.to_dict()}),
            })
            return said

    def save_failure(self, shot_id: str, reason: str, fingerprint: str | None = None) -> None:
        """Record that processing a shot failed; its previous result and pick stay."""
        with self._mutex:
            self._check_writable()
            self._get(shot_id)
            if fingerprint is None:
                fingerprint = self.settings_for(shot_id).fingerprint()
            self._commit({"op": "failure", "shot": shot_id, "reason": str(reason),
                          "fingerprint": fingerprint, "version": __version__, "t": now_utc()})

    def set_pick(
        self, shot_id: str, *, status: ReviewStatus | str | None = None, upper_deg=_UNSET,
        lower_deg=_UNSET, reason: str | None = None, note: str | None = None,
        who: str | None = None,
    ) -> Pick:
        """Edit the analyst's pick. Arguments left out keep their value; ``upper_deg=None``
        clears it. The edit is on disk (journal, fsynced) when this returns. ``who`` (default:
        this user) and the time go with the decision, and apart with the note (``edited_pick``).

        Raises
        ------
        WakelineError
            Unknown status, "unusable" without a reason, or a non-finite angle.
        """
        changes = {k: v for k, v in (("status", status), ("reason", reason), ("note", note))
                   if v is not None}
        changes.update({k: v for k, v in (("upper_deg", upper_deg), ("lower_deg", lower_deg))
                        if v is not _UNSET})
        return self.set_picks({shot_id: changes}, who=who)[shot_id]

    def set_picks(self, edits: dict[str, dict], who: str | None = None) -> dict[str, Pick]:
        """Several pick edits as one (a decision on many shots): ``{shot_id: changes}`` with the
        keywords of ``set_pick`` (a key left out keeps its value). All are checked first, so
        none is made when one is refused; then all are on disk (one fsync) when this returns.
        """
        with self._mutex:
            self._check_writable()
            by, now = (who if who is not None else user_name()), now_utc()
            picks = {shot_id: edited_pick(shot_id, self._get(shot_id).pick, changes, by, now)
                     for shot_id, changes in edits.items()}
            self._commit(*({"op": "pick", "shot": s, "pick": p.to_dict()}
                           for s, p in picks.items()))
            return {shot_id: replace(pick) for shot_id, pick in picks.items()}

    @contextmanager
    def batch_run(self) -> Iterator[None]:
        """A batch run in progress (``core.batch``): while one is, ``compact`` keeps the pending
        files its worker processes may still be reading."""
        with self._mutex:
            self._runs += 1
        try:
            yield
        finally:
            with self._mutex:
                self._runs -= 1

    @classmethod
    def delete(cls, path) -> None:
        """Remove a closed session: the snapshot and its journal, pending arrays and leftovers.

        A damaged session can be deleted; one open for writing elsewhere cannot.

        Raises
        ------
        SessionLocked
            When another live process has the session open for writing.
        """
        path = session_path(path)
        lock = Lock(path)
        lock.acquire()
        try:
            path.unlink(missing_ok=True)
            remove_companions(path)
        finally:
            lock.release()

    def compact(self) -> None:
        """Write a new snapshot holding everything, replace the old one, then drop the journal.

        Raises
        ------
        WakelineError
            When the snapshot cannot be written (a full disk): every change stays in the
            journal, and the next compaction (or opening the session) tries again.
        """
        with self._mutex:
            self._check_writable()
            if self._pending_dir.exists() and not self._pending_dir.is_dir():
                # its results would be taken for lost: not for wakeline to remove
                raise WakelineError(f"{self._pending_dir}: a file stands where the session "
                                    "keeps its new results; move it away and save again "
                                    "(nothing was changed)")
            if not self.path.exists():  # moved or deleted while open: its arrays went with it
                raise WakelineError(f"{self.path}: the session file is gone (moved or deleted "
                                    f"while open); every change since it was saved is kept in "
                                    f"{self._journal.path.name}: put the file back beside it "
                                    "and open it again")
            with self._saving("the session file", f"every change is kept in "
                              f"{self._journal.path.name}; free some space and save again"):
                self._write_snapshot()
            self._journal.remove()
            if not self._runs:  # a running batch's workers may still read pending frames
                shutil.rmtree(self._pending_dir, ignore_errors=True)
            self._dirty = False

    # -- internals: journal --------------------------------------------------------------------

    @contextmanager
    def _saving(self, what: str, advice: str = "free some space and try again") -> Iterator[None]:
        """A write that fails (a full disk, no permission) becomes one line naming the session
        and the file; what was confirmed before stays as it was, in memory and on disk."""
        try:
            yield
        except OSError as exc:
            reason = exc.strerror or str(exc).splitlines()[0]
            if exc.filename:
                reason += f", writing {Path(exc.filename).name}"
            if exc.errno in _NOT_SPACE:  # "free some space" would not help
                advice = advice.replace("free some space and", _NOT_SPACE[exc.errno])
            raise WakelineError(f"{self.path}: could not save {what} ({reason}); "
                                f"{advice}") from None

    def _commit(self, *entries: dict) -> None:
        """Append changes to the journal (all durable on return, one write), then apply them
        in memory."""
        entries = [{"seq": self._seq + n, **entry} for n, entry in enumerate(entries, start=1)]
        what = _change_words(entries[0]) if len(entries) == 1 else f"{len(entries)} edits"
        with self._saving(what):
            self._journal.append(*entries)
        for entry in entries:
            self._seq = entry["seq"]
            self._apply(entry)
        self._dirty = True

    def _write_pending(self, seq: int, what: str, write) -> str:
        """Write arrays to ``S.h5.pending/<seq>.h5`` whole (temporary name, fsync, rename)."""
        with self._saving(what):
            if not self._pending_dir.is_dir():
                self._pending_dir.mkdir()
                share_like(self._pending_dir, self.path)
        name = f"{seq:09d}.h5"
        image = h5_image(write)
        with self._saving(what), atomic_write(self._pending_dir / name, like=self.path) as tmp:
            write_whole(tmp, image)
        return name

    # -- internals: misc -----------------------------------------------------------------------

    @contextmanager
    def _arrays_file(self, file: Path) -> Iterator[h5py.File]:
        """Open the snapshot or a pending file to read arrays. The snapshot must be the one this
        session read (a reader's writer may have replaced it since): its arrays would belong to
        other summaries and histories than those in memory."""
        with h5py.File(file, "r") as f:
            if file == self.path and identity_of(os.fstat(f.id.get_vfd_handle())) != self._identity:
                raise WakelineError(f"{self.path}: changed on disk by the process writing it; "
                                    "reopen the session")
            yield f

    def _array_location(self, place: str, shot_id: str, kind: str) -> tuple[Path, str]:
        if place == "snapshot":
            return self.path, f"shots/{shot_key(shot_id)}/{kind}"
        return self._pending_dir / place, kind

    def _get(self, shot_id: str) -> ShotRecord:
        try:
            return self._records[shot_id]
        except KeyError:
            raise UnknownShot(f"shot {shot_id}: not in {self.path.name}") from None

    def _check_writable(self) -> None:
        if self._closed:
            raise WakelineError(f"{self.path}: session is closed")
        if self.read_only:
            raise WakelineError(f"{self.path}: opened read-only")

    def _relative(self, path: Path) -> str:
        """A frame's path relative to the session's folder, links kept: a frame under the
        folder as the session was named (through a link, say) is relative to that."""
        for folder in (self._folder_given, self.path.parent):
            if path.is_relative_to(folder):
                return path.relative_to(folder).as_posix()
        try:
            return Path(os.path.relpath(path, self.path.parent)).as_posix()
        except ValueError:  # another drive
            return path.as_posix()

    def _resolve(self, stored: str) -> Path:
        return (self.path.parent / stored).resolve()

