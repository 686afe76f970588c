"""A mark dragged while the store cannot save (a full disk, an unwritable journal) goes back to
where the store keeps the pick, and the window says the edit was not saved (pytest-qt)."""

from __future__ import annotations

import errno
import os

import pytest
from test_window import _drag, _open, _viewport_point

from core.geometry import point_at_angle

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


@pytest.mark.parametrize(("code", "where"), [(errno.ENOSPC, "write"), (errno.EACCES, "write"),
                                             (errno.EIO, "store")],
                         ids=["disk-full", "unwritable", "any-os-error"])
def test_a_drag_the_store_refused_puts_the_mark_back(main_window, make_session, qtbot,
                                                     monkeypatch, code, where):
    window = _open(main_window, qtbot, make_session(2), show=True)
    canvas = window.canvas
    result = window.model.result("s01")
    proposal = window.model.record("s01").proposed_deg("upper")
    handle = canvas.handle("upper")
    start = _viewport_point(canvas, handle.pos().x(), handle.pos().y())
    end = _viewport_point(canvas, *point_at_angle(result.ball_a.center_px,
                                                  result.ball_a.radius_px,
                                                  result.flight.direction_deg, "upper",
                                                  proposal + 20.0))

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
