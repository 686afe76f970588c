"""The files of a session on disk: one session however it is reached (symlinks), readers that
never mix two snapshots, a shared group folder (modes kept), read-only files left alone."""

from __future__ import annotations

import pytest
from data.session_helpers import write_shot_folder

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
