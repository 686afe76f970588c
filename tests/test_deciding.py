"""Deciding shots in the window (issue 14, item 2): on to the next shot to review after a
decision, `A` on moved marks asks, Ctrl+Return leaves the note, several shots decided as one undo
step, the usual unusable reasons offered."""

from __future__ import annotations

import pytest
from conftest import answer_dialog, click_button
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QApplication
from test_window import _key, _open

from app.review.text import OTHER_REASON, UNUSABLE_REASONS
from core.store import Session

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _statuses(window, ids=("s01", "s02", "s03", "s04")):
    return [str(window.model.record(s).pick.status) for s in ids]


def test_a_decision_goes_on_to_the_next_shot_still_to_review(main_window, make_session, qtbot):
    path = make_session(5)
    with Session.open(path) as session:
        session.set_pick("s03", status="accepted")  # decided already: skipped
    window = _open(main_window, qtbot, path, show=True)
    assert window.act_advance.isChecked()  # on by default
    window.shot_list.view.setFocus()
    _key(qtbot, window, Qt.Key.Key_A)
    assert window.model.current_id == "s02"
    _key(qtbot, window, Qt.Key.Key_D)
    assert window.model.current_id == "s04"  # s03 was decided
    _key(qtbot, window, Qt.Key.Key_R)  # back to review stays on the shot
    assert window.model.current_id == "s04"
    window.shot_list.status_filter.setCurrentText("to review")  # deciding hides the shot
    _key(qtbot, window, Qt.Key.Key_A)
    assert window.model.current_id == "s05"
    _key(qtbot, window, Qt.Key.Key_A)
    assert window.model.current_id == "s05"
    assert "No shot left to review" in window.statusBar().currentMessage()
    window.act_advance.trigger()  # off, and kept for the next window
    assert window.settings.value("review/advance_after_decision") in (False, "false")


def test_accept_on_moved_marks_asks_and_keeps_them_unless_told(main_window, make_session, qtbot):
    window = _open(main_window, qtbot, make_session(2), show=True)
    window.act_advance.setChecked(False)
    proposal = window.model.record("s01").proposed_deg("upper")
    window.nudge("upper", 2.0)
    assert window.model.record("s01").pick.status == "adjusted"
    answer_dialog(click_button("Keep my marks"))
    window.set_status("accepted")
    kept = window.model.record("s01")
    assert kept.pick.status == "adjusted" and kept.final_deg("upper") == pytest.approx(
        proposal + 2.0)
    assert "Kept the marks you moved" in window.statusBar().currentMessage()
    answer_dialog(click_button("Accept the proposal"))
    window.set_status("accepted")
    assert window.model.record("s01").final_deg("upper") == pytest.approx(proposal)
    window.undo_stack.undo()  # the marks come back
    assert window.model.record("s01").final_deg("upper") == pytest.approx(proposal + 2.0)
    window.model.set_current("s02")
    window.set_status("adjusted")  # marks where the machine put them: nothing to lose
    window.set_status("accepted")  # no question asked (a dialog would block here)
    assert window.model.record("s02").pick.status == "accepted"


def test_ctrl_return_leaves_the_note_so_the_next_key_is_a_review_key(main_window, make_session,
                                                                      qtbot):
    window = _open(main_window, qtbot, make_session(3), show=True)
    note = window.readout.note
    note.setFocus()
    qtbot.keyClicks(note, "photo")
    qtbot.keyClick(note, Qt.Key.Key_Return, Qt.KeyboardModifier.ControlModifier)
    assert QApplication.focusWidget() is window.shot_list.view
    _key(qtbot, window, Qt.Key.Key_N)  # the next shot, not an "n" in the note
    assert window.model.record("s01").pick.note == "photo"
    assert window.model.current_id == "s02"


def test_several_selected_shots_are_decided_as_one_undo_step(main_window, make_session, qtbot):
    path = make_session(5)
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(False)
    window.model.set_current("s04")
    window.nudge("lower", -1.0)  # s04 adjusted by hand
    window.shot_list.select_ids(["s01", "s02", "s03"])
    assert window.decision_targets() == ["s01", "s02", "s03"]
    assert "3 selected" in window.shot_list.count_label.text()
    _key(qtbot, window, Qt.Key.Key_A)
    assert _statuses(window) == ["accepted", "accepted", "accepted", "adjusted"]
    assert window.undo_stack.count() == 2 and window.undo_stack.undoText() == \
        "Mark 3 shots accepted"
    window.undo_stack.undo()
    assert _statuses(window) == ["to review", "to review", "to review", "adjusted"]
    window.undo_stack.redo()
    assert _statuses(window) == ["accepted", "accepted", "accepted", "adjusted"]

    window.shot_list.select_ids(["s03", "s04", "s05"])  # s04 has moved marks: asked once
    answer_dialog(click_button("Keep the 1 adjusted"))
    window.set_status("accepted")
    assert _statuses(window, ("s03", "s04", "s05")) == ["accepted", "adjusted", "accepted"]
    assert "1 of 3 selected shots marked accepted" in window.statusBar().currentMessage()

    window.shot_list.select_ids(["s01", "s02"])
    answer_dialog(lambda d: (d.setTextValue("out of focus"), d.accept()))
    window.set_status("unusable")
    reasons = {s: window.model.record(s).pick.reason for s in ("s01", "s02")}
    assert reasons == {"s01": "out of focus", "s02": "out of focus"}
    window.close()
    with Session.open(path, writable=False) as session:
        assert [session[s].pick.status for s in ("s01", "s02")] == ["unusable", "unusable"]
        assert len(session.history("s01")) == 4  # accepted, undone, redone, unusable


