"""Worker processes of a batch run: a killed worker costs no other shot (the pool restarts and
the lost shot is retried once), workers end with their parent, SIGTERM and SIGHUP stop a run
cleanly, and a shot that finishes while stopping is saved."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from data import pool_work
from data.session_helpers import fast_settings, write_shot_folder

from core import batch
from core.store import Session, import_folder

ROOT = Path(__file__).resolve().parent.parent
posix_only = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")


def _tasks(count: int, **extra) -> list[dict]:
    return [{"shot_id": f"S{i}", "shape": [192, 256], **extra.get(f"S{i}", {})}
            for i in range(count)]


@posix_only
def test_a_killed_worker_costs_no_other_shot_and_its_shot_is_retried(tmp_path):
    tasks = _tasks(5, S2={"kill_once": str(tmp_path / "killed")})
    outcomes = list(batch._run_pool(tasks, lambda: False, 2, work=pool_work.killed_once))
    assert sorted(o[0] for o in outcomes) == ["S0", "S1", "S2", "S3", "S4"]
    assert all(o[1] is not None for o in outcomes), outcomes
    assert (tmp_path / "killed").exists()  # the worker really died once


@posix_only
def test_a_shot_that_kills_its_worker_twice_fails_naming_memory(tmp_path):
    tasks = _tasks(4, S1={"kill": True, "shape": [4096, 4096]})
    outcomes = {o[0]: o for o in batch._run_pool(tasks, lambda: False, 2,
                                                   work=pool_work.killed_always)}
    assert sorted(outcomes) == ["S0", "S1", "S2", "S3"]
    assert all(outcomes[s][1] is not None for s in ("S0", "S2", "S3"))
    _shot, result, message = outcomes["S1"]
    assert result is None and "out of memory" in message and "4096 x 4096" in message
    assert "\n" not in message


def test_a_shot_finishing_while_stopping_is_kept(tmp_path):
    started, go = tmp_path / "started", tmp_path / "go"
    tasks = _tasks(3, S0={"started": str(started), "go": str(go)},
                   S1={"started": str(tmp_path / "s1"), "go": str(go)},
                   S2={"started": str(tmp_path / "s2"), "go": str(go)})

    asked = []

    def stop() -> bool:  # asked to stop once S0 is being measured; then S0 may finish
        if started.exists():
            asked.append(True)
            if len(asked) > 1:  # the run has seen the request (and cancelled what waits)
                go.touch()
        return bool(asked)

    outcomes = list(batch._run_pool(tasks, stop, 1, work=pool_work.held))
    assert "S0" in [o[0] for o in outcomes] and all(o[1] is not None for o in outcomes)
    assert len(outcomes) < 3  # nothing new started once stopping


def test_the_default_worker_count_fits_in_free_memory(monkeypatch):
    monkeypatch.setattr(os, "cpu_count", lambda: 16)
    monkeypatch.setattr(batch, "available_memory_bytes", lambda: 8e9)
    # 4096 x 4096 peaks near 1.1 GB and 8000 x 8000 near 3.4 GB (measured; docs/references.md)
    assert batch.peak_memory_bytes((4096, 4096)) == pytest.approx(1.1e9, rel=0.1)
    assert batch.peak_memory_bytes((8000, 8000)) == pytest.approx(3.4e9, rel=0.1)
    assert batch.default_workers([{"shape": [8000, 8000]}, {"shape": [256, 256]}]) == 2
    assert batch.default_workers([{"shape": [512, 512]}]) == 16
    monkeypatch.setattr(batch, "available_memory_bytes", lambda: None)
    assert batch.default_workers([{"shape": [8000, 8000]}]) == 16


# -- the `wakeline process` command and signals --------------------------------------------------


def _descendants(pid: int) -> list[int]:
    children: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                ppid = int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            children.setdefault(ppid, []).append(int(entry.name))
    found, todo = [], [pid]
    while todo:
        kids = children.get(todo.pop(), [])
        found += kids
        todo += kids
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state not in ("Z", "X")


def _start_run(tmp_path, shots: int = 40):
    """``wakeline process`` on a session of its own folder, output to files (a pipe would be
    held open by orphaned workers); returns once a result is saved, with its helpers' pids."""
    folder = tmp_path / "run"
    session_path = folder / "s.h5"
    import_folder(write_shot_folder(folder / "src", shots), session_path)
    with Session.open(session_path) as s:
        s.set_processing_settings(fast_settings())
    with open(tmp_path / "out.txt", "w") as out, open(tmp_path / "err.txt", "w") as err:
        child = subprocess.Popen(
            [sys.executable, "-m", "app.cli", "process", str(session_path), "--workers", "2"],
            cwd=ROOT, stdout=out, stderr=err, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    journal = folder / "s.h5.journal"
    give_up = time.monotonic() + 120  # a guard against a hung run, not a timing check
    while not (journal.exists() and b'"op": "result"' in journal.read_bytes()):
        assert child.poll() is None and time.monotonic() < give_up, _output(tmp_path)
        time.sleep(0.01)
    return child, session_path, _descendants(child.pid)


def _output(tmp_path) -> tuple[str, str]:
    return (tmp_path / "out.txt").read_text(), (tmp_path / "err.txt").read_text()


def _wait_gone(pids: list[int]) -> list[int]:
    give_up = time.monotonic() + 60  # a guard, not a timing check
    while any(_alive(p) for p in pids) and time.monotonic() < give_up:
        time.sleep(0.05)
    return [p for p in pids if _alive(p)]


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
def test_workers_end_with_a_killed_parent(tmp_path):
    child, _, helpers = _start_run(tmp_path)
    assert len(helpers) >= 3  # forkserver, resource tracker, workers
    child.send_signal(signal.SIGKILL)
    child.wait()
    left = _wait_gone(helpers)
    for pid in left:  # do not leave them to the other tests
        os.kill(pid, signal.SIGKILL)
    assert left == [], "helper processes outlived the killed run"


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
@pytest.mark.parametrize("signum", ["SIGTERM", "SIGHUP"])
def test_sigterm_and_sighup_stop_a_run_cleanly(tmp_path, signum):
    child, session_path, helpers = _start_run(tmp_path)
    child.send_signal(getattr(signal, signum))
    child.wait(timeout=120)
    left = _wait_gone(helpers)
    for pid in left:  # do not leave them to the other tests
        os.kill(pid, signal.SIGKILL)
    out, err = _output(tmp_path)
    assert child.returncode == 1, err
    assert "stopping: finished shots are kept (the same signal again to abort)" in err
    assert "Traceback" not in err
    assert "left for the next run" in out
    assert left == []
    assert sorted(p.name for p in session_path.parent.iterdir()) == ["s.h5", "src"]  # compacted
    with Session.open(session_path, writable=False) as s:
        done = [r.shot_id for r in s.values() if r.state == "processed"]
        assert 0 < len(done) < 40


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
def test_ctrl_c_to_the_process_group_while_the_fork_server_starts_stops_cleanly(tmp_path):
    # a terminal's Ctrl-C reaches every process of the group: the fork server, importing the
    # measurement before it ignores Ctrl-C itself (Python's multiprocessing), died of it and
    # the run ended on "internal error: EOFError"
    folder = tmp_path / "run"
    session_path = folder / "s.h5"
    import_folder(write_shot_folder(folder / "src", 6), session_path)
    with Session.open(session_path) as s:
        s.set_processing_settings(fast_settings())
    with open(tmp_path / "out.txt", "w") as out, open(tmp_path / "err.txt", "w") as err:
        child = subprocess.Popen(
            [sys.executable, "-m", "app.cli", "process", str(session_path), "--workers", "2"],
            cwd=ROOT, stdout=out, stderr=err, env=dict(os.environ, PYTHONPATH=str(ROOT)),
            start_new_session=True)
    give_up = time.monotonic() + 120  # a guard against a hung run, not a timing check
    while not any(b"forkserver" in _cmdline(pid) for pid in _descendants(child.pid)):
        assert child.poll() is None and time.monotonic() < give_up, _output(tmp_path)
        time.sleep(0.002)
    helpers = _descendants(child.pid)
    os.killpg(child.pid, signal.SIGINT)  # as Ctrl-C does: the whole group
    child.wait(timeout=120)
    left = _wait_gone(helpers)
    for pid in left:  # do not leave them to the other tests
        os.kill(pid, signal.SIGKILL)
    out, err = _output(tmp_path)
    assert "Traceback" not in err and "internal error" not in err, err
    assert "stopping: finished shots are kept (Ctrl-C again to abort)" in err
    assert child.returncode == 1 and "left for the next run" in out, (out, err)
    assert left == []


def _cmdline(pid: int) -> bytes:
    try:
        return (Path("/proc") / str(pid) / "cmdline").read_bytes()
    except OSError:
        return b""


def test_a_pool_that_breaks_while_shots_are_handed_out_loses_none(monkeypatch):
    # a worker can die before every shot is handed to the pool: submit then raises
    # BrokenProcessPool (concurrent.futures), and the shots not handed out wait for a new pool
    real = batch.ProcessPoolExecutor
    broken = []

    class BreaksOnce(real):
        def submit(self, *args, **kwargs):
            if not broken and len(getattr(self, "_handed", [])) == 2:
                broken.append(True)
                raise batch.BrokenProcessPool("a child process terminated abruptly")
            self._handed = [*getattr(self, "_handed", []), 1]
            return super().submit(*args, **kwargs)

    monkeypatch.setattr(batch, "ProcessPoolExecutor", BreaksOnce)
    outcomes = list(batch._run_pool(_tasks(5), lambda: False, 2, work=pool_work.quick))
    assert broken and sorted(o[0] for o in outcomes) == ["S0", "S1", "S2", "S3", "S4"]
    assert all(o[1] is not None for o in outcomes)
