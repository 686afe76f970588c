"""Writer for tests/test_kill.py: edits, processes and compacts a session until it is killed.

Usage: ``python tests/data/kill_child.py SESSION CONFIRM_FILE TAG``. After each call that
returned (the change is on disk by contract) one line is appended to CONFIRM_FILE:
``pick <shot> <note>``, ``result <shot>`` or ``compact``.
"""

from __future__ import annotations

import os
import sys

import core.piv  # noqa: F401 - the measurement loaded before "open", as in a writer that runs
from core.batch import iter_process
from core.store import Session


def main(session_path: str, confirm_path: str, tag: str) -> None:
    fd = os.open(confirm_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)

    def confirm(line: str) -> None:
        os.write(fd, (line + "\n").encode())

    session = Session.open(session_path)
    confirm("open")
    n = 0
    while True:
        for shot_id in session:
            n += 1
            note = f"{tag}-{n}"
            session.set_pick(shot_id, status="adjusted", upper_deg=float(n), note=note)
            confirm(f"pick {shot_id} {note}")
            if n % 4 == 0:
                for outcome in iter_process(session, [shot_id], workers=0, force=True):
                    confirm(f"result {outcome.shot_id}" if outcome.ok else "failed")
            if n % 3 == 0:
                session.compact()
                confirm("compact")


if __name__ == "__main__":
    main(*sys.argv[1:4])
