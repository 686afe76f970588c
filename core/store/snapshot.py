"""``S.h5``, the snapshot: its format version, one loader per version, and how a new snapshot
is written (a patched byte copy of the last one, or a whole rewrite), always aside and then
renamed into place (layout in docs/session_format.md).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import shutil
import uuid
from dataclasses import dataclass, field, fields
from pathlib import Path
from urllib.parse import quote

import h5py
import numpy as np

from core import WakelineError, __version__
from core.store.files import atomic_write, dumps, now_utc, reserve_space, write_whole
from core.store.manifest import NUMBER_COLUMNS
from core.store.records import Pick, ProcessState, ShotRecord, check_shot_id, damage_reason
from core.summary import ShotSummary

FORMAT_VERSION = 2
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
#: HDF5 object layout of the files written: from 1.10 on, object headers (attributes, links,
#: a dataset's layout and filters), the superblock and chunk indexes carry checksums.
LIBVER = ("v110", "v110")
#: What h5py raises on a damaged or missing object (checksum failures included).
STORAGE_ERRORS = (OSError, KeyError, ValueError, RuntimeError)
_MAX_UNUSED_FRACTION = 0.25  # rewrite the snapshot whole beyond this much dead space


# -- reading: one loader per format version ----------------------------------------------


@dataclass
class Snapshot:
    name: str = ""
    created_utc: str = ""
    last_seq: int = 0
    processing: dict = field(default_factory=dict)
    shots: list[dict] = field(default_factory=list)  # index entries, see _index_entry
    unused_bytes: int = 0
    checksummed: bool = False  # written with checksums (Fletcher-32 arrays, SHA-256 texts)
    conditions_by: list[str] | None = None  # grouping columns (version 2)
    review_layers: list[dict] = field(default_factory=list)  # other analysts' reviews (2)


def h5_image(write=None) -> bytes:
    """The bytes of an HDF5 file built in memory by ``write(f)`` (an empty file without).

    Files are built in memory, or into room reserved beforehand (``reserve_space``), because
    HDF5 cannot recover from a failed write (a full disk); Python writes the bytes instead.
    """
    name = f"wakeline-{uuid.uuid4().hex}.h5"  # core driver, nothing on disk
    with h5py.File(name, "w", driver="core", backing_store=False, libver=LIBVER) as f:
        if write is not None:
            write(f)
        f.flush()
        return f.id.get_file_image()


def text_sha256(items) -> str:
    """SHA-256 of text items (str or UTF-8 bytes), each followed by a newline."""
    digest = hashlib.sha256()
    for item in items:
        digest.update(item.encode("utf-8") if isinstance(item, str) else bytes(item))
        digest.update(b"\n")
    return digest.hexdigest()


def _root_texts(attrs) -> list[str]:
    """The root attributes a reader relies on that HDF5 keeps outside checksummed headers."""
    return [str(attrs.get(key, "")) for key in ("name", "created_utc", "processing_settings")]


def write_text(group: h5py.Group, name: str, data, extra=()) -> None:
    """A UTF-8 text dataset (one string, or a list of lines) with the SHA-256 of its content
    (and of ``extra`` texts) in its ``sha256`` attribute: HDF5 cannot filter variable-length
    strings, so Fletcher-32 cannot guard them."""
    ds = group.create_dataset(name, data=data, dtype=h5py.string_dtype())
    items = [data] if isinstance(data, str) else list(data)
    ds.attrs["sha256"] = text_sha256([*items, *extra])


def read_text(ds: h5py.Dataset, extra=()):
    """A text dataset's value (bytes, or an array of bytes), checked against its ``sha256``
    (files written before checksums have none). Raises ValueError on a mismatch."""
    value = ds[()]
    expected = ds.attrs.get("sha256")
    items = [value] if isinstance(value, bytes) else list(value)
    if expected is not None and text_sha256([*items, *extra]) != as_text(expected):
        raise ValueError(f"{ds.name.lstrip('/')} checksum differs")
    return value


def read_snapshot(path: Path) -> Snapshot:
    """Read the root attributes and the shot index (never field data)."""
    check_signature(path)
    try:
        with h5py.File(path, "r") as f:
            try:
                set(f.attrs)  # attrs.get would take a damaged header for a missing one
            except (RuntimeError, OSError, KeyError) as exc:
                raise WakelineError(f"{path}: session file damaged (its header cannot be read: "
                                    f"{damage_reason(exc)}); restore it from a backup") from None
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
        raise WakelineError(f"{path}: damaged or truncated session file "
                            f"({_hdf5_reason(exc)})") from None


def _hdf5_reason(exc: Exception) -> str:
    """HDF5's reason in a few words: a truncated file's sizes rather than the library's fields
    (``truncated file: eof = 5000, sblock->base_addr = 0, stored_eof = 22653``)."""
    reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    sizes = re.search(r"truncated file: eof = (\d+).*stored_eof = (\d+)", reason)
    if sizes:
        return f"{int(sizes[1])} of its {int(sizes[2])} bytes are there"
    return reason


def file_identity(path: Path) -> tuple[int, int, int] | None:
    """What tells one snapshot file from the next (it is only ever replaced, never modified)."""
    try:
        return identity_of(path.stat())
    except OSError:
        return None


def identity_of(info: os.stat_result) -> tuple[int, int, int]:
    return info.st_ino, info.st_size, info.st_mtime_ns


def check_signature(path: Path) -> None:
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except FileNotFoundError:
        raise WakelineError(f"{path}: session file not found") from None
    if len(head) < 8 and _HDF5_SIGNATURE.startswith(head):
        raise WakelineError(f"{path}: damaged or truncated session file ({len(head)} bytes)")
    if head != _HDF5_SIGNATURE:
        raise WakelineError(f"{path}: not a wakeline session (not an HDF5 file)")


def _load_v1(f: h5py.File) -> Snapshot:
    return _load_index(f)[0]


def _load_v2(f: h5py.File) -> Snapshot:
    """Version 2 adds the grouping columns and the review layers to the index
    (``core.store.reviews``), and a pick may hold the analyst's circles and flight direction
    (``Pick``'s ``GEOMETRY_FIELDS``), which a reader of version 1 only would drop."""
    snapshot, index = _load_index(f)
    snapshot.conditions_by = index.get("conditions_by")
    snapshot.review_layers = list(index.get("review_layers") or [])
    return snapshot


def _load_index(f: h5py.File) -> tuple[Snapshot, dict]:
    index = json.loads(as_text(read_text(f["index"], _root_texts(f.attrs))))
    return Snapshot(
        name=str(f.attrs.get("name", "")),
        created_utc=str(f.attrs.get("created_utc", "")),
        last_seq=int(f.attrs["last_seq"]),
        processing=json.loads(str(f.attrs.get("processing_settings", "{}"))),
        shots=list(index["shots"]),
        unused_bytes=int(f.attrs.get("unused_bytes", 0)),
        checksummed="sha256" in f["index"].attrs,
    ), index


# A new format version adds its loader here; each loader returns the current in-memory model,
# which is the migration: the next compaction writes the file in the current version.
_LOADERS = {1: _load_v1, 2: _load_v2}



@dataclass
class Place:
    """Where a shot's arrays are: ``None`` (nowhere), "snapshot" or a pending file name."""

    result: str | None = None
    frames: str | None = None
    history: list[Pick] = field(default_factory=list)  # edits since the snapshot
    snapshot_history: list[Pick] | None = None  # cached from the snapshot when asked



def pending_name(value, optional: bool = False) -> str | None:
    """A pending file name from a journal line (``NNNNNNNNN.h5``), checked: a hand-edited line
    must not point outside the pending folder."""
    if value is None and optional:
        return None
    if not (isinstance(value, str) and re.fullmatch(r"\d+\.h5", value)):
        raise ValueError(f"pending file {value!r} is not a pending file name")
    return value


def shot_key(shot_id: str) -> str:
    """HDF5 group name for a shot id (no '/' and no leading '.')."""
    return quote(shot_id, safe=" -_+=,()[]{}@#!~").replace(".", "%2E")


def _units_of(name: str) -> str:
    for suffix, units in (("_px", "px"), ("_m_s", "m/s"), ("_1_s", "1/s"), ("_deg", "deg")):
        if name.endswith(suffix):
            return units
    return "1"


def write_array(group: h5py.Group, name: str, data: np.ndarray, compress: bool | None = None,
                units: str | None = None) -> None:
    """An array with HDF5's Fletcher-32 checksum on each chunk (damage is found on reading).

    Flags and counts shrink many times under gzip; measured noisy floats barely shrink (~15 %)
    for five times the write time, so they are stored plain unless ``compress``.
    """
    data = np.asarray(data)
    if compress is None:
        compress = data.dtype.kind in "biu" and data.size >= 256
    options = {"compression": "gzip", "compression_opts": 1, "shuffle": True} if compress else {}
    if data.ndim and data.size:  # checksums live in chunks; a scalar or empty array has none
        options["fletcher32"] = True
    ds = group.create_dataset(name, data=data, **options)
    ds.attrs["units"] = units or _units_of(name)


def copy_array(src: h5py.Dataset, dst: h5py.Group, name: str) -> None:
    """Copy a stored array into another file as it is stored; one written before checksums is
    rewritten with one."""
    if src.fletcher32 or not (src.ndim and src.size):
        src.file.copy(src, dst, name=name)
        return
    write_array(dst, name, src[()], compress=src.compression is not None,
                units=as_text(src.attrs.get("units", "1")))



def stored_bytes(parent: h5py.Group, name: str) -> int | None:
    """Bytes of dataset storage under ``parent[name]``; None when a damaged object hides them."""
    sizes = []
    try:
        parent[name].visititems(lambda _, obj: sizes.append(
            obj.id.get_storage_size() if isinstance(obj, h5py.Dataset) else 0))
    except STORAGE_ERRORS:
        return None
    return sum(sizes)


def history_in(f: h5py.File, shot_id: str) -> list[Pick]:
    """A shot's stored edits; raises one of ``STORAGE_ERRORS`` when they are damaged."""
    key = f"shots/{shot_key(shot_id)}/history"
    if key not in f:
        return []
    return [Pick.from_dict(json.loads(as_text(x))) for x in read_text(f[key])]


def as_text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def write_attrs(g: h5py.Group, values: dict) -> None:
    """Metadata as attributes; None is stored as an empty string (text) or NaN (numbers)."""
    for key, value in values.items():
        if value is None:
            value = np.nan if key in NUMBER_COLUMNS or key.endswith("_deg") else ""
        g.attrs[key] = value if not isinstance(value, (dict, list)) else dumps(value)


def index_entry(rec: ShotRecord, place: Place) -> dict:
    """The record as one entry of the snapshot's index (plain JSON)."""
    entry = {f.name: getattr(rec, f.name) for f in fields(ShotRecord)}
    entry.update(state=str(rec.state), pick=rec.pick.to_dict(), summary=None)
    if rec.summary is not None:
        entry.update(summary=rec.summary.to_dict(), summary_version=rec.summary.version)
    entry["has_result"] = place.result is not None and rec.summary is not None
    return entry


def record_from_index(entry: dict) -> ShotRecord:
    """A shot's record from its index entry; KeyError, TypeError, ValueError or AttributeError
    when the entry is malformed."""
    known = {f.name for f in fields(ShotRecord)}
    data = {k: v for k, v in entry.items() if k in known}
    check_shot_id(data["shot_id"], ValueError)
    for key in ("metadata", "frames"):
        if not isinstance(data.get(key, {}), dict):
            raise TypeError(f"{key} is not a mapping")
    data["state"] = ProcessState(data.get("state", ProcessState.UNPROCESSED))
    data["pick"] = Pick.from_dict(entry.get("pick") or {})
    data["summary"] = summary_from(entry.get("summary"), entry.get("summary_version"))
    return ShotRecord(**data)


def summary_from(data: dict | None, version: int | None) -> ShotSummary | None:
    """A stored summary; files written before summaries carried a version hold version 1."""
    return None if data is None else ShotSummary.from_dict(data, version or 1)


def write_result_group(f: h5py.File, summary: ShotSummary, arrays: dict[str, np.ndarray]) -> None:
    g = f.create_group("result")
    write_summary(g, summary)
    for name, data in arrays.items():
        write_array(g, name, data)


def write_summary(g: h5py.Group, summary: ShotSummary) -> None:
    g.attrs["summary"] = dumps(summary.to_dict())
    g.attrs["summary_version"] = summary.version


def write_frames_group(f: h5py.File, frame_a: np.ndarray, frame_b: np.ndarray) -> None:
    g = f.create_group("frames")
    for name, frame in (("a", frame_a), ("b", frame_b)):
        data = np.asarray(frame)
        if np.all(data == np.rint(data)) and data.min() >= 0 and data.max() <= 65535:
            data = data.astype(np.uint16)
        write_array(g, name, data, compress=True, units="counts")


# -- writing --------------------------------------------------------------------------------


class SnapshotWriting:
    """How ``Session`` writes its next snapshot (a part of ``Session`` kept in this module, next
    to the format it writes). Uses the session's path, records, places and sequence numbers.
    """

    def _write_snapshot(self) -> None:
        """Write the next snapshot aside, make it durable, then put it in place."""
        with atomic_write(self.path) as tmp:
            patch = self._patchable()
            if patch:
                # A byte copy is many times faster than copying object by object; only the
                # shots changed since the last snapshot are then rebuilt inside the copy.
                shutil.copyfile(self.path, tmp)
            else:
                write_whole(tmp, h5_image())
            reserve_space(tmp, self._snapshot_room())
            with h5py.File(tmp, "r+", libver=LIBVER) as dst:
                if patch:
                    self._patch_snapshot(dst)
                else:
                    self._fill_snapshot(dst)
        self._snapshot_seq = self._seq
        self._checksummed = True
        self._identity = file_identity(self.path)
        self._touched.clear()
        for place in self._places.values():
            place.result = "snapshot" if place.result else None
            place.frames = "snapshot" if place.frames else None
            if place.snapshot_history is not None:
                place.snapshot_history = place.snapshot_history + place.history
            place.history = []

    def _snapshot_room(self) -> int:
        """Bytes the next snapshot may need at most: the last one, the new arrays of the shots
        changed since, their histories and the index, with a margin for HDF5's own records."""
        room = self.path.stat().st_size if self.path.exists() else 0
        for shot_id in self._touched:
            place = self._places[shot_id]
            for name in (place.result, place.frames):
                if name not in (None, "snapshot"):
                    with contextlib.suppress(OSError):
                        room += (self._pending_dir / name).stat().st_size
        return room + 8192 * len(self._records) + 65536 * len(self._touched) + (1 << 20)

    def _patchable(self) -> bool:
        """Patch a copy unless replaced results left too much dead space in the file, or it was
        written without checksums (by an older wakeline): a whole rewrite adds them."""
        if not self._checksummed or not self.path.exists():
            return False
        if self._unused_bytes > _MAX_UNUSED_FRACTION * self.path.stat().st_size:
            return False
        return self._touched_readable()

    def _touched_readable(self) -> bool:
        """Whether every changed shot's group in the snapshot can be read whole. Patching frees
        the old group, and freeing a damaged object leaves HDF5 in a broken state; a whole
        rewrite only reads the old file and leaves out what it cannot read."""
        with h5py.File(self.path, "r") as old:
            shots = old.get("shots")
            return shots is None or all(
                stored_bytes(shots, key) is not None
                for key in map(shot_key, self._touched) if key in shots)

    def _fill_snapshot(self, dst: h5py.File) -> None:
        self._unused_bytes = 0
        shots = dst.create_group("shots")
        old = h5py.File(self.path, "r") if self.path.exists() else None
        try:
            for rec in self._records.values():
                self._fill_shot(shots.create_group(shot_key(rec.shot_id)), rec, old, False)
        finally:
            if old is not None:
                old.close()
        self._write_root(dst)

    def _patch_snapshot(self, dst: h5py.File) -> None:
        shots = dst.require_group("shots")
        for rec in self._records.values():
            if rec.shot_id not in self._touched:
                continue
            key = shot_key(rec.shot_id)
            fresh = key + "%new"  # never a key: quote() writes '%' only before two hex digits
            self._fill_shot(shots.create_group(fresh), rec, dst, True)
            if key in shots:
                self._unused_bytes += stored_bytes(shots, key)  # what was not moved over
                del shots[key]
            shots.move(fresh, key)
        self._write_root(dst)

    def _write_root(self, dst: h5py.File) -> None:
        dst.attrs["format_version"] = FORMAT_VERSION
        dst.attrs["application"] = "wakeline"
        dst.attrs["software_version"] = __version__
        dst.attrs["name"] = self.name
        dst.attrs["created_utc"] = self.created_utc
        dst.attrs["saved_utc"] = now_utc()
        dst.attrs["last_seq"] = self._seq
        dst.attrs["processing_settings"] = dumps(self._processing)
        dst.attrs["unused_bytes"] = int(self._unused_bytes)
        index = {"shots": [index_entry(rec, self._places[rec.shot_id])
                           for rec in self._records.values()],
                 "conditions_by": self._conditions_by,
                 "review_layers": [layer.to_dict() for layer in self._layers.values()]}
        if "index" in dst:
            del dst["index"]
        write_text(dst, "index", dumps(index), _root_texts(dst.attrs))

    def _fill_shot(self, g: h5py.Group, rec: ShotRecord, old: h5py.File | None,
                   move: bool) -> None:
        """Write one shot's group; arrays already in the snapshot are copied from ``old``, or
        moved when ``old`` is the file being written (``move``).

        A part of the shot that cannot be read (damaged storage, a lost pending file) is left
        out and said in ``self.problems``, so that one damaged shot never stops the others
        from being saved: a lost result makes the shot failed (process it again).
        """
        place = self._places[rec.shot_id]
        write_attrs(g.create_group("metadata"), rec.metadata)
        frames = g.create_group("frames")
        write_attrs(frames, {k: v for k, v in rec.frames.items() if k != "shape"})
        if place.frames is not None:  # lost frames leave the group empty: reading says so
            self._arrays_kept(place.frames, rec, "frames", old, frames, move)
        write_attrs(g.create_group("pick"), rec.pick.to_dict())
        try:
            history = self._snapshot_history_from(old, rec.shot_id)
        except STORAGE_ERRORS as exc:
            history = []
            self.problems.append(f"shot {rec.shot_id}: edit history before the last save was "
                                 f"damaged ({damage_reason(exc)}) and is dropped; the current "
                                 "pick and later edits are kept")
        place.snapshot_history = history
        write_text(g, "history", [dumps(p.to_dict()) for p in history + place.history])
        if place.result is not None and rec.summary is not None:
            result = g.create_group("result")
            write_summary(result, rec.summary)
            if not self._arrays_kept(place.result, rec, "result", old, result, move):
                del g["result"]
                place.result = None
        g.attrs["shot_id"] = rec.shot_id
        g.attrs["state"] = str(rec.state)
        g.attrs["failure"] = rec.failure

    def _arrays_kept(self, place, rec: ShotRecord, kind: str, old, dst: h5py.Group,
                     move: bool) -> bool:
        """Copy (or move) a shot's arrays; False, with the problem said, when they cannot be
        read (the partial copy is removed)."""
        try:
            self._copy_arrays(place, rec.shot_id, kind, old, dst, move)
            return True
        except STORAGE_ERRORS as exc:
            why = damage_reason(exc) if not isinstance(exc, FileNotFoundError) else \
                f"pending file {place} missing"
        for name in list(dst):
            del dst[name]
        if kind == "result":
            rec.state = ProcessState.FAILED
            rec.failure = f"stored result lost ({why}); process the shot again"
            self.problems.append(f"shot {rec.shot_id}: {rec.failure}")
        else:
            self.problems.append(f"shot {rec.shot_id}: embedded frames lost ({why}); the shot "
                                 "keeps its pick and result but cannot be processed again")
        return False

    def _copy_arrays(self, place, shot_id, kind, old, dst: h5py.Group, move: bool) -> None:
        if place == "snapshot":
            src_file = old
            src = old[f"shots/{shot_key(shot_id)}/{kind}"]
        else:
            src_file = h5py.File(self._pending_dir / place, "r")
            src = src_file[kind]
        try:
            for name in [n for n in src if isinstance(src[n], h5py.Dataset)]:
                if move and src_file is old:
                    old.move(src[name].name, f"{dst.name}/{name}")
                else:
                    copy_array(src[name], dst, name)
        finally:
            if src_file is not old:
                src_file.close()

    def _snapshot_history_from(self, old: h5py.File | None, shot_id: str) -> list[Pick]:
        place = self._places[shot_id]
        if place.snapshot_history is not None:
            return place.snapshot_history
        if old is None:
            return []
        return history_in(old, shot_id)

    def _read_snapshot_history(self, shot_id: str) -> list[Pick]:
        with self._arrays_file(self.path) as f:
            return history_in(f, shot_id)

