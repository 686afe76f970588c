"""A mark dragged while the store cannot save (a full disk, an unwritable journal) goes back to
where the store keeps the pick, and the window says the edit was not saved (pytest-qt)."""

from __future__ import annotations

import errno
import os

import pytest
from test_window import _drag, _open, _upper_mark_drag

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


@pytest.mark.parametrize(("code", "where"), [(errno.ENOSPC, "write"), (errno.EACCES, "write"),
                                             (errno.EIO, "store")],
                         ids=["disk-full", "unwritable", "any-os-error"])
def test_a_drag_the_store_refused_puts_the_mark_back(main_window, make_session, qtbot,
                                                     monkeypatch, code, where):
    window = _open(main_window, qtbot, make_session(2), show=True)
    canvas = window.canvas
    proposal, start, end = _upper_mark_drag(window, "s01", 20.0)

    def refuse_writes(*_args, **_kwargs):
        raise OSError(code, os.strerror(code))

    def writes_fail_from_now():
        assert canvas.mark_angle("upper") != pytest.approx(proposal, abs=1.0)
        if where == "write":  # the store's journal cannot be written
            monkeypatch.setattr(os, "write", refuse_writes)
        else:  # any OSError out of the store (a path the store does not turn into one line)
            monkeypatch.setattr(window.model.session, "set_picks", refuse_writes)

    _drag(qtbot, canvas.graphics.viewport(), start, end, during=writes_fail_from_now)
    monkeypatch.undo()
    assert canvas.mark_angle("upper") == pytest.approx(proposal)  # back where the store has it
    assert window.model.record("s01").pick.status == "to review"
    assert window.undo_stack.count() == 0
    assert window.last_problem.startswith("Edit not saved: ")
    assert os.strerror(code) in window.last_problem and "every edit" not in window.last_problem
    window.close()


def test_a_save_that_finds_a_lost_result_says_which_shot_and_what_to_do(main_window,
                                                                       make_session, qtbot):
    from conftest import analytic_result, synthetic_frames

    window = _open(main_window, qtbot, make_session(2))
    session = window.model.session
    truth = synthetic_frames(0)[2]
    session.save_result("s01", analytic_result(truth, session.settings_for("s01")))
    for file in session.path.with_name(session.path.name + ".pending").iterdir():
        file.unlink()  # the new result's arrays are lost (as a disk error would lose them)
    window.save_session()
    assert window.last_problem.startswith("Save: The session was saved without these")
    assert "shot s01: stored result lost" in window.last_problem
    assert "process the shot again" in window.last_problem
    assert window.model.record("s01").state == "failed"
    assert window.model.record("s02").state == "processed"
    window.close()
