"""A writer killed with SIGKILL at random instants loses no confirmed change and leaves a session
that opens: while editing picks, saving results, compacting, and while opening."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from data.session_helpers import fast_settings, write_shot_folder

from core.store import Session, import_folder

ROOT = Path(__file__).resolve().parent.parent
CHILD = Path(__file__).resolve().parent / "data" / "kill_child.py"
ROUNDS = 16

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")


def _start_child(session_path: Path, confirm: Path, tag: str, log: Path) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with open(log, "wb") as err:
        return subprocess.Popen([sys.executable, str(CHILD), str(session_path), str(confirm), tag],
                                cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=err)


def _wait_until_open(child: subprocess.Popen, confirm: Path, log: Path) -> None:
    give_up = time.monotonic() + 60  # a guard against a hung child, not a timing check
    while not (confirm.exists() and confirm.read_text().startswith("open")):
        assert child.poll() is None, f"writer ended on its own:\n{log.read_text()}"
        assert time.monotonic() < give_up, "writer never opened the session"
        time.sleep(0.01)


def _check(session: Session, picks: dict[str, list[str]], results: set[str]) -> None:
    for shot_id, confirmed in picks.items():
        notes = [p.note for p in session.history(shot_id)]
        assert len(notes) == len(set(notes)), f"{shot_id}: an edit was replayed twice"
        positions = [notes.index(n) if n in notes else -1 for n in confirmed]
        assert -1 not in positions, f"{shot_id}: confirmed edit lost ({confirmed} vs {notes})"
        assert positions == sorted(positions), f"{shot_id}: edits out of order"
        if notes:
            assert session[shot_id].pick.note == notes[-1]
    for shot_id in results:
        assert session[shot_id].state == "processed"
        assert session.load_result(shot_id).field.dx_px.ndim == 2


def test_sigkill_at_random_instants_keeps_every_confirmed_change(tmp_path):
    session_path = tmp_path / "s.h5"
    import_folder(write_shot_folder(tmp_path / "src", 3), session_path)
    with Session.open(session_path) as s:
        s.set_processing_settings(fast_settings())
        shot_ids = list(s)
    rng = random.Random(4)
    picks: dict[str, list[str]] = {shot_id: [] for shot_id in shot_ids}
    results: set[str] = set()
    counts = {"pick": 0, "result": 0, "compact": 0}
    for round_ in range(ROUNDS):
        confirm, log = tmp_path / f"confirm{round_}.txt", tmp_path / f"child{round_}.log"
        child = _start_child(session_path, confirm, f"r{round_}", log)
        if round_ % 4 != 3:  # every fourth kill lands while the writer is still opening
            _wait_until_open(child, confirm, log)
        time.sleep(rng.uniform(0.0, 0.6))
        child.send_signal(signal.SIGKILL)
        child.wait()
        assert child.returncode == -signal.SIGKILL, log.read_text()
        for line in confirm.read_text().splitlines() if confirm.exists() else []:
            kind, *rest = line.split()
            counts[kind] = counts.get(kind, 0) + 1
            if kind == "pick":
                picks[rest[0]].append(rest[1])
            elif kind == "result":
                results.add(rest[0])
        with Session.open(session_path, writable=round_ % 2 == 0) as s:  # stale lock recovered
            _check(s, picks, results)
    with Session.open(session_path) as s:
        _check(s, picks, results)
    with Session.open(session_path, writable=False) as s:  # after a clean compaction
        _check(s, picks, results)
    # The kills must have hit a working writer, not only its start-up.
    assert counts["pick"] > 10 and counts["result"] > 0 and counts["compact"] > 0, counts
