"""Import of a folder of shots (frame pairs and their ``shots.csv``) into a session."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from core import WakelineError
from core.store.manifest import MANIFEST_NAME, read_manifest
from core.store.session import Session

FRAME_SUFFIXES = (".tif", ".tiff", ".png")


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

