"""What an edit shows the analyst: an undo brings its shot into view, a mark cannot be dragged
onto the other side, a mark moved on a decided shot says what became of the decision."""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt
from test_window import _drag, _key, _open, _upper_mark_drag, _viewport_point

from app.qt.canvas_items import mark_circle
from core.geometry import point_at_angle

# The offscreen platform warns that it cannot propagate size hints; harmless (DEVELOPERS.md).
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _reviewing(main_window, qtbot, path, advance: bool = False):
    """The window on ``path``, shown, the list holding the keys; after a decision it moves on
    to the next shot to review only with ``advance``."""
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(advance)
    window.shot_list.view.setFocus()
    return window


def test_undo_and_redo_bring_the_shot_they_change_into_view(main_window, make_session, qtbot):
    path = make_session(3)
    window = _reviewing(main_window, qtbot, path, advance=True)
    _key(qtbot, window, Qt.Key.Key_A)  # s01 accepted; the window moves on to s02
    assert window.model.current_id == "s02"
    _key(qtbot, window, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert window.model.record("s01").pick.status == "to review"
    assert window.model.current_id == "s01"
    assert window.statusBar().currentMessage().startswith("Undone: ")
    window.model.set_current("s03")
    _key(qtbot, window, Qt.Key.Key_Y, Qt.KeyboardModifier.ControlModifier)
    assert window.model.record("s01").pick.status == "accepted"
    assert window.model.current_id == "s01"
    assert window.statusBar().currentMessage().startswith("Redone: ")


def test_an_undo_on_a_shot_the_filter_hides_says_so(main_window, make_session, qtbot):
    path = make_session(3)
    window = _reviewing(main_window, qtbot, path)
    _key(qtbot, window, Qt.Key.Key_A)  # s01 accepted
    window.shot_list.proxy.set_text("s02")
    window.model.set_current("s02")
    window.undo_stack.undo()
    assert window.model.record("s01").pick.status == "to review"
    assert window.model.current_id == "s02"
    assert "the shot list's filter hides it" in window.statusBar().currentMessage()


def test_a_mark_dragged_round_the_back_stops_at_the_rear_stagnation_point(main_window,
                                                                         make_session, qtbot):
    path = make_session(2)
    window = _open(main_window, qtbot, path, show=True)
    canvas = window.canvas
    result = window.model.result("s01")
    _, start, _ = _upper_mark_drag(window, "s01", 0.0)
    # 140 deg on the upper side lies on the lower half, behind the ball
    beyond = point_at_angle(*mark_circle(result), result.flight.direction_deg, "upper", 140.0)
    _drag(qtbot, canvas.graphics.viewport(), start, _viewport_point(canvas, *beyond))
    adjusted = window.model.record("s01")
    assert adjusted.pick.status == "adjusted"
    assert adjusted.final_deg("upper") == pytest.approx(90.0)


def test_moving_a_mark_on_an_accepted_shot_says_it_is_now_adjusted(main_window, make_session,
                                                                   qtbot):
    path = make_session(2)
    window = _reviewing(main_window, qtbot, path)
    _key(qtbot, window, Qt.Key.Key_A)
    _key(qtbot, window, Qt.Key.Key_E)
    assert window.model.record("s01").pick.status == "adjusted"
    said = window.statusBar().currentMessage()
    assert "was accepted" in said and "Ctrl+Z" in said


def test_an_unusable_shot_says_so_over_its_picture(main_window, make_session, qtbot):
    from conftest import answer_dialog
    from test_window import reactivate

    path = make_session(2)
    window = _reviewing(main_window, qtbot, path)
    answer_dialog(lambda d: (d.setTextValue("laser sheet misfired"), d.accept()))
    _key(qtbot, window, Qt.Key.Key_U)
    reactivate(qtbot, window)
    assert window.model.record("s01").pick.status == "unusable"
    assert window.canvas.message.isVisibleTo(window)
    assert "Unusable: laser sheet misfired" in window.canvas.message.text()
    _key(qtbot, window, Qt.Key.Key_R)  # back to review: the note goes
    assert window.model.record("s01").pick.status == "to review"
    assert not window.canvas.message.isVisibleTo(window)


def test_the_unusable_question_has_no_reason_chosen_beforehand(main_window, make_session,
                                                               qtbot):
    from conftest import answer_dialog
    from test_window import reactivate

    path = make_session(2)
    window = _reviewing(main_window, qtbot, path)
    shown = {}
    answer_dialog(lambda d: (shown.update(text=d.textValue()), d.accept()))  # Enter at once
    _key(qtbot, window, Qt.Key.Key_U)
    reactivate(qtbot, window)
    assert shown["text"] == ""
    assert window.model.record("s01").pick.status == "to review"
    assert "No reason given" in window.statusBar().currentMessage()


def test_escape_in_the_filter_gives_the_keys_back_to_the_list(main_window, make_session, qtbot):
    from PySide6.QtWidgets import QApplication

    window = _open(main_window, qtbot, make_session(2), show=True)
    field = window.shot_list.text_filter
    field.setFocus()
    qtbot.keyClicks(field, "s0")
    qtbot.keyClick(field, Qt.Key.Key_Escape)
    assert QApplication.focusWidget() is window.shot_list.view
    assert field.text() == "s0"  # the filter stays


def test_stepping_past_the_end_of_the_list_says_so(main_window, make_session, qtbot):
    window = _open(main_window, qtbot, make_session(2), show=True)
    window.model.set_current("s02")
    window.act_next.trigger()
    assert window.model.current_id == "s02"
    assert window.statusBar().currentMessage() == "Last shot of the list."
    window.act_prev.trigger()
    assert window.model.current_id == "s01"
    window.act_prev.trigger()
    assert window.statusBar().currentMessage() == "First shot of the list."


def test_a_nudged_mark_stops_at_the_stagnation_point_too(main_window, make_session, qtbot):
    window = _reviewing(main_window, qtbot, make_session(2))
    for _ in range(250):  # 0.5 deg a press, far past +90
        window.nudge("upper", 0.5)
    assert window.model.record("s01").final_deg("upper") == pytest.approx(90.0)


def test_the_unusable_note_offers_no_key_a_read_only_session_cannot_take():
    from app.qt.window_review import decision_note
    from core.store import Pick, ShotRecord

    record = ShotRecord("s1", {}, pick=Pick(status="unusable", reason="fog"))
    assert decision_note(record) == "Unusable: fog — R puts it back to review."
    assert decision_note(record, read_only=True) == "Unusable: fog."
    assert decision_note(ShotRecord("s2", {}, pick=Pick())) == ""
