"""The session store: shots, results and the analyst's picks of one session, kept safe on disk.

A session ``S.h5`` is these files side by side (layout in docs/session_format.md):

- ``S.h5``: the snapshot, an HDF5 file that is only ever replaced whole (written to a temporary
  file in the same folder, fsynced, then ``os.replace``), so it is never half-written;
- ``S.h5.journal``: every change since the snapshot (added shot, result, failure, pick, settings),
  one JSON line each, appended and fsynced before the call returns; a torn last line is ignored;
- ``S.h5.pending/``: the arrays named by journal lines (results, embedded frames), each file
  written whole under a temporary name first;
- ``S.h5.lock``: host and pid of the one process that has the session open for writing.

Opening reads the snapshot's small index and replays the journal; no field data is read until a
shot's result is asked for. ``compact`` (run by ``close``) folds everything into a new snapshot and
only then removes the journal. Every journal line carries a sequence number and the snapshot keeps
the last one it holds, so a kill between the two steps replays nothing twice.
"""

from __future__ import annotations

import csv
import getpass
import hashlib
import io
import json
import math
import os
import shutil
import socket
import threading
from dataclasses import asdict, dataclass, field, fields, replace
from datetime import UTC, datetime
from pathlib import Path
from urllib.parse import quote

import h5py
import numpy as np

from core import WakelineError, __version__
from core.geometry import SIDES
from core.shot import ShotResult, ShotSettings

FORMAT_VERSION = 1
REVIEW_STATUSES = ("to review", "accepted", "adjusted", "unusable")
PROCESS_STATES = ("unprocessed", "processed", "failed")

REQUIRED_COLUMNS = ("shot", "dt_s", "scale_mm_per_px", "ball_diameter_mm")
NUMBER_COLUMNS = (
    "dt_s", "scale_mm_per_px", "ball_diameter_mm", "speed_nominal_m_s", "spin_rpm",
    "spin_axis_deg", "seam_deg", "flight_deg",
)
_PER_SHOT_SETTINGS = ("dt_s", "scale_mm_per_px", "ball_diameter_mm", "ball_type", "flight_deg")
TEXT_COLUMNS = ("ball_type", "notes")
MANIFEST_NAME = "shots.csv"
FRAME_SUFFIXES = (".tif", ".tiff", ".png")

_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
_MAX_UNUSED_FRACTION = 0.25  # rewrite the snapshot whole beyond this much dead space
_UNSET = object()


class SessionLocked(WakelineError):
    """The session is open for writing in another process."""


# ---------------------------------------------------------------------------------------------
# Records


@dataclass
class Pick:
    """The analyst's decision for one shot; every edit is kept in the shot's history."""

    status: str = "to review"  # one of REVIEW_STATUSES
    upper_deg: float | None = None  # analyst's separation angle, deg (set when adjusted)
    lower_deg: float | None = None
    reason: str = ""  # why the shot is unusable
    note: str = ""
    who: str = ""
    when: str = ""  # ISO 8601 UTC

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> Pick:
        known = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in data.items() if k in known})


@dataclass
class ShotRecord:
    """Cheap per-shot information, available without reading any field data.

    ``summary`` is ``ShotResult.summary()`` of the last successful processing; it is kept when
    a later run fails (``state == "failed"``, reason in ``failure``).
    """

    shot_id: str
    metadata: dict
    state: str = "unprocessed"  # one of PROCESS_STATES
    failure: str = ""
    summary: dict | None = None
    pick: Pick = field(default_factory=Pick)
    frames: dict = field(default_factory=dict)  # storage, path_a, path_b, sha256_a, sha256_b
    processed_utc: str = ""
    software_version: str = ""
    fingerprint: str = ""  # ShotSettings.fingerprint() of the last run, successful or not

    def proposed_deg(self, side: str) -> float | None:
        """Proposed separation angle on ``side`` ("upper"/"lower"), deg, or None."""
        return self._separation_value(f"{_checked_side(side)}_deg")

    def uncertainty_deg(self, side: str) -> float | None:
        """Uncertainty of the proposed angle on ``side``, deg, or None."""
        return self._separation_value(f"{_checked_side(side)}_uncertainty_deg")

    def final_deg(self, side: str) -> float | None:
        """The angle to report: the analyst's value when adjusted (the proposal on a side the
        analyst left alone), the proposal when accepted, else None."""
        status = self.pick.status
        if status == "adjusted":
            value = getattr(self.pick, f"{_checked_side(side)}_deg")
            return value if value is not None else self.proposed_deg(side)
        if status == "accepted":
            return self.proposed_deg(side)
        return None

    def shown_deg(self, side: str) -> float | None:
        """The angle to draw a mark at: the final angle where there is one, else the proposal."""
        final = self.final_deg(side)
        return final if final is not None else self.proposed_deg(side)

    def _separation_value(self, key: str) -> float | None:
        sep = (self.summary or {}).get("separation") or {}
        value = sep.get(key)
        return None if value is None else float(value)


def _checked_side(side: str) -> str:
    if side not in SIDES:
        raise ValueError(f"side must be 'upper' or 'lower', not {side!r}")
    return side


# ---------------------------------------------------------------------------------------------
# Small file helpers


def _now_utc() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def _fsync_dir(path: Path) -> None:
    """Make a rename or unlink in ``path`` durable (no-op where directories cannot be opened)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _json_ready(value):
    """Replace non-finite floats by None and tuples by lists so ``json.dumps`` is strict."""
    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_ready(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def _dumps(value) -> str:
    return json.dumps(_json_ready(value), allow_nan=False, ensure_ascii=False)


def sha256_of(path: Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _shot_key(shot_id: str) -> str:
    """HDF5 group name for a shot id (no '/' and no leading '.')."""
    return quote(shot_id, safe=" -_+=,()[]{}@#!~").replace(".", "%2E")


def _units_of(name: str) -> str:
    for suffix, units in (("_px", "px"), ("_m_s", "m/s"), ("_1_s", "1/s"), ("_deg", "deg")):
        if name.endswith(suffix):
            return units
    return "1"


def _write_array(group: h5py.Group, name: str, data: np.ndarray) -> None:
    data = np.asarray(data)
    # Flags and counts shrink many times under gzip; measured noisy floats barely shrink (~15 %)
    # for five times the write time, so they are stored plain.
    packable = data.dtype.kind in "biu" and data.size >= 256
    options = {"compression": "gzip", "compression_opts": 1, "shuffle": True} if packable else {}
    ds = group.create_dataset(name, data=data, **options)
    ds.attrs["units"] = _units_of(name)


# ---------------------------------------------------------------------------------------------
# Lock file


def _process_start(pid: int) -> str | None:
    """Start time of a process (clock ticks since boot, Linux), to tell a reused pid apart."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    after_name = text.rsplit(")", 1)[-1].split()
    return after_name[19] if len(after_name) > 19 else None


