"""Stand-ins for ``core.batch.measure_task`` run in real worker processes by
tests/test_batch_workers.py: a worker that dies as the out-of-memory killer would kill it, and
one that holds its shot until the test lets it go. Each returns ``(shot_id, result, message)``.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path


def quick(task: dict, _threads=None):
    return task["shot_id"], f"result of {task['shot_id']}", ""


def killed_once(task: dict, _threads=None):
    """Killed (SIGKILL) the first time it is run for a shot with ``kill_once``; then quick."""
    marker = task.get("kill_once")
    if marker and not Path(marker).exists():
        Path(marker).touch()
        os.kill(os.getpid(), signal.SIGKILL)
    return quick(task)


def killed_always(task: dict, _threads=None):
    """Killed (SIGKILL) every time for a shot with ``kill``; the others are quick."""
    if task.get("kill"):
        os.kill(os.getpid(), signal.SIGKILL)
    return quick(task)


def held(task: dict, _threads=None):
    """Says it started (``started`` file), then waits for the ``go`` file before finishing."""
    Path(task["started"]).touch()
    give_up = time.monotonic() + 60  # a guard against a test that never lets go
    while not Path(task["go"]).exists() and time.monotonic() < give_up:
        time.sleep(0.01)
    return quick(task)
