"""Every number follows the analyst's edits, and the ball and flight can be corrected: the wake
state of the final angles in the window, the table and the sheet; the circles moved and the
flight set by hand, measured again, undone and kept through processing (pytest-qt)."""

from __future__ import annotations

import csv

import pytest
from conftest import answer_dialog
from PySide6.QtCore import Qt
from test_window import _drag, _key, _open, _viewport_point

from app.qt.canvas_items import mark_circle
from app.qt.shot_list import COL_STATUS
from app.review.text import angle_text
from core.geometry import point_at_angle
from core.shot import BY_ANALYST
from core.store import Session

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _sheet_text(session_path, out) -> str:
    import re
    import unicodedata

    from pypdf import PdfReader

    from app.sheet import make_sheet

    with Session.open(session_path, writable=False) as session:
        make_sheet(session, out, shot_ids=["s01"], per_page=1)
    text = " ".join(p.extract_text() for p in PdfReader(str(out)).pages)
    # the PDF sets "ff", "fi", "fl" as ligatures: read them as their letters
    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", text))


def _table_row(window, out, shot_id: str) -> dict:
    window.model.write_table(out)
    with open(out, encoding="utf-8", newline="") as fh:
        return {row["shot"]: row for row in csv.DictReader(fh)}[shot_id]


def test_a_dragged_mark_sets_the_wake_state_in_the_window_the_table_and_the_sheet(
        main_window, make_session, qtbot, tmp_path):
    # s01's proposals: upper +7.5 +- 2.0, lower -5.0 +- 2.5: 12.5 deg apart, beyond
    # max(5 deg, hypot(2.0, 2.5)): the upper side holds on longer (README: Wake)
    path = make_session(2)
    window = _open(main_window, qtbot, path, show=True)
    canvas = window.canvas
    assert window.readout.wake.text().startswith("upper side holds on longer")
    # the regime stands with the angles it belongs to, in view on a low window
    assert window.readout.reynolds.parent() is window.readout.wake.parent()
    assert _table_row(window, tmp_path / "t0.csv", "s01")["wake_state"] == (
        "upper side holds on longer")
    result = window.model.result("s01")
    handle = canvas.handle("lower")
    start = _viewport_point(canvas, handle.pos().x(), handle.pos().y())
    end = _viewport_point(canvas, *point_at_angle(*mark_circle(result),
                                                  result.flight.direction_deg, "lower", 5.0))
    live = {}
    _drag(qtbot, canvas.graphics.viewport(), start, end,
          during=lambda: live.setdefault("wake", window.readout.wake.text()))
    assert live["wake"].startswith("no clear difference")  # while the mark moves
    record = window.model.record("s01")
    assert abs(record.final_deg("upper") - record.final_deg("lower")) < 5.0
    assert window.readout.wake.text().startswith(
        "no clear difference (proposals: upper side holds on longer)")
    assert _table_row(window, tmp_path / "t1.csv", "s01")["wake_state"] == "no clear difference"
    window.close()
    assert "no clear difference (proposals: upper side holds on longer)" in _sheet_text(
        path, tmp_path / "sheet.pdf")


def test_an_unusable_shot_has_no_wake_state(main_window, make_session, qtbot, tmp_path):
    window = _open(main_window, qtbot, make_session(1), show=True)
    window.set_status("unusable", reason="laser misfire")
    assert window.readout.wake.text() == "—"
    assert _table_row(window, tmp_path / "t.csv", "s01")["wake_state"] == ""


@pytest.fixture
def measured_session(tmp_path):
    """One synthetic shot large enough for the fine correlation, measured for real."""
    from core.batch import process_shots
    from core.images import write_frame
    from core.synth_shot import ball_shot

    frame_a, frame_b, truth = ball_shot((288, 416), radius_px=40.0, flight_deg=180.0,
                                        shift_px=6.0, upper_deg=8.0, lower_deg=-2.0,
                                        density_ppp=0.05, seed=7)
    for name, frame in (("a", frame_a), ("b", frame_b)):
        write_frame(tmp_path / f"g1_{name}.tif", frame)
    path = tmp_path / "measured.h5"
    with Session.create(path, name="measured") as session:
        session.add_shot("g1", tmp_path / "g1_a.tif", tmp_path / "g1_b.tif",
                         {"dt_s": truth.dt_s, "scale_mm_per_px": truth.scale_mm_per_px,
                          "ball_diameter_mm": truth.ball_diameter_mm, "speed_nominal_m_s": 30.0})
        report = process_shots(session, workers=0)
    assert report.processed == ["g1"]
    return str(path)


