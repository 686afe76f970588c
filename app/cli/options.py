"""Option types shared by several commands."""

from __future__ import annotations

import argparse
from pathlib import Path

from core import WakelineError


def known_ball_types() -> list[str]:
    """The ``ball_type`` words the measurement has a rulebook diameter for."""
    from core.ball import NOMINAL_BALL_DIAMETER_MM

    return sorted(NOMINAL_BALL_DIAMETER_MM)


def whole_count(text: str) -> int:
    """A count of 0 or more (``--workers``)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} (use 0 or more)")
    return value


def check_outputs(outputs, session: Path | None = None, inputs=()) -> None:
    """Refuse output paths that would overwrite what the command reads or writes elsewhere.

    ``outputs``: the files the command is about to write (None entries are skipped);
    ``session``: the session it reads (the snapshot and every companion file are refused);
    ``inputs``: frame files it reads.

    Raises
    ------
    WakelineError
        "OUT: is ...; choose another output file", or "OUT: is a folder; ...".
    """
    from core.store.companions import refuse_session_file
    from core.store.files import same_place

    seen: list[Path] = []
    for out in (Path(o) for o in outputs if o is not None):
        if out.is_dir():
            raise WakelineError(f"{out}: is a folder; give the name of the file to write in it")
        if session is not None:
            refuse_session_file(out, Path(session))
        for frame in map(Path, inputs):
            if same_place(out, frame):
                raise WakelineError(f"{out}: is the frame file {frame.name}; choose another "
                                    "output file")
        if any(same_place(out, other) for other in seen):
            raise WakelineError(f"{out}: given for both outputs; choose another output file")
        seen.append(out)


def session_frame_files(session) -> list[Path]:
    """The frame files an open session refers to (embedded frames are not files)."""
    files = []
    for shot_id in session:
        source = session.frame_source(shot_id)
        if source["storage"] == "files":
            files += [Path(source[k]) for k in ("path_a", "path_b") if source[k]]
    return files
