"""The files of a session on disk: one session however it is reached (symlinks), readers that
never mix two snapshots, a shared group folder (modes kept), read-only files left alone."""

from __future__ import annotations

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
        assert len(again.history("S0")) == 2
