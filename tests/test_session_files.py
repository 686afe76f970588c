"""The files of a session on disk: one session however it is reached (symlinks), readers that
never mix two snapshots, a shared group folder (modes kept), read-only files left alone."""

from __future__ import annotations

import errno
import json
import os
import stat

import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.store import Session, SessionLocked, import_folder


@pytest.fixture
def session_path(tmp_path):
    """A closed session of three referenced shots, none processed."""
    report = import_folder(write_shot_folder(tmp_path / "src", 3), tmp_path / "s.h5")
    assert report.problems == []
    return tmp_path / "s.h5"


def test_a_session_opened_through_a_symlink_is_the_one_session(session_path, tmp_path):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    link = elsewhere / "link.h5"
    link.symlink_to(session_path)
    s = Session.open(link)
    s.set_pick("S0", status="accepted")
    with pytest.raises(SessionLocked):  # the real path is locked out too
        Session.open(session_path)
    assert sorted(p.name for p in elsewhere.iterdir()) == ["link.h5"]  # no lock, no journal here
    assert session_path.with_name("s.h5.journal").exists()
    s.close()
    assert link.is_symlink() and link.resolve() == session_path
    with Session.open(session_path, writable=False) as again:
        assert again["S0"].pick.status == "accepted"
    with Session.open(link) as again:  # and the other way round
        assert again["S0"].pick.status == "accepted"
        with pytest.raises(SessionLocked):
            Session.open(session_path)


def test_a_reader_never_pairs_its_snapshot_with_a_newer_one(session_path):
    with Session.open(session_path) as writer:
        writer.save_result("S0", fake_result(writer.settings_for("S0"), 5.0, shape=(6, 8)))
        writer.set_pick("S0", status="accepted")
    reader = Session.open(session_path, writable=False)
    with Session.open(session_path) as writer:  # closing compacts: S.h5 is replaced
        writer.save_result("S0", fake_result(writer.settings_for("S0"), 9.0, shape=(20, 30)))
        writer.set_pick("S0", status="adjusted", upper_deg=9.5)
    assert reader["S0"].proposed_deg("upper") == 5.0  # what it read stays as it was
    with pytest.raises(WakelineError, match=r"s\.h5: changed on disk .*; reopen the session"):
        reader.load_result("S0")
    with pytest.raises(WakelineError, match="reopen the session"):
        reader.history("S0")
    reader.close()
    with Session.open(session_path, writable=False) as again:
        assert again.load_result("S0").field.dx_px.shape == (20, 30)
        # the proposal accepted moved (5 -> 9 deg): back to review, by wakeline, then adjusted
        assert [(p.status, p.who == "wakeline") for p in again.history("S0")] == [
            ("accepted", False), ("to review", True), ("adjusted", False)]


# -- a shared group folder and read-only files ---------------------------------------------------


def _other_group(path) -> int | None:
    """A group the test may give a file (any as root; else one of ours it does not have)."""
    if os.geteuid() == 0:
        return path.stat().st_gid + 4242
    others = [g for g in os.getgroups() if g != path.stat().st_gid]
    return others[0] if others else None


def test_saving_keeps_the_session_mode_and_group_and_companions_follow(session_path):
    os.chmod(session_path, 0o664)
    group = _other_group(session_path)
    if group is not None:
        os.chown(session_path, -1, group)
    group = session_path.stat().st_gid
    with Session.open(session_path) as s:
        s.save_result("S0", fake_result(s.settings_for("S0")))  # a pending file
        s.set_pick("S0", status="accepted")
        journal, pending = session_path.with_name("s.h5.journal"), s._pending_dir
        for path in (journal, pending, *pending.iterdir()):
            assert path.stat().st_gid == group, path
        assert stat.S_IMODE(journal.stat().st_mode) == 0o664  # the group may go on editing
        assert pending.stat().st_mode & 0o070 == 0o070
    info = session_path.stat()
    assert stat.S_IMODE(info.st_mode) == 0o664 and info.st_gid == group


def test_a_read_only_session_file_is_not_replaced(session_path):
    os.chmod(session_path, 0o444)
    before = session_path.read_bytes()
    with pytest.raises(SessionLocked, match=r"s\.h5: the session file is read-only .*the "
                                            "window opens it read-only"):
        Session.open(session_path)
    assert not session_path.with_name("s.h5.lock").exists()
    with Session.open(session_path, writable=False) as s:
        assert list(s) == ["S0", "S1", "S2"]
    assert session_path.read_bytes() == before
    assert stat.S_IMODE(session_path.stat().st_mode) == 0o444


def test_a_file_this_user_may_not_write_despite_its_mode_is_named_so(session_path, monkeypatch):
    # a writable mode on a file the user still may not write (an immutable file, a share
    # mounted read-only for this user, an access list): the message must not quote the mode
    real_access = os.access

    def no_write(path, mode, *args, **kwargs):
        if mode & os.W_OK and os.fspath(path) == os.fspath(session_path):
            return False
        return real_access(path, mode, *args, **kwargs)

    monkeypatch.setattr(os, "access", no_write)
    with pytest.raises(SessionLocked, match=r"read-only \(this user may not write it\)") as err:
        Session.open(session_path)
    assert "mode" not in str(err.value)
    assert not session_path.with_name("s.h5.lock").exists()


# -- clearer errors at open -----------------------------------------------------------------------


def test_a_full_disk_at_open_names_the_lock_and_leaves_nothing(session_path, monkeypatch):
    def disk_full(*_args):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "write", disk_full)
    with pytest.raises(WakelineError, match=r"s\.h5\.lock: .*No space left on device"):
        Session.open(session_path)
    monkeypatch.undo()
    assert sorted(p.name for p in session_path.parent.iterdir()) == ["s.h5", "src"]