def _pid_alive(pid: int, start: str | None) -> bool:
    if os.name == "nt":
        return _windows_pid_alive(pid)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[-1].split()[0]
    except (OSError, IndexError):
        return True
    if state in ("Z", "X"):
        return False
    now_start = _process_start(pid)
    return start is None or now_start is None or now_start == start


def _windows_pid_alive(pid: int) -> bool:
    # os.kill(pid, 0) would terminate the process on Windows; ask for its exit code instead.
    import ctypes

    kernel32 = ctypes.windll.kernel32
    handle = kernel32.OpenProcess(0x1000, False, pid)  # PROCESS_QUERY_LIMITED_INFORMATION
    if not handle:
        return False
    try:
        code = ctypes.c_ulong()
        kernel32.GetExitCodeProcess(handle, ctypes.byref(code))
        return code.value == 259  # STILL_ACTIVE
    finally:
        kernel32.CloseHandle(handle)


class _Lock:
    """``S.h5.lock``: created whole (written aside, then hard-linked into place) or not at all."""

    def __init__(self, session_path: Path):
        self.path = session_path.with_name(session_path.name + ".lock")
        self.session_path = session_path
        self.held = False

    def acquire(self) -> None:
        me = {
            "host": socket.gethostname(), "pid": os.getpid(), "user": _user(),
            "since": _now_utc(), "start": _process_start(os.getpid()),
        }
        for _ in range(5):
            try:
                created = self._try_create(me)
            except PermissionError:
                raise WakelineError(f"{self.session_path}: its folder is not writable; open the "
                                    "session read-only") from None
            if created:
                self.held = True
                return
            holder = self._read()
            if holder is not None and not self._stale(holder):
                raise SessionLocked(
                    f"{self.session_path}: open for writing by {holder.get('user', '?')} "
                    f"(pid {holder.get('pid')} on {holder.get('host')} since "
                    f"{holder.get('since')}); open it read-only or close it there"
                )
            self._remove_stale(holder)
        raise SessionLocked(f"{self.path}: could not take the session lock")

    def _remove_stale(self, holder: dict | None) -> None:
        """Move the stale lock aside; if another opener replaced it meanwhile, put theirs back."""
        aside = self.path.with_name(f"{self.path.name}.stale.{os.getpid()}")
        try:
            os.replace(self.path, aside)
        except FileNotFoundError:
            return
        try:
            moved = json.loads(aside.read_text())
        except (OSError, ValueError):
            moved = None
        if moved != holder and moved is not None:
            try:
                os.link(aside, self.path)
            except OSError:
                pass  # a third process holds the lock now; its own check stands
        aside.unlink(missing_ok=True)

    def _try_create(self, info: dict) -> bool:
        tmp = self.path.with_name(f"{self.path.name}.{os.getpid()}.{threading.get_ident()}")
        tmp.write_text(json.dumps(info))
        try:
            os.link(tmp, self.path)
            return True
        except FileExistsError:
            return False
        except OSError:  # file systems without hard links
            try:
                fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL)
            except FileExistsError:
                return False
            with os.fdopen(fd, "w") as fh:
                fh.write(json.dumps(info))
            return True
        finally:
            tmp.unlink(missing_ok=True)

    def _read(self) -> dict | None:
        try:
            return json.loads(self.path.read_text())
        except (OSError, ValueError):
            return None

    @staticmethod
    def _stale(holder: dict) -> bool:
        if holder.get("host") != socket.gethostname():
            return False  # cannot see that machine's processes
        pid = holder.get("pid")
        if not isinstance(pid, int):
            return True
        return not _pid_alive(pid, holder.get("start"))

    def release(self) -> None:
        if self.held:
            holder = self._read()
            if holder and holder.get("pid") == os.getpid() and holder.get("host") == socket.gethostname():
                self.path.unlink(missing_ok=True)
            self.held = False


def _user() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return ""


# ---------------------------------------------------------------------------------------------
# Journal


class _Journal:
    """Append-only JSON lines, one per change, each fsynced before ``append`` returns."""

    def __init__(self, path: Path):
        self.path = path
        self._fd: int | None = None

    def read(self) -> tuple[list[dict], int]:
        """Entries of the good prefix and its length in bytes (a torn tail is left out)."""
        try:
            data = self.path.read_bytes()
        except FileNotFoundError:
            return [], 0
        entries: list[dict] = []
        good = 0
        bad_line = None
        for number, line in enumerate(data.split(b"\n")[:-1], start=1):
            entry = _parse_line(line)
            if entry is None:
                bad_line = bad_line or number
                continue
            if bad_line is not None:
                raise WakelineError(f"{self.path}: line {bad_line} is damaged (entries follow it)")
            entries.append(entry)
            good += len(line) + 1
        return entries, good

    def truncate(self, length: int) -> None:
        if self.path.exists() and self.path.stat().st_size != length:
            with open(self.path, "r+b") as fh:
                fh.truncate(length)
                fh.flush()
                os.fsync(fh.fileno())

    def append(self, entry: dict) -> None:
        line = (_dumps(entry) + "\n").encode("utf-8")
        if self._fd is None:
            created = not self.path.exists()
            self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
            if created:
                _fsync_dir(self.path.parent)
        start = os.lseek(self._fd, 0, os.SEEK_END)
        try:
            view = memoryview(line)
            while view:
                view = view[os.write(self._fd, view):]
            os.fsync(self._fd)
        except OSError:
            # e.g. disk full: drop the partial line so the next append starts a clean line
            os.ftruncate(self._fd, start)
            raise

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def remove(self) -> None:
        self.close()
        self.path.unlink(missing_ok=True)
        _fsync_dir(self.path.parent)


