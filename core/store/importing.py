"""Import of a folder of shots (frame pairs and their ``shots.csv``) into a session."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from core import WakelineError
from core.rulebook import ball_size_problem
from core.store.companions import remove_companions
from core.store.files import sha256_of
from core.store.manifest import MANIFEST_NAME, column_notes, read_manifest
from core.store.session import PER_SHOT_SETTINGS, Session

FRAME_SUFFIXES = (".tif", ".tiff", ".png")


@dataclass
class ImportReport:
    """What ``import_folder`` did: imported shot ids, problems (one line each), notes, the
    shots already in the session with the same frames and values (left as they are), and those
    whose values were corrected (``correct_values``)."""

    imported: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    already: list[str] = field(default_factory=list)
    corrected: list[str] = field(default_factory=list)  # shots whose values were replaced
    # refused rows of shots held with the same frames and other values: their new values
    differing: dict[str, dict] = field(default_factory=dict)
    outdated: list[str] = field(default_factory=list)  # corrected shots now to be measured again


#: What importing one row did (besides a problem, which is its message).
ADDED, SAME, CORRECTED = "added", "same", "corrected"


def import_folder(src_dir, session_path, embed: bool = False, on_shot=None,
                  should_stop=None, ball_types=None, correct_values: bool = False) -> ImportReport:
    """Import a folder of frame pairs described by its ``shots.csv`` into a session.

    The session is created when it does not exist. Good rows are imported even when other rows
    are bad; each bad row or missing file is reported with its line and shot. A shot id given
    again is refused on every line after its first. A row whose shot
    is already in the session with the same frames and values is left alone (a stopped import
    run again goes on with the rest).

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
    ball_types : collection of str, optional
        The ``ball_type`` words the measurement knows (lower case); a row naming another is
        refused now rather than when it is processed. None: not checked.
    correct_values : bool
        A shot already in the session with the same frames but other values (a wrong ``dt_s``
        or scale, found after import) takes the row's values (:meth:`Session.set_shot_values`:
        its picks stay; ``ImportReport.outdated`` names those whose settings changed, to be
        processed again). Without it such a row is a problem that says which values differ.

    Raises
    ------
    WakelineError
        When the manifest is missing, lacks a required column or has no rows (nothing is
        imported, no session created).
    """
    src_dir = Path(src_dir)
    manifest = src_dir / MANIFEST_NAME
    header, rows = read_manifest(manifest)
    if not rows:
        raise WakelineError(f"{manifest}: no shots (a header and no rows)")
    session_path = Path(session_path)
    created = not session_path.exists()
    session = Session.open(session_path) if not created else Session.create(session_path)
    report = ImportReport(notes=[f"{manifest}: {note}" for note in column_notes(header)])
    with session:
        folder = _Folder(src_dir, session, embed, ball_types)
        first_lines: dict[str, int] = {}  # shot id -> the line that gives it first
        kept = {ADDED: report.imported, SAME: report.already, CORRECTED: report.corrected}
        odd_sizes: dict[str, list[str]] = {}  # a ball type's size problem -> its shots
        stopped = False
        for number, (line, metadata, problem) in enumerate(rows):
            if should_stop is not None and should_stop():
                report.notes.append(f"import stopped after {number} of {len(rows)} rows of "
                                    f"{manifest}; import the folder again for the rest")
                stopped = True
                break
            shot_id = metadata.get("shot", "")
            folder.name_files(shot_id)  # named, even when its row is refused
            # the manifest's folder named: several folders may go into one session
            where = f"{manifest} line {line}" + (f" (shot {shot_id})" if shot_id else "")
            first = first_lines.setdefault(shot_id, line) if shot_id else line
            if first != line:
                where = f"{manifest} line {line}"
                problem = f"shot id {shot_id} is given twice (also line {first})"
            outcome = problem or folder.import_row(metadata, correct_values)
            if outcome in kept:
                kept[outcome].append(shot_id)
                if size := ball_size_problem(metadata.get("ball_type"),
                                             metadata.get("ball_diameter_mm")):
                    odd_sizes.setdefault(size, []).append(shot_id)
            else:
                report.problems.append(f"{where}: {outcome}")
            if on_shot is not None:
                on_shot(shot_id, outcome in kept, "" if outcome in kept else outcome)
        else:
            report.notes += folder.unused_note()
        report.notes += [f"shot(s) {', '.join(ids)}: {size}" for size, ids in odd_sizes.items()]
        report.differing, report.outdated = folder.differing, folder.outdated
        if report.already:
            report.notes.append(f"{len(report.already)} shot(s) already in {session.path.name} "
                                "with the same frames and values were left as they are")
        report.notes += _correction_notes(report, folder.camera_moved)
    report.problems += session.problems  # what saving found damaged, if anything
    if created and not report.imported and not stopped:  # every row refused: none left empty
        session_path.unlink(missing_ok=True)
        remove_companions(session_path)
        report.notes.append(f"no shot imported: {session_path} not made")
    return report


class _Folder:
    """The image files of a folder being imported, and the rows imported so far."""

    def __init__(self, src_dir: Path, session: Session, embed: bool, ball_types) -> None:
        self.session, self.embed = session, embed
        self.ball_types = None if ball_types is None else {t.lower() for t in ball_types}
        self.listing = _frame_listing(src_dir)
        self.used: set[str] = set()
        self.differing: dict[str, dict] = {}
        self.outdated: list[str] = []  # corrected, with settings that changed
        self.camera_moved: list[str] = []  # corrected camera while a background is subtracted
        self.ids = {shot_id.casefold(): shot_id for shot_id in session}  # frame names ignore case

    def import_row(self, metadata: dict, correct_values: bool = False) -> str:
        """Add one manifest row's shot: ``ADDED``; ``SAME`` when the session holds it as the
        row describes it; ``CORRECTED`` when it held the same frames with other values and
        ``correct_values`` replaced them; else the problem."""
        shot_id = metadata["shot"]
        ball_type = metadata.get("ball_type")
        if ball_type and self.ball_types is not None and \
                ball_type.strip().lower() not in self.ball_types:
            return (f"ball_type {ball_type!r} is not one this wakeline knows "
                    f"({', '.join(sorted(self.ball_types))})")
        twin = self.ids.get(shot_id.casefold())
        if twin is not None and twin != shot_id:
            return (f"shot id differs from shot {twin} only in case (frame files are found "
                    "whatever their case); give it another id")
        paths, problem = _find_frames(shot_id, self.listing)
        if problem:
            return problem
        meta = {k: v for k, v in metadata.items() if k != "shot"}
        if shot_id in self.session:
            record = self.session[shot_id]
            if not _same_frames(record, paths):
                return (f"already in {self.session.path.name} with other frames; give it "
                        "another id")
            if _given(record.metadata) == _given(meta):  # a column added empty changes nothing
                return SAME
            if correct_values:
                outdated, camera_moved = _take_values(self.session, shot_id, meta)
                if outdated:
                    self.outdated.append(shot_id)
                if camera_moved:
                    self.camera_moved.append(shot_id)
                return CORRECTED
            self.differing[shot_id] = meta
            return (f"already in {self.session.path.name} with other values "
                    f"({_differences(record.metadata, meta)}); take them as corrections (the "
                    "picks stay) or give the row another id")
        try:
            self.session.add_shot(shot_id, paths[0], paths[1] if len(paths) > 1 else None, meta,
                                  self.embed)
        except WakelineError as exc:
            return str(exc).removeprefix(f"shot {shot_id}: ")
        self.ids[shot_id.casefold()] = shot_id
        return ADDED

    def name_files(self, shot_id: str) -> None:
        """Count the image files a row of ``shot_id`` takes as used, whether or not the row is
        imported (the half of a pair that is there, too): the note of unused files lists only
        those no row takes (a stray file beside a shot's frames among them)."""
        paths, _ = _find_frames(shot_id, self.listing)
        if not paths:
            paths = [p for p in _pair_halves(shot_id.lower(), self.listing) if p is not None]
        self.used.update(p.name.lower() for p in paths)

    def unused_note(self) -> list[str]:
        extra = sorted(set(self.listing) - self.used)
        if not extra:
            return []
        return [f"{len(extra)} image file(s) not named in {MANIFEST_NAME}: "
                + ", ".join(self.listing[k].name for k in extra[:5])
                + (" ..." if len(extra) > 5 else "")]


def take_corrections(session_path, corrections: dict[str, dict]) -> ImportReport:
    """Give shots of a session the corrected values an import found (``ImportReport.differing``)
    without importing the folder again; the report's ``corrected``, ``outdated`` and notes say
    what it did (as ``import_folder(..., correct_values=True)`` would)."""
    report = ImportReport()
    camera_moved = []
    with Session.open(session_path) as session:
        for shot_id, values in corrections.items():
            outdated, moved = _take_values(session, shot_id, values)
            report.corrected.append(shot_id)
            if outdated:
                report.outdated.append(shot_id)
            if moved:
                camera_moved.append(shot_id)
    report.notes = _correction_notes(report, camera_moved)
    report.problems += session.problems
    return report


def _take_values(session: Session, shot_id: str, values: dict) -> tuple[bool, bool]:
    """Give the shot its corrected values; whether it is now to be measured again because its
    settings changed, and whether only its camera changed while the session subtracts a
    background (the camera picks the frames the background is made of: a forced run)."""
    old = session[shot_id].metadata
    before = session.settings_for(shot_id).fingerprint()
    session.set_shot_values(shot_id, values)
    if session.settings_for(shot_id).fingerprint() != before:
        return True, False
    moved = (old.get("camera") or "") != (values.get("camera") or "")
    return False, bool(moved and session.processing_settings().get("background"))


def _correction_notes(report: ImportReport, camera_moved: list[str]) -> list[str]:
    """What the corrections did, and what is to be measured again."""
    if not report.corrected:
        return []
    notes = [(f"{len(report.corrected)} shot(s) took the corrected values of {MANIFEST_NAME} "
              f"({_ids(report.corrected)}); their picks stay")]
    if report.outdated:
        notes.append(f"measured with other values now, to be processed again: "
                     f"{_ids(report.outdated)}")
    if camera_moved:
        notes.append(f"camera position corrected while a background image is subtracted: "
                     f"{_ids(camera_moved)} and the shots at its old and new camera positions "
                     "are to be measured again, forced (their settings did not change)")
    return notes


def _ids(shots: list[str], shown: int = 5) -> str:
    return ", ".join(shots[:shown]) + (" ..." if len(shots) > shown else "")


def _same_frames(record, paths: list[Path]) -> bool:
    """The stored shot has these frame files, with the same contents."""
    frames = record.frames
    sums = [frames.get("sha256_a"), frames.get("sha256_b")]
    return len(paths) == 2 - (sums[1] is None) and all(
        sha256_of(path) == digest for path, digest in zip(paths, sums))


def _given(metadata: dict) -> dict:
    """The values a row gives: empty cells left out."""
    return {k: v for k, v in metadata.items() if v is not None and v != ""}


def _differences(stored: dict, given: dict, shown: int = 3) -> str:
    """The values that differ, in words: ``dt_s 6e-05 -> 6.2e-05, ...`` (an empty cell and a
    missing column are alike)."""
    stored, given = _given(stored), _given(given)
    keys = sorted((k for k in set(stored) | set(given) if stored.get(k) != given.get(k)),
                  key=lambda k: (k not in PER_SHOT_SETTINGS, k))  # what is measured with first
    words = [f"{k} {_value(stored.get(k))} -> {_value(given.get(k))}" for k in keys[:shown]]
    return ", ".join(words) + (" ..." if len(keys) > shown else "")


def _value(value) -> str:
    return "(none)" if value is None or value == "" else str(value)


def _frame_listing(src_dir: Path) -> dict[str, Path]:
    """Image files of the folder by lower-case name."""
    return {p.name.lower(): p for p in src_dir.iterdir()
            if p.is_file() and p.suffix.lower() in FRAME_SUFFIXES}


def _pair_halves(stem: str, listing: dict[str, Path]) -> list[Path | None]:
    """Frames A and B of a pair (the first suffix found of each), None where missing."""
    return [next((listing[n] for n in (f"{stem}_{ab}{s}" for s in FRAME_SUFFIXES) if n in listing),
                 None) for ab in ("a", "b")]


def _find_frames(shot_id: str, listing: dict[str, Path]) -> tuple[list[Path], str]:
    stem = shot_id.lower()
    pair = _pair_halves(stem, listing)
    if pair[0] is not None and pair[1] is not None:
        return pair, ""
    single = next((listing[n] for n in (f"{stem}.tif", f"{stem}.tiff") if n in listing), None)
    if single is not None:
        return [single], ""
    if pair[0] is not None or pair[1] is not None:
        found = pair[0] or pair[1]
        which = "B" if pair[1] is None else "A"
        return [], (f"{found.name} is there but not its frame {which} "
                    f"({shot_id}_{which.lower()}.<tif|png>, in any case)")
    hint = _longer_names(stem, listing)
    return [], (f"no frame files {shot_id}_a/_b.<tif|png> or {shot_id}.tif in the folder"
                + (f" (is {hint} meant? the shot column must name the files' shot part)"
                   if hint else ""))


def _longer_names(stem: str, listing: dict[str, Path]) -> str:
    """A frame A in the folder whose shot part ends with ``stem`` (``shot_001_a.tif`` for the
    id ``001``): the shot part as the file spells it, or ""."""
    for name, path in sorted(listing.items()):
        for suffix in FRAME_SUFFIXES:
            end = f"{stem}_a{suffix}"
            if name.endswith(end) and len(name) > len(end):
                return repr(path.name[: len(path.name) - len(end) + len(stem)])
    return ""
