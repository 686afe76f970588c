"""A full disk while saving: one line naming the file, nothing confirmed lost, the session reopens.

Two ways to fill the disk: a real one (a tmpfs of 4 MB mounted in a user namespace, when this
machine lets an ordinary user make one: ``unshare -rm``), and ENOSPC injected at the write
layer (``os.write``, ``os.posix_fallocate``), which runs everywhere.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.store import Session, import_folder

ROOT = Path(__file__).resolve().parent.parent
CHILD = Path(__file__).resolve().parent / "data" / "disk_full_child.py"


@pytest.fixture
def session_path(tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 3), tmp_path / "s.h5")
    return tmp_path / "s.h5"


def _tiny_tmpfs_available() -> bool:
    if not sys.platform.startswith("linux") or shutil.which("unshare") is None:
        return False
    done = subprocess.run(["unshare", "-rm", "sh", "-c", "mount -t tmpfs -o size=64k tmpfs /mnt"],
                          capture_output=True, check=False)
    return done.returncode == 0


@pytest.mark.skipif(not _tiny_tmpfs_available(), reason="no user namespaces to mount a tmpfs")
def test_a_really_full_disk_gives_one_line_and_loses_nothing(session_path, tmp_path):
    mount = tmp_path / "mnt"
    mount.mkdir()
    session_folder = tmp_path / "session"
    session_folder.mkdir()
    shutil.copy(session_path, session_folder / "s.h5")
    shutil.copytree(session_path.parent / "src", session_folder / "src")
    env = dict(os.environ, PYTHONPATH=f"{ROOT}{os.pathsep}{ROOT / 'tests'}")
    script = (f"mount -t tmpfs -o size=4m tmpfs '{mount}' && "
              f"exec '{sys.executable}' '{CHILD}' '{mount}' '{session_folder}'")
    done = subprocess.run(["unshare", "-rm", "sh", "-c", script], cwd=ROOT, env=env,
                          capture_output=True, text=True, check=False, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    assert "Traceback" not in done.stderr and "Exception ignored" not in done.stderr
    report = json.loads(done.stdout.strip().splitlines()[-1])
    assert report["errors"], report
    for line in report["errors"]:
        assert "\n" not in line and "No space left" in line and "s.h5" in line
    assert report["confirmed"] > 0 and report["lost"] == [], report
    assert report["leftovers"] == ["s.h5", "src"]  # no temporary file, no journal, no lock


def _disk_full(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_injected_disk_full_gives_one_line_and_loses_nothing(session_path, monkeypatch):
    s = Session.open(session_path)
    s.save_result("S0", fake_result(s.settings_for("S0"), 1.0))
    s.set_pick("S0", status="accepted")
    monkeypatch.setattr(os, "write", _disk_full)
    monkeypatch.setattr(os, "posix_fallocate", _disk_full)
    for attempt in (lambda: s.save_result("S1", fake_result(s.settings_for("S1"), 2.0)),
                    lambda: s.set_pick("S1", status="accepted"),
                    s.compact, s.close):
        with pytest.raises(WakelineError) as info:
            attempt()
        text = str(info.value)
        assert "\n" not in text and "No space left on device" in text and "s.h5" in text
    monkeypatch.undo()
    assert sorted(p.name for p in session_path.parent.iterdir()) == [
        "s.h5", "s.h5.journal", "s.h5.pending", "src"]  # no temporary file, no lock
    with Session.open(session_path) as again:
        assert again["S0"].pick.status == "accepted" and again["S1"].state == "unprocessed"
        assert again.load_result("S0").separation.upper.angle_deg == 1.0
    assert not session_path.with_name("s.h5.journal").exists()


def test_a_table_on_a_full_disk_names_its_file_and_keeps_the_earlier_one(session_path,
                                                                         tmp_path, monkeypatch):
    # the window once said only "[Errno 28] No space left on device"
    from core.store import write_table_csv
    from core.store.files import writing

    out = tmp_path / "t.csv"
    out.write_text("the earlier table\n")

    def full(fh, *args):  # a write to the open file, which names no file
        fh.write("shot,")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr("core.store.table.write_csv_rows", full)
    with Session.open(session_path, writable=False) as s, pytest.raises(
            WakelineError) as info, writing(out):
        write_table_csv(s, out)
    assert str(info.value) == f"{out}: cannot write here (the disk is full)"
    assert out.read_text() == "the earlier table\n"