def _parse_line(line: bytes) -> dict | None:
    try:
        entry = json.loads(line.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return None
    if not isinstance(entry, dict) or not isinstance(entry.get("seq"), int) or "op" not in entry:
        return None
    return entry


# ---------------------------------------------------------------------------------------------
# Snapshot reading: one loader per format version


@dataclass
class _Snapshot:
    name: str = ""
    created_utc: str = ""
    last_seq: int = 0
    processing: dict = field(default_factory=dict)
    shots: list[dict] = field(default_factory=list)  # index entries, see _index_entry
    unused_bytes: int = 0


def _read_snapshot(path: Path) -> _Snapshot:
    """Read the root attributes and the shot index (never field data)."""
    _check_signature(path)
    try:
        with h5py.File(path, "r") as f:
            version = f.attrs.get("format_version")
            if version is None or f.attrs.get("application") != "wakeline":
                raise WakelineError(f"{path}: not a wakeline session (HDF5 file of another program)")
            version = int(version)
            loader = _LOADERS.get(version)
            if loader is None:
                raise WakelineError(
                    f"{path}: session format version {version} is newer than this wakeline "
                    f"reads (up to {FORMAT_VERSION}); update wakeline"
                )
            return loader(f)
    except WakelineError:
        raise
    except (OSError, KeyError, ValueError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise WakelineError(f"{path}: damaged or truncated session file ({reason})") from None


def _file_identity(path: Path) -> tuple[int, int, int] | None:
    try:
        info = path.stat()
    except OSError:
        return None
    return info.st_ino, info.st_size, info.st_mtime_ns


def _check_signature(path: Path) -> None:
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except FileNotFoundError:
        raise WakelineError(f"{path}: session file not found") from None
    if len(head) < 8:
        raise WakelineError(f"{path}: damaged or truncated session file ({len(head)} bytes)")
    if head != _HDF5_SIGNATURE:
        raise WakelineError(f"{path}: not a wakeline session (not an HDF5 file)")


def _load_v1(f: h5py.File) -> _Snapshot:
    index = json.loads(_as_text(f["index"][()]))
    return _Snapshot(
        name=str(f.attrs.get("name", "")),
        created_utc=str(f.attrs.get("created_utc", "")),
        last_seq=int(f.attrs["last_seq"]),
        processing=json.loads(str(f.attrs.get("processing_settings", "{}"))),
        shots=list(index["shots"]),
        unused_bytes=int(f.attrs.get("unused_bytes", 0)),
    )


# A new format version adds its loader here; each loader returns the current in-memory model,
# which is the migration: the next compaction writes the file in the current version.
_LOADERS = {1: _load_v1}


# ---------------------------------------------------------------------------------------------
# Session


@dataclass
class _Place:
    """Where a shot's arrays are: ``None`` (nowhere), "snapshot" or a pending file name."""

    result: str | None = None
    frames: str | None = None
    history: list[Pick] = field(default_factory=list)  # edits since the snapshot
    snapshot_history: list[Pick] | None = None  # cached from the snapshot when asked


class Session:
    """An open session. Use ``Session.create`` / ``Session.open``, or ``with Session.open(p):``.

    All file I/O happens in the calling thread; a lock serialises calls made from several
    threads of one process.
    """

    def __init__(self, path: Path, snapshot: _Snapshot, writable: bool, lock: _Lock | None):
        self.path = path
        self.name = snapshot.name
        self.read_only = not writable
        self.created_utc = snapshot.created_utc
        self._lock = lock
        self._mutex = threading.RLock()
        self._journal = _Journal(path.with_name(path.name + ".journal"))
        self._pending_dir = path.with_name(path.name + ".pending")
        self._snapshot_seq = snapshot.last_seq
        self._seq = snapshot.last_seq
        self._processing = dict(snapshot.processing)
        self._records: dict[str, ShotRecord] = {}
        self._places: dict[str, _Place] = {}
        self._dirty = False
        self._closed = False
        self.active_runs = 0  # batch runs in progress (core.batch); see compact()
        self._touched: set[str] = set()  # shots changed since the snapshot
        self._unused_bytes = snapshot.unused_bytes  # dead space left by replaced arrays
        for entry in snapshot.shots:
            self._records[entry["shot_id"]] = _record_from_index(entry)
            self._places[entry["shot_id"]] = _Place(
                result="snapshot" if entry.get("has_result") else None,
                frames="snapshot" if entry.get("frames", {}).get("storage") == "embedded" else None,
            )

    # -- opening and closing -------------------------------------------------------------------

    @classmethod
    def create(cls, path, name: str = "") -> Session:
        """Create a new empty session file and open it for writing."""
        path = Path(path)
        if path.exists():
            raise WakelineError(f"{path}: already exists")
        if not path.parent.is_dir():
            raise WakelineError(f"{path.parent}: folder not found")
        lock = _Lock(path)
        lock.acquire()
        try:
            for leftover in (path.with_name(path.name + ".journal"),):
                leftover.unlink(missing_ok=True)
            shutil.rmtree(path.with_name(path.name + ".pending"), ignore_errors=True)
            snapshot = _Snapshot(name=name or path.stem, created_utc=_now_utc())
            session = cls(path, snapshot, True, lock)
            session._write_snapshot()
        except BaseException:
            lock.release()
            raise
        return session

    @classmethod
    def open(cls, path, writable: bool = True) -> Session:
        """Open a session lazily: the shot index and the journal, no field data.

        Raises
        ------
        SessionLocked
            When ``writable`` and another live process has it open for writing.
        WakelineError
            When the file is missing, truncated or not a wakeline session.
        """
        path = Path(path)
        lock = _Lock(path) if writable else None
        if lock is not None:
            _check_signature(path)
            lock.acquire()
        try:
            session = cls._load(path, writable, lock)
        except BaseException:
            if lock is not None:
                lock.release()
            raise
        return session

    @classmethod
    def _load(cls, path: Path, writable: bool, lock: _Lock | None) -> Session:
        """Snapshot plus journal. A reader retries when a writer replaced the snapshot
        meanwhile, so it never pairs an old snapshot with a newer journal."""
        for _ in range(10):
            before = _file_identity(path)
            session = cls(path, _read_snapshot(path), writable, lock)
            session._replay_journal()
            if writable or _file_identity(path) == before:
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

    def shot_ids(self) -> list[str]:
        """Shot ids in import order."""
        with self._mutex:
            return list(self._records)

    def record(self, shot_id: str) -> ShotRecord:
        """A copy of one shot's cheap record."""
        with self._mutex:  # another thread may be saving results (core.batch)
            rec = self._get(shot_id)
            return replace(rec, pick=replace(rec.pick), metadata=dict(rec.metadata))

    def records(self) -> list[ShotRecord]:
        """Copies of every shot's record, in import order (no file access)."""
        with self._mutex:
            return [self.record(shot_id) for shot_id in self._records]

    def processing_settings(self) -> dict:
        """Session-wide processing settings: ``{"piv": PivSettings dict, "find_ball": bool}``."""
        return json.loads(json.dumps(self._processing))

    def settings_for(self, shot_id: str) -> ShotSettings:
        """The ShotSettings a shot is processed with: the session processing settings, with the
        shot's own values (``dt_s``, scale, ball, ``flight_deg``) where its metadata has them."""
        meta = self._get(shot_id).metadata
        data = dict(self._processing)
        for key in _PER_SHOT_SETTINGS:
            value = meta.get(key)
            if value is not None and value != "":
                data[key] = value
            elif key != "flight_deg":  # a session-wide flight override applies when unset
                data[key] = None
        return ShotSettings.from_dict(data)

    def needs_processing(self, shot_id: str) -> bool:
        """True unless the shot was processed successfully with its current settings."""
        rec = self._get(shot_id)
        return rec.state != "processed" or rec.fingerprint != self.settings_for(shot_id).fingerprint()

    def frame_source(self, shot_id: str) -> dict:
        """Where a worker finds the frames: absolute paths and checksums, or an HDF5 location.

        Returns ``{"storage": "files", "path_a", "path_b" (or None), "sha256_a", "sha256_b"}`` or
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
        }

    def load_frames(self, shot_id: str) -> tuple[np.ndarray, np.ndarray]:
        """Frames A and B as float32 ``(H, W)``; checks file checksums first.

        Raises
        ------
        WakelineError
            "shot <id>: frame file <path> changed since import" or "... not found".
        """
        with self._mutex:
            return read_frames(shot_id, self.frame_source(shot_id))

    def check_frames(self, should_stop=None) -> dict[str, str]:
        """``shot_id -> problem`` for every shot whose frame files are missing or changed.

        ``should_stop``: called before each shot; when it returns True the shots checked so
        far are reported.
        """
        problems = {}
        for shot_id in list(self._records):
            if should_stop is not None and should_stop():
                break
            source = self.frame_source(shot_id)
            if source["storage"] != "files":
                continue
            problem = _frame_file_problem(shot_id, source)
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
                with h5py.File(file, "r") as f:
                    g = f[group]
                    arrays = {name: g[name][()] for name in g}
            except FileNotFoundError:  # only a reader: the writer has compacted since
                raise WakelineError(f"{self.path}: changed on disk by the process writing it; "
                                    "reopen the session") from None
            return ShotResult.from_stored(rec.summary, arrays)

    def history(self, shot_id: str) -> list[Pick]:
        """Every pick edit of a shot, oldest first."""
        with self._mutex:
            self._get(shot_id)
            place = self._places[shot_id]
            if place.snapshot_history is None:
                place.snapshot_history = self._read_snapshot_history(shot_id)
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
            _check_shot_id(shot_id)
            if shot_id in self._records:
                raise WakelineError(f"shot {shot_id}: already in {self.path.name}")
            path_a = Path(frame_a_path).resolve()
            path_b = None if frame_b_path is None else Path(frame_b_path).resolve()
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
                pending = self._write_pending(seq, lambda f: _write_frames_group(f, frame_a, frame_b))
            entry = {"op": "add_shot", "shot": shot_id, "metadata": dict(metadata or {}),
                     "frames": frames, "pending": pending, "t": _now_utc()}
            self._commit(entry)

    def set_processing_settings(self, settings: dict) -> None:
        """Replace the session-wide processing settings (``{"piv": {...}, "find_ball": ...}``);
        shots processed with other settings then count as not processed."""
        with self._mutex:
            self._check_writable()
            known = {f.name for f in fields(ShotSettings)} - set(_PER_SHOT_SETTINGS) | {
                "flight_deg"}
            unknown = sorted(set(settings) - known)
            if unknown:
                raise WakelineError(f"processing settings: unknown key(s) {', '.join(unknown)}")
            ShotSettings.from_dict(settings)  # refuses bad PIV settings before they are kept
            self._commit({"op": "settings", "settings": _json_ready(settings), "t": _now_utc()})

    def save_result(self, shot_id: str, result: ShotResult) -> None:
        """Keep a new result (the proposal) of a shot; never touches the analyst's pick."""
        with self._mutex:
            self._check_writable()
            self._get(shot_id)
            seq = self._seq + 1
            summary = _json_ready(result.summary())
            arrays = result.arrays()
            pending = self._write_pending(seq, lambda f: _write_result_group(f, summary, arrays))
            self._commit({
                "op": "result", "shot": shot_id, "summary": summary, "pending": pending,
                "fingerprint": result.settings.fingerprint(), "version": __version__,
                "t": _now_utc(),
            })

    def save_failure(self, shot_id: str, reason: str, fingerprint: str | None = None) -> None:
        """Record that processing a shot failed; its previous result and pick stay."""
        with self._mutex:
            self._check_writable()
            self._get(shot_id)
            if fingerprint is None:
                fingerprint = self.settings_for(shot_id).fingerprint()
            self._commit({"op": "failure", "shot": shot_id, "reason": str(reason),
                          "fingerprint": fingerprint, "version": __version__, "t": _now_utc()})

    def set_pick(
        self, shot_id: str, *, status: str | None = None, upper_deg=_UNSET, lower_deg=_UNSET,
        reason: str | None = None, note: str | None = None, who: str | None = None,
    ) -> Pick:
        """Edit the analyst's pick. Arguments left out keep their value; ``upper_deg=None``
        clears it. The edit is on disk (journal, fsynced) when this returns.

        Raises
        ------
        WakelineError
            Unknown status, "unusable" without a reason, or a non-finite angle.
        """
        with self._mutex:
            self._check_writable()
            current = self._get(shot_id).pick
            changes = {k: v for k, v in (("status", status), ("reason", reason), ("note", note))
                       if v is not None}
            for side, value in (("upper_deg", upper_deg), ("lower_deg", lower_deg)):
                if value is not _UNSET:
                    changes[side] = _checked_angle(shot_id, side, value)
            pick = replace(current, **changes, who=who if who is not None else _user(),
                           when=_now_utc())
            _check_pick(shot_id, pick)
            self._commit({"op": "pick", "shot": shot_id, "pick": pick.to_dict()})
            return replace(pick)

    def compact(self) -> None:
        """Write a new snapshot holding everything, replace the old one, then drop the journal."""
        with self._mutex:
            self._check_writable()
            self._write_snapshot()
            self._journal.remove()
            if not self.active_runs:  # a running batch's workers may still read pending frames
                shutil.rmtree(self._pending_dir, ignore_errors=True)
            self._dirty = False

    # -- internals: journal --------------------------------------------------------------------

    def _commit(self, entry: dict) -> None:
        """Append one change to the journal (durable on return), then apply it in memory."""
        entry = {"seq": self._seq + 1, **entry}
        self._journal.append(entry)
        self._seq = entry["seq"]
        self._apply(entry)
        self._dirty = True

    def _replay_journal(self) -> None:
        entries, good_length = self._journal.read()
        live = [e for e in entries if e["seq"] > self._snapshot_seq]
        for entry in live:
            self._apply(entry)
            self._seq = max(self._seq, entry["seq"])
        self._dirty = bool(live)
        if self.read_only:
            return
        if len(live) != len(entries):  # left from a compaction killed before it dropped them
            self._rewrite_journal(live)
        else:
            self._journal.truncate(good_length)
        self._remove_orphans({e.get("pending") for e in live} - {None})

    def _rewrite_journal(self, entries: list[dict]) -> None:
        tmp = self._journal.path.with_name(self._journal.path.name + ".tmp")
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.writelines(_dumps(e) + "\n" for e in entries)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, self._journal.path)
        _fsync_dir(self.path.parent)

    def _remove_orphans(self, referenced: set[str]) -> None:
        """Delete files a killed writer left behind: temporary snapshot, unreferenced arrays."""
        self.path.with_name(self.path.name + ".tmp").unlink(missing_ok=True)
        if self._pending_dir.is_dir():
            for item in self._pending_dir.iterdir():
                if item.name not in referenced:
                    item.unlink(missing_ok=True)

    def _apply(self, entry: dict) -> None:
        op = entry["op"]
        if op == "settings":
            self._processing = dict(entry["settings"])
            return
        shot_id = entry["shot"]
        self._touched.add(shot_id)
        if op == "add_shot":
            self._records[shot_id] = ShotRecord(shot_id, dict(entry["metadata"]),
                                                frames=dict(entry["frames"]))
            self._places[shot_id] = _Place(frames=entry.get("pending"))
            return
        rec, place = self._records[shot_id], self._places[shot_id]
        if op == "result":
            rec.state, rec.failure, rec.summary = "processed", "", entry["summary"]
            rec.fingerprint, rec.software_version = entry["fingerprint"], entry["version"]
            rec.processed_utc = entry["t"]
            place.result = entry["pending"]
        elif op == "failure":
            rec.state, rec.failure, rec.fingerprint = "failed", entry["reason"], entry["fingerprint"]
            rec.software_version, rec.processed_utc = entry["version"], entry["t"]
        elif op == "pick":
            rec.pick = Pick.from_dict(entry["pick"])
            place.history.append(replace(rec.pick))
        else:
            raise WakelineError(f"{self._journal.path}: unknown entry '{op}' (newer wakeline?)")

    def _write_pending(self, seq: int, write) -> str:
        """Write arrays to ``S.h5.pending/<seq>.h5`` whole (temporary name, fsync, rename)."""
        self._pending_dir.mkdir(exist_ok=True)
        name = f"{seq:09d}.h5"
        final = self._pending_dir / name
        tmp = self._pending_dir / (name + ".tmp")
        with h5py.File(tmp, "w") as f:
            write(f)
        _fsync_file(tmp)
        os.replace(tmp, final)
        _fsync_dir(self._pending_dir)
        return name

    # -- internals: snapshot -------------------------------------------------------------------

    def _write_snapshot(self) -> None:
        """Write the next snapshot aside, make it durable, then put it in place."""
        tmp = self.path.with_name(self.path.name + ".tmp")
        tmp.unlink(missing_ok=True)
        if self._patchable():
            # A byte copy is many times faster than copying object by object; only the shots
            # changed since the last snapshot are then rebuilt inside the (private) copy.
            shutil.copyfile(self.path, tmp)
            with h5py.File(tmp, "a") as dst:
                self._patch_snapshot(dst)
        else:
            with h5py.File(tmp, "w") as dst:
                self._fill_snapshot(dst)
        _fsync_file(tmp)
        os.replace(tmp, self.path)
        _fsync_dir(self.path.parent)
        self._snapshot_seq = self._seq
        self._touched.clear()
        for place in self._places.values():
            place.result = "snapshot" if place.result else None
            place.frames = "snapshot" if place.frames else None
            if place.snapshot_history is not None:
                place.snapshot_history = place.snapshot_history + place.history
            place.history = []

    def _patchable(self) -> bool:
        """Patch a copy unless replaced results left too much dead space in the file."""
        if not self.path.exists():
            return False
        return self._unused_bytes <= _MAX_UNUSED_FRACTION * self.path.stat().st_size

    def _fill_snapshot(self, dst: h5py.File) -> None:
        self._unused_bytes = 0
        shots = dst.create_group("shots")
        old = h5py.File(self.path, "r") if self.path.exists() else None
        try:
            for rec in self._records.values():
                self._fill_shot(shots.create_group(_shot_key(rec.shot_id)), rec, old, False)
        finally:
            if old is not None:
                old.close()
        self._write_root(dst)

    def _patch_snapshot(self, dst: h5py.File) -> None:
        shots = dst.require_group("shots")
        for rec in self._records.values():
            if rec.shot_id not in self._touched:
                continue
            key = _shot_key(rec.shot_id)
            fresh = key + "%new"  # never a key: quote() writes '%' only before two hex digits
            self._fill_shot(shots.create_group(fresh), rec, dst, True)
            if key in shots:
                self._unused_bytes += _stored_bytes(shots[key])  # what was not moved over
                del shots[key]
            shots.move(fresh, key)
        self._write_root(dst)

    def _write_root(self, dst: h5py.File) -> None:
        dst.attrs["format_version"] = FORMAT_VERSION
        dst.attrs["application"] = "wakeline"
        dst.attrs["software_version"] = __version__
        dst.attrs["name"] = self.name
        dst.attrs["created_utc"] = self.created_utc
        dst.attrs["saved_utc"] = _now_utc()
        dst.attrs["last_seq"] = self._seq
        dst.attrs["processing_settings"] = _dumps(self._processing)
        dst.attrs["unused_bytes"] = int(self._unused_bytes)
        index = {"shots": [_index_entry(rec, self._places[rec.shot_id])
                           for rec in self._records.values()]}
        if "index" in dst:
            del dst["index"]
        dst.create_dataset("index", data=_dumps(index), dtype=h5py.string_dtype())

    def _fill_shot(self, g: h5py.Group, rec: ShotRecord, old: h5py.File | None,
                   move: bool) -> None:
        """Write one shot's group; arrays already in the snapshot are copied from ``old``, or
        moved when ``old`` is the file being written (``move``)."""
        place = self._places[rec.shot_id]
        g.attrs["shot_id"] = rec.shot_id
        g.attrs["state"] = rec.state
        g.attrs["failure"] = rec.failure
        _write_attrs(g.create_group("metadata"), rec.metadata)
        frames = g.create_group("frames")
        _write_attrs(frames, {k: v for k, v in rec.frames.items() if k != "shape"})
        if place.frames is not None:
            self._copy_arrays(place.frames, rec.shot_id, "frames", old, frames, move)
        _write_attrs(g.create_group("pick"), rec.pick.to_dict())
        history = self._snapshot_history_from(old, rec.shot_id) + place.history
        g.create_dataset("history", data=[_dumps(p.to_dict()) for p in history],
                         dtype=h5py.string_dtype())
        if place.result is not None and rec.summary is not None:
            result = g.create_group("result")
            result.attrs["summary"] = _dumps(rec.summary)
            self._copy_arrays(place.result, rec.shot_id, "result", old, result, move)

    def _copy_arrays(self, place, shot_id, kind, old, dst: h5py.Group, move: bool) -> None:
        if place == "snapshot":
            src_file = old
            src = old[f"shots/{_shot_key(shot_id)}/{kind}"]
        else:
            src_file = h5py.File(self._pending_dir / place, "r")
            src = src_file[kind]
        try:
            for name in [n for n in src if isinstance(src[n], h5py.Dataset)]:
                if move and src_file is old:
                    old.move(src[name].name, f"{dst.name}/{name}")
                else:
                    src_file.copy(src[name], dst, name=name)
        finally:
            if src_file is not old:
                src_file.close()

    def _snapshot_history_from(self, old: h5py.File | None, shot_id: str) -> list[Pick]:
        place = self._places[shot_id]
        if place.snapshot_history is not None:
            return place.snapshot_history
        if old is None:
            return []
        return _history_in(old, shot_id)

    def _read_snapshot_history(self, shot_id: str) -> list[Pick]:
        with h5py.File(self.path, "r") as f:
            return _history_in(f, shot_id)

    # -- internals: misc -----------------------------------------------------------------------

    def _array_location(self, place: str, shot_id: str, kind: str) -> tuple[Path, str]:
        if place == "snapshot":
            return self.path, f"shots/{_shot_key(shot_id)}/{kind}"
        return self._pending_dir / place, kind

    def _get(self, shot_id: str) -> ShotRecord:
        try:
            return self._records[shot_id]
        except KeyError:
            raise WakelineError(f"shot {shot_id}: not in {self.path.name}") from None

    def _check_writable(self) -> None:
        if self._closed:
            raise WakelineError(f"{self.path}: session is closed")
        if self.read_only:
            raise WakelineError(f"{self.path}: opened read-only")

    def _relative(self, path: Path) -> str:
        try:
            return Path(os.path.relpath(path, self.path.resolve().parent)).as_posix()
        except ValueError:  # another drive
            return path.as_posix()

    def _resolve(self, stored: str) -> Path:
        return (self.path.resolve().parent / stored).resolve()


def _stored_bytes(group: h5py.Group) -> int:
    """Bytes of dataset storage under ``group``."""
    sizes = []
    group.visititems(lambda _, obj: sizes.append(
        obj.id.get_storage_size() if isinstance(obj, h5py.Dataset) else 0))
    return sum(sizes)


def _history_in(f: h5py.File, shot_id: str) -> list[Pick]:
    key = f"shots/{_shot_key(shot_id)}/history"
    if key not in f:
        return []
    return [Pick.from_dict(json.loads(_as_text(x))) for x in f[key][()]]


def _as_text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def _write_attrs(g: h5py.Group, values: dict) -> None:
    """Metadata as attributes; None is stored as an empty string (text) or NaN (numbers)."""
    for key, value in values.items():
        if value is None:
            value = np.nan if key in NUMBER_COLUMNS or key.endswith("_deg") else ""
        g.attrs[key] = value if not isinstance(value, (dict, list)) else _dumps(value)


def _index_entry(rec: ShotRecord, place: _Place) -> dict:
    entry = asdict(rec)
    entry["has_result"] = place.result is not None and rec.summary is not None
    return entry


def _record_from_index(entry: dict) -> ShotRecord:
    known = {f.name for f in fields(ShotRecord)}
    data = {k: v for k, v in entry.items() if k in known}
    data["pick"] = Pick.from_dict(entry.get("pick") or {})
    return ShotRecord(**data)


def _write_result_group(f: h5py.File, summary: dict, arrays: dict[str, np.ndarray]) -> None:
    g = f.create_group("result")
    g.attrs["summary"] = _dumps(summary)
    for name, data in arrays.items():
        _write_array(g, name, data)


def _write_frames_group(f: h5py.File, frame_a: np.ndarray, frame_b: np.ndarray) -> None:
    g = f.create_group("frames")
    for name, frame in (("a", frame_a), ("b", frame_b)):
        data = np.asarray(frame)
        if np.all(data == np.rint(data)) and data.min() >= 0 and data.max() <= 65535:
            data = data.astype(np.uint16)
        ds = g.create_dataset(name, data=data, compression="gzip", compression_opts=1,
                              shuffle=True, chunks=True)
        ds.attrs["units"] = "counts"


def _check_shot_id(shot_id: str) -> None:
    if not isinstance(shot_id, str) or not shot_id.strip() or shot_id != shot_id.strip():
        raise WakelineError(f"shot {shot_id!r}: a shot id must be non-empty text without "
                            "leading or trailing spaces")


def _checked_angle(shot_id: str, side: str, value) -> float | None:
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise WakelineError(f"shot {shot_id}: {side} {value!r} is not a number") from None
    if not math.isfinite(value):
        raise WakelineError(f"shot {shot_id}: {side} must be a finite angle in degrees")
    return value


def _check_pick(shot_id: str, pick: Pick) -> None:
    if pick.status not in REVIEW_STATUSES:
        raise WakelineError(f"shot {shot_id}: review status {pick.status!r} is not one of "
                            f"{', '.join(REVIEW_STATUSES)}")
    if pick.status == "unusable" and not pick.reason.strip():
        raise WakelineError(f"shot {shot_id}: marking a shot unusable needs a reason")
    if pick.status == "adjusted" and pick.upper_deg is None and pick.lower_deg is None:
        raise WakelineError(f"shot {shot_id}: an adjusted pick needs an upper or lower angle")


# ---------------------------------------------------------------------------------------------
# Frames for workers (no Session needed: picklable description in, frames out)


def read_frames(shot_id: str, source: dict) -> tuple[np.ndarray, np.ndarray]:
    """Read a shot's frames from ``Session.frame_source`` output; checks checksums.

    Returns
    -------
    frame_a, frame_b : (H, W) float32 ndarray
    """
    from core.images import read_frame_pair

    if source["storage"] == "embedded":
        with h5py.File(source["file"], "r") as f:
            g = f[source["group"]]
            return g["a"][()].astype(np.float32), g["b"][()].astype(np.float32)
    problem = _frame_file_problem(shot_id, source)
    if problem:
        raise WakelineError(problem)
    return read_frame_pair(source["path_a"], source["path_b"])


def _frame_file_problem(shot_id: str, source: dict) -> str:
    for path_key, sum_key in (("path_a", "sha256_a"), ("path_b", "sha256_b")):
        path = source.get(path_key)
        if path is None:
            continue
        if not Path(path).is_file():
            return f"shot {shot_id}: frame file {path} not found"
        if source.get(sum_key) and sha256_of(Path(path)) != source[sum_key]:
            return f"shot {shot_id}: frame file {path} changed since import (SHA-256 differs)"
    return ""


# ---------------------------------------------------------------------------------------------
# Import of a folder of shots


@dataclass
class ImportReport:
    """What ``import_folder`` did: imported shot ids, problems (one line each), notes."""

    imported: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def import_folder(src_dir, session_path, embed: bool = False, on_shot=None,
                  should_stop=None) -> ImportReport:
    """Import a folder of frame pairs described by its ``shots.csv`` into a session.

    The session is created when it does not exist. Good rows are imported even when other rows
    are bad; each bad row or missing file is reported with its line and shot.

    Parameters
    ----------
    src_dir : path
        Folder with ``shots.csv`` and ``<shot>_a.<ext>``/``<shot>_b.<ext>`` or ``<shot>.tif``.
    session_path : path
    embed : bool
        Store frames compressed inside the session instead of referencing them.
    on_shot : callable(shot_id, ok, message), optional
        Called after each row.
    should_stop : callable() -> bool, optional
        Called before each row; True stops the import there (rows already imported stay, a
        note says how far it got).

    Raises
    ------
    WakelineError
        When the manifest is missing or lacks a required column (nothing is imported).
    """
    src_dir = Path(src_dir)
    rows = read_manifest(src_dir / MANIFEST_NAME)
    session_path = Path(session_path)
    session = Session.open(session_path) if session_path.exists() else Session.create(session_path)
    report = ImportReport()
    with session:
        listing = _frame_listing(src_dir)
        used: set[str] = set()
        for number, (line, metadata, problem) in enumerate(rows):
            if should_stop is not None and should_stop():
                report.notes.append(f"import stopped after {number} of {len(rows)} rows of "
                                    f"{MANIFEST_NAME}; import the folder again for the rest")
                return report
            shot_id = metadata.get("shot", "")
            where = f"{MANIFEST_NAME} line {line}" + (f" (shot {shot_id})" if shot_id else "")
            if not problem:
                problem = _import_row(session, src_dir, listing, metadata, embed, used)
            if problem:
                report.problems.append(f"{where}: {problem}")
            else:
                report.imported.append(shot_id)
            if on_shot is not None:
                on_shot(shot_id, not problem, problem)
        extra = sorted(set(listing) - used)
        if extra:
            report.notes.append(f"{len(extra)} image file(s) not named in {MANIFEST_NAME}: "
                                + ", ".join(listing[k].name for k in extra[:5])
                                + (" ..." if len(extra) > 5 else ""))
    return report


def read_manifest(path: Path) -> list[tuple[int, dict, str]]:
    """Parse ``shots.csv``: ``(line, metadata, problem)`` per data row (problem "" when good).

    Numbers become floats (None when empty); ``ball_type`` and ``notes`` and unknown columns
    stay text.
    """
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise WakelineError(f"{path}: manifest not found") from None
    except UnicodeDecodeError:
        raise WakelineError(f"{path}: not UTF-8 text") from None
    reader = csv.reader(io.StringIO(text, newline=""))
    header = [h.strip() for h in next(reader, [])]
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise WakelineError(f"{path}: missing column{'s' if len(missing) > 1 else ''} "
                            + ", ".join(repr(c) for c in missing))
    rows = []
    end_of_last = reader.line_num
    for cells in _csv_rows(reader, path):
        line, end_of_last = end_of_last + 1, reader.line_num  # where the row starts
        if not any(c.strip() for c in cells):
            continue
        if len(cells) > len(header):
            rows.append((line, {"shot": cells[0].strip()},
                         f"{len(cells)} cells but the header has {len(header)} columns"))
            continue
        values = dict(zip(header, (c.strip() for c in cells)))
        metadata, problem = _row_metadata(values)
        rows.append((line, metadata, problem))
    return rows


def _csv_rows(reader, path: Path):
    try:
        yield from reader
    except csv.Error as exc:
        raise WakelineError(f"{path} line {reader.line_num}: {exc}") from None


def _row_metadata(values: dict) -> tuple[dict, str]:
    metadata = {"shot": values.get("shot", "")}
    if not metadata["shot"]:
        return metadata, "empty shot id"
    for key, text in values.items():
        if key == "shot" or not key:
            continue
        if key in NUMBER_COLUMNS:
            number, problem = _number(key, text)
            if problem:
                return metadata, problem
            metadata[key] = number
        else:
            metadata[key] = text
    return metadata, _row_problem(metadata)


def _number(key: str, text: str) -> tuple[float | None, str]:
    if text == "":
        return None, ""
    try:
        value = float(text)
    except ValueError:
        return None, f"{key} {text!r} is not a number"
    if not math.isfinite(value):
        return None, f"{key} {text!r} is not a finite number"
    return value, ""


def _row_problem(meta: dict) -> str:
    if meta.get("dt_s") is None:
        return "dt_s is empty (time between frames, s)"
    for key in ("dt_s", "scale_mm_per_px", "ball_diameter_mm"):
        if meta.get(key) is not None and meta[key] <= 0:
            return f"{key} must be positive, got {meta[key]:g}"
    if meta.get("ball_diameter_mm") is None and not meta.get("ball_type"):
        return "ball_diameter_mm is empty and no ball_type gives a nominal diameter"
    return ""


def _frame_listing(src_dir: Path) -> dict[str, Path]:
    """Image files of the folder by lower-case name."""
    return {p.name.lower(): p for p in src_dir.iterdir()
            if p.is_file() and p.suffix.lower() in FRAME_SUFFIXES}


def _find_frames(shot_id: str, listing: dict[str, Path]) -> tuple[list[Path], str]:
    stem = shot_id.lower()
    pair = [next((listing[n] for n in (f"{stem}_{ab}{s}" for s in FRAME_SUFFIXES) if n in listing),
                 None) for ab in ("a", "b")]
    if pair[0] is not None and pair[1] is not None:
        return pair, ""
    single = next((listing[n] for n in (f"{stem}.tif", f"{stem}.tiff") if n in listing), None)
    if single is not None:
        return [single], ""
    if pair[0] is not None or pair[1] is not None:
        which = "b" if pair[1] is None else "a"
        return [], f"frame {shot_id}_{which}.<tif|png> not found"
    return [], f"no frame files {shot_id}_a/_b.<tif|png> or {shot_id}.tif in the folder"


def _import_row(session: Session, src_dir, listing, metadata: dict, embed: bool, used) -> str:
    shot_id = metadata["shot"]
    paths, problem = _find_frames(shot_id, listing)
    if problem:
        return problem
    used.update(p.name.lower() for p in paths)
    meta = {k: v for k, v in metadata.items() if k != "shot"}
    try:
        session.add_shot(shot_id, paths[0], paths[1] if len(paths) > 1 else None, meta, embed)
    except WakelineError as exc:
        return str(exc).removeprefix(f"shot {shot_id}: ")
    return ""


# ---------------------------------------------------------------------------------------------
# Table of picks


def session_table_rows(session: Session) -> tuple[list[str], list[list[str]]]:
    """One row per shot: metadata, proposed and final angles, uncertainty, wake, review.

    Returns
    -------
    header : list of str
        Column names with units in them.
    rows : list of list of str
        Cells as text; empty where there is no value.
    """
    records = session.records()
    extra = sorted({k for r in records for k in r.metadata}
                   - set(NUMBER_COLUMNS) - set(TEXT_COLUMNS) - {"shot"})
    meta_cols = list(NUMBER_COLUMNS) + list(TEXT_COLUMNS) + extra
    header = ["shot", *meta_cols, *_RESULT_COLUMNS]
    rows = [[r.shot_id, *(_cell(r.metadata.get(c)) for c in meta_cols), *_result_cells(r)]
            for r in records]
    return header, rows


_RESULT_COLUMNS = (
    "state", "failure", "flight_direction_deg", "flight_speed_m_s", "scale_used_mm_per_px",
    "upper_proposed_deg", "upper_uncertainty_deg", "lower_proposed_deg", "lower_uncertainty_deg",
    "upper_final_deg", "lower_final_deg", "wake_deflection_deg", "wake_state",
    "review_status", "unusable_reason", "review_note", "reviewed_by", "reviewed_utc",
    "processed_utc", "software_version",
)


def _result_cells(r: ShotRecord) -> list[str]:
    summary = r.summary or {}
    flight = summary.get("flight") or {}
    sep = summary.get("separation") or {}
    pick = r.pick
    values = [
        r.state, r.failure, flight.get("direction_deg"), flight.get("speed_m_s"),
        summary.get("scale_mm_per_px"),
        r.proposed_deg("upper"), r.uncertainty_deg("upper"),
        r.proposed_deg("lower"), r.uncertainty_deg("lower"),
        r.final_deg("upper"), r.final_deg("lower"),
        sep.get("wake_deflection_deg"), sep.get("wake_state") if r.summary else None,
        pick.status, pick.reason, pick.note, pick.who, pick.when,
        r.processed_utc, r.software_version,
    ]
    return [_cell(v) for v in values]


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.10g}"
    return str(value)


def write_table_csv(session: Session, path) -> int:
    """Write the table of picks as UTF-8 CSV with a header row; returns the number of rows.

    The file is written aside and renamed into place, so a reader never sees half a table.
    """
    header, rows = session_table_rows(session)
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        writer.writerows(rows)
    os.replace(tmp, path)
    return len(rows)