def test_a_lock_of_another_host_names_the_lock_file(session_path):
    lock = session_path.with_name("s.h5.lock")
    lock.write_text(json.dumps({"host": "elsewhere.invalid", "pid": 1, "since": "x"}))
    with pytest.raises(SessionLocked, match=r"elsewhere\.invalid.*delete .*s\.h5\.lock"):
        Session.open(session_path)


@pytest.mark.parametrize(("content", "message"), [
    (b"hello\n", "not an HDF5 file"),
    (b"\x89HDF\r", "damaged or truncated session file"),
], ids=["text", "cut-signature"])
def test_a_short_file_is_named_for_what_it_is(session_path, content, message):
    session_path.write_bytes(content)
    with pytest.raises(WakelineError, match=message):
        Session.open(session_path, writable=False)


@pytest.mark.parametrize("exists", [True, False], ids=["existing session", "new session"])
def test_a_folder_not_writable_gets_advice_that_fits(tmp_path, monkeypatch, exists):
    from core.store.lock import Lock, SessionReadOnly

    session = tmp_path / "s.h5"
    if exists:
        session.write_bytes(b"")

    def refused(self, me):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Lock, "_try_create", refused)
    advice = ("copy the session to a folder you may write in to edit it; the window opens it "
              "read-only, and table, sheet and conditions only read it" if exists
              else "choose a folder you may write in")
    with pytest.raises(SessionReadOnly, match=f"its folder is not writable; {advice}$"):
        Lock(session).acquire()


@pytest.mark.parametrize("content", ["[1, 2]", '"text"', "", "not json"])
def test_a_lock_file_naming_no_holder_is_taken_over(tmp_path, content):
    # a JSON list once gave an internal error naming no file
    from core.store.lock import Lock

    session = tmp_path / "s.h5"
    (tmp_path / "s.h5.lock").write_text(content)
    lock = Lock(session)
    lock.acquire()
    assert lock.held and '"pid"' in (tmp_path / "s.h5.lock").read_text()
    lock.release()


def test_a_folder_where_the_lock_goes_is_named_and_left_alone(tmp_path):
    from core import WakelineError
    from core.store.lock import Lock

    (tmp_path / "s.h5.lock").mkdir()
    with pytest.raises(WakelineError, match=r"s.h5.lock: a folder stands where"):
        Lock(tmp_path / "s.h5").acquire()
    assert (tmp_path / "s.h5.lock").is_dir()


def test_a_session_file_gone_while_open_is_said_and_its_edits_stay_in_the_journal(
        session_path, tmp_path):
    # saving then raised a TypeError (no old file to copy the results from)
    s = Session.open(session_path)
    s.set_pick("S0", status="accepted")
    away = tmp_path / "moved.h5"
    session_path.rename(away)
    with pytest.raises(WakelineError, match=r"s.h5: the session file is gone .* kept in "
                                            r"s.h5.journal: put the file back"):
        s.compact()
    with pytest.raises(WakelineError, match="the session file is gone"):
        s.close()
    away.rename(session_path)
    with Session.open(session_path, writable=False) as again:
        assert again["S0"].pick.status == "accepted"


def test_a_save_refused_for_want_of_permission_does_not_say_free_some_space(session_path,
                                                                          monkeypatch):
    s = Session.open(session_path)

    def refused(*args, **kwargs):
        raise PermissionError(errno.EACCES, "Permission denied", str(session_path) + ".journal")

    monkeypatch.setattr(os, "write", refused)
    with pytest.raises(WakelineError) as info:
        s.set_pick("S0", status="accepted")
    monkeypatch.undo()
    assert "free some space" not in str(info.value)
    assert str(info.value).endswith("make its folder writable again (or copy the session "
                                    "elsewhere) and try again")
    s.close()


def test_a_lock_that_cannot_be_removed_at_close_is_left_for_the_next_opener(session_path,
                                                                            monkeypatch):
    from pathlib import Path

    s = Session.open(session_path)
    real = Path.unlink

    def refused(self, missing_ok=False):
        if self.name.endswith(".lock"):
            raise PermissionError(13, "Permission denied", str(self))
        return real(self, missing_ok=missing_ok)

    monkeypatch.setattr(Path, "unlink", refused)
    s.close()  # no traceback at close
    monkeypatch.undo()
    lock = session_path.with_name("s.h5.lock")
    holder = json.loads(lock.read_text())
    assert holder["pid"] == os.getpid()
    lock.write_text(json.dumps({**holder, "pid": 2**31 - 2}))  # as once this process is gone
    with Session.open(session_path) as again:  # taken over as stale
        assert list(again)


def test_a_file_where_the_pending_results_go_is_named_and_no_result_is_lost(session_path):
    # its results were taken for lost at the next save ("stored result lost ... errno 20")
    s = Session.open(session_path)
    s.save_result("S0", fake_result(s.settings_for("S0"), 1.0))
    pending = session_path.with_name("s.h5.pending")
    aside = session_path.with_name("aside")
    pending.rename(aside)
    pending.write_text("not a folder")
    with pytest.raises(WakelineError, match=r"s.h5.pending: a file stands where the session "
                                            r"keeps its new results"):
        s.compact()
    pending.unlink()
    aside.rename(pending)
    s.close()
    with Session.open(session_path, writable=False) as again:
        assert again["S0"].state == "processed"
        assert again.load_result("S0").separation.upper.angle_deg == 1.0
