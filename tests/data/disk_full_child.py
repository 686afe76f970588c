"""Writer for tests/test_disk_full.py, run on a tiny file system of its own (a tmpfs mounted in
a user namespace): fills the disk while saving results, picks and the snapshot, frees it, and
checks that every confirmed change is there. Prints one JSON line; exit 0 unless a check fails.

Usage: ``python tests/data/disk_full_child.py MOUNT SESSION_FOLDER``.
"""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path

from data.session_helpers import fake_result

from core import WakelineError
from core.store import Session


def fill(folder: Path, leave: int) -> Path:
    """A filler file that leaves about ``leave`` bytes free."""
    filler = folder / "filler"
    free = shutil.disk_usage(folder).free
    with open(filler, "wb") as fh:
        fh.write(b"\0" * max(free - leave, 0))
    return filler


def main(mount: str, source: str) -> None:
    folder = Path(mount) / "w"
    shutil.copytree(source, folder)
    path = folder / "s.h5"
    errors, results, picks = [], {}, {}  # the last confirmed result and pick of each shot
    for leave in (400_000, 200_000, 100_000, 50_000, 10_000):
        session = Session.open(path)
        filler = fill(Path(mount), leave)
        try:
            for shot_id in session:
                session.save_result(shot_id, fake_result(session.settings_for(shot_id),
                                                         float(leave), shape=(30, 40)))
                results[shot_id] = float(leave)
                session.set_pick(shot_id, status="adjusted", upper_deg=leave / 1000)
                picks[shot_id] = leave / 1000
        except WakelineError as exc:
            errors.append(str(exc))
        try:
            session.close()  # folding the journal needs room too
        except WakelineError as exc:
            errors.append(str(exc))
        filler.unlink()
    with Session.open(path) as session:  # room again: everything confirmed is there
        lost = [f"result {s}" for s, value in results.items()
                if session.load_result(s).separation.upper.angle_deg != value]
        lost += [f"pick {s}" for s, value in picks.items() if session[s].pick.upper_deg != value]
    print(json.dumps({"errors": errors, "confirmed": len(results) + len(picks), "lost": lost,
                      "leftovers": sorted(p.name for p in folder.iterdir())}))


if __name__ == "__main__":
    main(*sys.argv[1:3])
