"""Nothing the analyst did is lost in the window: notes typed while the session closes or a
save fails, refused undo steps, a last save that fails at close, a background job's failure."""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt
from test_window import _open

from core.store import Session

# The offscreen platform warns that it cannot propagate size hints; harmless (DEVELOPERS.md).
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def test_a_note_being_typed_survives_a_status_key_and_a_shot_change(main_window, make_session,
                                                                     qtbot):
    path = make_session(3)
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(False)  # the decision must leave the shot where it is
    first = window.model.current_id
    window.readout.note.setFocus()
    qtbot.keyClicks(window.readout.note, "seeding thin on the lower side")
    window.set_status("accepted")  # an edit refreshes the shot while the note is typed
    assert window.readout.note.toPlainText() == "seeding thin on the lower side"
    second = window.shot_list.visible_ids()[1]
    window.model.set_current(second)  # moving on saves the note for the shot it was typed on
    assert window.model.record(first).pick.note == "seeding thin on the lower side"
    assert window.model.record(first).pick.status == "accepted"
    assert window.readout.note.toPlainText() == window.model.record(second).pick.note
    window.close()


@pytest.mark.parametrize("leave", ["close the session", "open another"])
def test_a_note_being_typed_is_saved_when_its_session_closes_or_gives_way(
        main_window, make_session, qtbot, tmp_path, leave):
    # Ctrl+F4 or a session dropped on the window does not leave the field first: the note
    # was lost without a word
    path = make_session(2)
    window = _open(main_window, qtbot, path, show=True)
    shot_id = window.model.current_id
    window.readout.note.setFocus()
    qtbot.keyClicks(window.readout.note, "laser sheet clipped the lower side")
    if leave == "close the session":
        window.close_session()
    else:
        assert window.open_session(make_session(2, name="other"))
    window.close()
    with Session.open(path, writable=False) as session:
        assert session[shot_id].pick.note == "laser sheet clipped the lower side"


def test_a_note_whose_save_is_refused_stays_in_the_field(main_window, make_session, qtbot,
                                                         monkeypatch):
    from core import WakelineError

    window = _open(main_window, qtbot, make_session(2), show=True)
    shot_id = window.model.current_id

    def refuse(*_args, **_kwargs):
        raise WakelineError("demo.h5: could not save the edit (the disk is full)")

    monkeypatch.setattr(window.model.session, "set_picks", refuse)
    window.readout.note.setFocus()
    qtbot.keyClicks(window.readout.note, "fog too thin")
    qtbot.keyClick(window.readout.note, Qt.Key.Key_Escape)
    assert "disk is full" in window.last_problem
    assert window.readout.note.toPlainText() == "fog too thin"  # to try again
    monkeypatch.undo()
    window.readout.note.setFocus()
    qtbot.keyClick(window.readout.note, Qt.Key.Key_Escape)  # space freed: leaving saves it
    assert window.model.record(shot_id).pick.note == "fog too thin"
    window.close()


def test_a_read_only_session_s_note_field_takes_no_typing(main_window, make_session, qtbot):
    window = main_window()
    qtbot.addWidget(window)
    assert window.open_session(make_session(2), writable=False)
    assert window.readout.note.isReadOnly()
    assert "read-only" in window.readout.note.placeholderText()
    window.close()


def test_a_refused_undo_is_reported_not_raised(main_window, make_session, qtbot, monkeypatch):
    from core import WakelineError

    window = _open(main_window, qtbot, make_session(2), show=True)
    shot_id = window.model.current_id
    window.set_status("accepted")

    def refuse(*_args, **_kwargs):
        raise WakelineError("demo.h5: the disk is full")

    monkeypatch.setattr(window.model.session, "set_picks", refuse)
    window.undo_stack.undo()
    assert "disk is full" in window.last_problem
    assert window.last_problem.endswith("(not undone: the step leaves the undo list; make the "
                                        "change by hand once it can be saved)")
    assert window.undo_stack.count() == 0
    assert window.model.record(shot_id).pick.status == "accepted"  # the views show the truth
    monkeypatch.undo()
    window.close()


def test_a_last_save_that_fails_at_close_is_told_not_closed_with_the_window(
        main_window, make_session, qtbot, monkeypatch, capsys):
    # its box was opened and closed again by the closing window: only the log had it
    from core import WakelineError

    window = _open(main_window, qtbot, make_session(2), show=True)
    window.set_status("accepted")

    def full():
        raise WakelineError("review.h5: could not save the session file (No space left on "
                            "device); every change is kept in review.h5.journal")

    monkeypatch.setattr(window.model.session, "compact", full)
    told = []
    window.tell_at_exit = lambda title, text: told.append((title, text))
    window.close()
    assert told and told[0][0] == "Closing the session" and "review.h5.journal" in told[0][1]
    type(window).tell_at_exit(window, *told[0])  # no screen here: standard error, no box
    assert capsys.readouterr().err.startswith("wakeline: Closing the session: review.h5: could")


def test_a_background_job_s_unexpected_failure_is_told_in_the_system_s_words(qtbot):
    # worker processes that could not start once read "BrokenPipeError: [Errno 32] Broken pipe"
    import errno

    from app.qt.workers import BackgroundJob

    def fails(_report, _should_stop):
        raise BrokenPipeError(errno.EPIPE, "Broken pipe")

    job = BackgroundJob(fails)
    with qtbot.waitSignal(job.finished, timeout=10_000) as blocker:
        job.start()
    assert blocker.args[0].error == "broken pipe (details in the log)"