def _measured(window, qtbot, previous) -> object:
    """The shot's result once the window has measured it again (a new result object)."""
    qtbot.waitUntil(lambda: window.job is None and window.model.result("g1") is not previous,
                    timeout=60_000)
    return window.model.result("g1")


def test_a_moved_circle_measures_the_shot_again_undo_and_redo_and_processing_keep_it(
        main_window, measured_session, qtbot):
    window = _open(main_window, qtbot, measured_session, show=True)
    canvas = window.canvas
    before = window.model.result("g1")
    proposals = [before.separation.upper.angle_deg, before.separation.lower.angle_deg]
    window.act_edit_circles.trigger()
    handle = canvas.circle_handles["a"]
    assert handle.isVisible() and not canvas.circle_handles["b"].isVisible()  # frame A shown
    assert not canvas.handle("upper").movable  # the marks stay put meanwhile
    (cx, cy), r = before.ball_a.center_px, before.ball_a.radius_px
    start, end = _viewport_point(canvas, cx, cy), _viewport_point(canvas, cx, cy + 3.0)
    _drag(qtbot, canvas.graphics.viewport(), start, end)
    moved = window.model.record("g1").pick.circle_a_px  # saved before measuring again
    assert moved[1] - cy == pytest.approx(3.0, abs=1.0) and moved[2] == pytest.approx(r)
    assert window.model.record("g1").pick.circle_b_px[:2] == pytest.approx(
        before.ball_b.center_px)
    after = _measured(window, qtbot, before)
    assert after.ball_a.center_px == pytest.approx(moved[:2]) and after.ball_a.outline == (
        BY_ANALYST)
    assert after.flight.direction_deg != pytest.approx(before.flight.direction_deg, abs=0.5)
    new = [after.separation.upper.angle_deg, after.separation.lower.angle_deg]
    assert None not in new and new != pytest.approx(proposals, abs=0.05)  # fitted again
    assert window.readout.cells[("proposed", "upper")].text() == angle_text(new[0])
    assert window.readout.by_hand.text() == "circles in frames A and B set by the analyst"

    _key(qtbot, window, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert window.job is None  # the result before the edit comes back as it was
    assert not window.model.record("g1").pick.has_geometry()
    undone = window.model.result("g1")
    assert [undone.separation.upper.angle_deg, undone.separation.lower.angle_deg] == proposals
    assert window.readout.cells[("proposed", "upper")].text() == angle_text(proposals[0])
    _key(qtbot, window, Qt.Key.Key_Z,
         Qt.KeyboardModifier.ControlModifier | Qt.KeyboardModifier.ShiftModifier)
    assert window.job is None and window.model.record("g1").pick.circle_a_px == moved
    assert window.model.result("g1").separation.upper.angle_deg == new[0]

    # processing the shot again measures it with the analyst's circle, never a found one
    window.reprocess_current()
    processed = _measured(window, qtbot, window.model.result("g1"))
    assert processed.ball_a.center_px == pytest.approx(moved[:2])
    assert window.model.record("g1").pick.circle_a_px == moved
    window.close()
    with Session.open(measured_session, writable=False) as session:
        assert session["g1"].pick.circle_a_px == pytest.approx(moved)
        assert not session.needs_processing("g1")
        edits = [p.circle_a_px is not None for p in session.history("g1")]
    assert edits == [True, False, True]


def test_the_flight_direction_set_by_hand_and_back_to_the_measured_one(
        main_window, measured_session, qtbot):
    window = _open(main_window, qtbot, measured_session, show=True)
    before = window.model.result("g1")

    def answer(dialog):
        dialog.setDoubleValue(170.0)
        dialog.accept()

    answer_dialog(answer)
    window.act_set_flight.trigger()
    after = _measured(window, qtbot, before)
    assert after.flight.direction_deg == 170.0 and after.flight.source == "override"
    assert window.model.record("g1").pick.flight_deg == 170.0
    assert "flight 170.0° set by the analyst" in window.readout.by_hand.text()
    assert window.act_measured_ball.isEnabled()
    window.act_measured_ball.trigger()
    again = _measured(window, qtbot, after)
    assert again.flight.direction_deg == pytest.approx(before.flight.direction_deg, abs=0.01)
    assert not window.model.record("g1").pick.has_geometry()


def test_the_overview_bars_the_proposals_uncertainty_but_not_a_moved_mark(qtbot):
    import numpy as np

    from app.qt.overview import SessionOverview
    from app.review.overview import overview_points
    from core.store import Pick, ShotRecord
    from core.summary import ShotSummary

    def record(shot_id, seam, pick):
        summary = ShotSummary.from_dict({"separation": {
            "upper": {"angle_deg": -9.0, "uncertainty_deg": 3.0},
            "lower": {"angle_deg": 4.0, "uncertainty_deg": 6.0}}})
        return ShotRecord(shot_id, {"seam_deg": seam}, state="processed", summary=summary,
                          pick=pick)

    records = [record("a", 0.0, Pick()), record("b", 10.0, Pick(status="accepted")),
               record("c", 20.0, Pick(status="adjusted", upper_deg=-9.0, lower_deg=11.0))]
    pts = overview_points(records, "seam_deg")
    np.testing.assert_array_equal(pts.upper_u_deg, [3.0, 3.0, 3.0])  # c: upper left as proposed
    np.testing.assert_array_equal(pts.lower_u_deg, [6.0, 6.0, np.nan])  # c: lower moved
    panel = SessionOverview()
    qtbot.addWidget(panel)
    panel.set_records(records)
    bars = panel.error_bars["lower"].opts
    assert list(bars["y"]) == [4.0, 4.0] and list(bars["top"]) == [6.0, 6.0]
    assert len(panel.error_bars["upper"].opts["x"]) == 3


def test_the_readme_names_every_layer_the_window_offers(main_window):
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme.split("What the picture can show", 1)[1].split("\n## ", 1)[0].lower()
    canvas = main_window(workers=0).canvas
    names = [a.text() for a in canvas.overlay_button.menu().actions() if a.text()]
    names += [canvas.picture_box.itemText(i) for i in range(canvas.picture_box.count())]
    names += [canvas.frame_box.itemText(i) for i in range(canvas.frame_box.count())]
    names += [canvas.vectors_box.text(), canvas.vorticity_box.text()]
    missing = [name for name in names if name.lower() not in section]
    assert not missing, f"layers of the window not in the README's list: {missing}"


def test_an_accepted_shot_measured_again_goes_back_to_review_and_undo_accepts_it_again(
        main_window, measured_session, qtbot):
    window = _open(main_window, qtbot, measured_session, show=True)
    window.model.apply_pick("g1", status="accepted")
    accepted = window.model.record("g1").pick
    before = window.model.result("g1")

    def answer(dialog):
        dialog.setDoubleValue(170.0)  # another flight: other proposals
        dialog.accept()

    answer_dialog(answer)
    window.act_set_flight.trigger()
    _measured(window, qtbot, before)
    pick = window.model.record("g1").pick
    assert (pick.status, pick.who) == ("to review", "wakeline")
    assert "back to review" in window.statusBar().currentMessage()
    # told apart from a shot nobody decided yet, in the list and the readout
    assert window.shot_list.proxy.index(0, COL_STATUS).data() == "back to review"
    assert window.readout.status_label.text() == "back to review"
    assert window.undo_stack.undoText() == "Set the flight direction to 170.0° of shot g1"
    window.undo_stack.undo()
    undone = window.model.record("g1").pick
    assert (undone.status, undone.who, undone.when, undone.flight_deg) == (
        "accepted", accepted.who, accepted.when, None)
    assert window.shot_list.proxy.index(0, COL_STATUS).data() == "accepted"
    window.undo_stack.redo()
    assert window.model.record("g1").pick.status == "to review"
    window.close()


def test_the_marks_and_decision_wait_while_the_shot_is_measured_again(
        main_window, measured_session, qtbot):
    """A mark moved on proposals about to be replaced would lose its undo step when they are
    (the edit "was made on other proposals"): the shot's marks and decisions wait instead."""
    window = _open(main_window, qtbot, measured_session, show=True)
    before = window.model.result("g1")
    pick = window.model.record("g1").pick

    def answer(dialog):
        dialog.setDoubleValue(175.0)
        dialog.accept()

    answer_dialog(answer)
    window.act_set_flight.trigger()
    assert window.measuring_again("g1")  # the job runs; its result is not taken in yet
    assert not window.canvas.handle("upper").movable
    window.nudge("upper", 2.0)
    window.set_status("accepted")
    assert "being measured again" in window.statusBar().currentMessage()
    now = window.model.record("g1").pick
    assert (now.status, now.upper_deg) == (pick.status, pick.upper_deg)
    assert window.undo_stack.count() == 1  # the flight alone

    _measured(window, qtbot, before)
    assert not window.measuring_again("g1") and window.canvas.handle("upper").movable
    proposed = window.model.record("g1").proposed_deg("upper")
    window.nudge("upper", 2.0)
    assert window.model.record("g1").pick.upper_deg == pytest.approx(proposed + 2.0, abs=1e-6)
    window.undo_stack.undo()  # the nudge comes back off: its proposals are still the same
    assert window.model.record("g1").pick.upper_deg is None
    window.close()