def test_unusable_offers_the_usual_reasons_and_free_text(main_window, make_session, qtbot):
    window = _open(main_window, qtbot, make_session(2), show=True)
    window.act_advance.setChecked(False)
    offered = {}

    def choose_other(dialog):
        offered["items"] = dialog.comboBoxItems()
        offered["editable"] = dialog.isComboBoxEditable()
        dialog.setTextValue(OTHER_REASON)
        answer_dialog(lambda d: (d.setTextValue("smoke from the launcher"), d.accept()))
        dialog.accept()

    answer_dialog(choose_other)
    window.set_status("unusable")
    assert offered["items"] == [*UNUSABLE_REASONS, OTHER_REASON] and offered["editable"]
    assert set(UNUSABLE_REASONS) == {"seeding too sparse", "ball out of the sheet",
                                     "laser misfire", "out of focus"}
    assert window.model.record("s01").pick.reason == "smoke from the launcher"

    def keep_typing(dialog):  # the shot's own reason is offered first the next time
        offered["again"] = dialog.comboBoxItems()[0]
        dialog.setTextValue("ball out of the sheet, upper half")
        dialog.accept()

    answer_dialog(keep_typing)
    window.set_status("unusable")
    assert offered["again"] == "smoke from the launcher"
    assert window.model.record("s01").pick.reason == "ball out of the sheet, upper half"
    answer_dialog(lambda d: d.reject())  # cancelled: nothing changes
    window.model.set_current("s02")
    window.set_status("unusable")
    assert window.model.record("s02").pick.status == "to review"


def test_a_decision_on_many_shots_is_one_write_all_or_nothing(make_session):
    from core import WakelineError

    path = make_session(3)
    with Session.open(path) as session:
        journal = session.path.with_name(session.path.name + ".journal")
        lines = journal.read_text().count("\n") if journal.exists() else 0
        with pytest.raises(WakelineError, match="s02: marking a shot unusable needs a reason"):
            session.set_picks({"s01": {"status": "accepted"}, "s02": {"status": "unusable"}})
        assert [session[s].pick.status for s in ("s01", "s02")] == ["to review", "to review"]
        picks = session.set_picks({"s01": {"status": "accepted"},
                                   "s02": {"status": "unusable", "reason": "laser misfire"}},
                                  who="ann")
        assert [p.status for p in picks.values()] == ["accepted", "unusable"]
        assert journal.read_text().count("\n") == lines + 2
    with Session.open(path, writable=False) as session:
        assert [session[s].pick.who for s in ("s01", "s02", "s03")] == ["ann", "ann", ""]


def test_undo_puts_back_who_decided_and_when_and_redo_keeps_the_edit_s(main_window, make_session,
                                                                       qtbot):
    path = make_session(2)
    with Session.open(path) as session:
        session.set_pick("s01", status="adjusted", upper_deg=3.0, who="another analyst")
        before = session["s01"].pick
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(False)
    answer_dialog(click_button("Accept the proposal"))
    window.set_status("accepted")
    accepted = window.model.record("s01").pick
    assert accepted.status == "accepted" and accepted.who != "another analyst"
    window.undo_stack.undo()
    undone = window.model.record("s01").pick
    assert (undone.status, undone.upper_deg, undone.who, undone.when) == (
        "adjusted", 3.0, "another analyst", before.when)
    window.undo_stack.redo()
    redone = window.model.record("s01").pick
    assert (redone.status, redone.who, redone.when) == ("accepted", accepted.who, accepted.when)
    window.close()
    with Session.open(path, writable=False) as session:  # as saved, with every step in the history
        assert (session["s01"].pick.who, session["s01"].pick.when) == (accepted.who, accepted.when)
        assert [p.status for p in session.history("s01")] == [
            "adjusted", "accepted", "adjusted", "accepted"]


def test_an_edit_made_before_the_shot_was_measured_again_is_not_undone_nor_redone(
        main_window, make_session, qtbot):
    from dataclasses import replace

    path = make_session(2)
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(False)
    window.set_status("accepted")
    assert window.model.record("s01").pick.status == "accepted"
    # the shot is measured again (a processing run) and its proposal moves: back to review
    result = window.model.result("s01")
    upper = replace(result.separation.upper, angle_deg=result.separation.upper.angle_deg + 2.0)
    moved = replace(result, separation=replace(result.separation, upper=upper))
    assert "back to review" in window.model.keep_result("s01", moved, measured=False)
    window.undo_stack.undo()  # would put back "to review" on numbers nobody looked at...
    window.undo_stack.redo()  # ...and redo would accept them: both refused, with the reason
    pick = window.model.record("s01").pick
    assert (pick.status, pick.who) == ("to review", "wakeline")
    assert "s01 was measured again since this edit" in window.statusBar().currentMessage()
