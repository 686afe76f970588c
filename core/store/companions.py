"""The files of a session ``S.h5`` beside the snapshot, where a session really is (links
resolved), and what wakeline refuses to write over or replace."""

from __future__ import annotations

import os
import shutil
import stat
from pathlib import Path

from core import WakelineError
from core.store.files import on_read_only_file_system, same_place
from core.store.lock import SessionReadOnly


def companion_files(path: Path) -> dict[str, Path]:
    """The files that belong to the session ``path`` besides the snapshot: its journal, the
    folder of pending arrays, a half-written snapshot and the lock."""
    return {
        "journal": path.with_name(path.name + ".journal"),
        "pending": path.with_name(path.name + ".pending"),
        "snapshot_tmp": path.with_name(path.name + ".tmp"),
        "lock": path.with_name(path.name + ".lock"),
    }


_COMPANION_WORDS = {"journal": "its journal", "pending": "its folder of pending arrays",
                    "snapshot_tmp": "its half-written snapshot", "lock": "its lock"}
#: What each companion's name adds to its session's ("S.h5" -> "S.h5.journal": ".journal").
_COMPANION_SUFFIXES = {kind: file.name.removeprefix("S.h5")
                       for kind, file in companion_files(Path("S.h5")).items()}


def refuse_session_file(out: Path, path: Path) -> None:
    """Refuse to write ``out`` when it is the session ``path`` or one of its companion files
    (a table or sheet written with ``-o S.h5`` replaced the whole session)."""
    named = [(path, f"the session {path.name} itself")] + [
        (file, f"{_COMPANION_WORDS[kind]} (of the session {path.name})")
        for kind, file in companion_files(path).items()]
    for file, what in named:
        if same_place(out, file):
            raise WakelineError(f"{out}: is {what}; choose another output file")


def refuse_input_file(out: Path, inputs) -> None:
    """Refuse to write ``out`` over one of the frame files ``inputs`` or the ``shots.csv``
    beside them (the manifest they were imported with: the analyst's list of shots)."""
    from core.store.manifest import MANIFEST_NAME

    inputs = [Path(f) for f in inputs]
    for frame in inputs:
        if same_place(out, frame):
            raise WakelineError(f"{out}: is the frame file {frame.name}; choose another "
                                "output file")
    for manifest in {frame.parent / MANIFEST_NAME for frame in inputs}:
        if same_place(out, manifest):
            raise WakelineError(f"{out}: is the {MANIFEST_NAME} the session's frames were "
                                "imported with; choose another output file")


def _may_be_hdf5(path: Path) -> bool:
    """Whether ``path`` is an HDF5 file (h5py's test: the signature at offset 0, 512, 1024...,
    after a user block) or one that cannot be read to tell."""
    import h5py

    try:
        with path.open("rb"):
            pass
    except OSError:
        return True
    return bool(h5py.is_hdf5(str(path)))


def refuse_other_session(out: Path) -> None:
    """Refuse to write a table or a picture over an HDF5 file (another session, perhaps one a
    process has open), over one that cannot be read to tell, or over or into a companion of
    one (its journal, lock, half-written snapshot, folder of pending arrays): ``-o other.h5``
    replaced a whole session, and a running process then lost its file. Judged on the name as
    given and on where a link leads (the file that would be replaced)."""
    for path in dict.fromkeys((Path(out), Path(out).resolve())):
        if path.is_file() and _may_be_hdf5(path):
            raise WakelineError(f"{out}: is an HDF5 file (a session?) or cannot be read to "
                                "tell; choose another output file")
        for place in (path, *path.parents):
            for kind, suffix in _COMPANION_SUFFIXES.items():
                name = place.name.removesuffix(suffix)
                if name in ("", place.name):  # not a companion's name (".lock" alone is not)
                    continue
                owner = place.with_name(name)
                if owner.is_file() and _may_be_hdf5(owner):
                    where = "is" if place == path else "lies in"
                    raise WakelineError(f"{out}: {where} {_COMPANION_WORDS[kind]} (of the "
                                        f"session {owner.name}); choose another output file")


def session_frame_files(session) -> list[Path]:
    """The frame files an open session refers to (embedded frames are not files)."""
    files = []
    for shot_id in session:
        source = session.frame_source(shot_id)
        if source["storage"] == "files":
            files += [Path(source[k]) for k in ("path_a", "path_b") if source[k]]
    return files


def refuse_session_output(out: Path, session) -> None:
    """Refuse to write ``out`` (a table, a sheet) over what the open ``session`` is made of or
    reads: the snapshot and its companions, its frame files and their ``shots.csv``."""
    refuse_session_file(Path(out), Path(session.path))
    refuse_input_file(Path(out), session_frame_files(session))
    refuse_other_session(Path(out))


def session_path(path) -> Path:
    """The session's real path, resolved once when it is opened: a session reached through a
    symbolic link (or a linked folder) is the one file it points to, so its lock, journal and
    temporary files sit beside it and replacing the snapshot keeps the link a link."""
    return Path(path).resolve()


def check_replaceable(path: Path) -> None:
    """Refuse to edit a session whose file is read-only: saving replaces the file, which the
    folder's permissions would allow, silently undoing the chmod."""
    if on_read_only_file_system(path):
        raise SessionReadOnly(f"{path}: cannot edit the session here (read-only file system); "
                              "the window opens it read-only, and table, sheet and conditions "
                              "only read it; copy it to a writable folder to edit it")
    mode = stat.S_IMODE(path.stat().st_mode)
    if not mode & 0o222 or not os.access(path, os.W_OK):
        # the mode says why only where it lacks write permission (an immutable file, a share
        # mounted read-only for this user, an access list can refuse a writable mode)
        why = f"mode {mode:o}" if not mode & 0o222 else "this user may not write it"
        raise SessionReadOnly(f"{path}: the session file is read-only ({why}); the window "
                              "opens it read-only, and table, sheet and conditions only read "
                              "it; make it writable to edit it")


def remove_companions(path: Path) -> None:
    """Remove the journal, the pending arrays and a half-written snapshot (not the lock)."""
    files = companion_files(path)
    for name in ("journal", "snapshot_tmp"):
        files[name].unlink(missing_ok=True)
    shutil.rmtree(files["pending"], ignore_errors=True)
