"""The window beyond one shot: the conditions dock, the ensemble view, the second review's marks."""

from __future__ import annotations

import pytest

from app.qt.canvas_pictures import plain_reading
from core.store import Session

# the offscreen platform cannot propagate size hints nor raise a window: harmless
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints",
                                       "This plugin does not support raise")


def _open(main_window, make_session):
    """Six shots: seam angles -10, 0, 15, 30, 45, -10 (s01 and s06 are one condition). Not a
    fixture: a fixture's value outlives the check that no window is left open."""
    window = main_window(workers=0)
    assert window.open_session(make_session(6))
    window.statistics.refresh()
    return window


def _row_of(panel, label_part: str) -> int:
    return next(i for i, c in enumerate(panel.conditions) if label_part in c.label)


def test_clicking_a_condition_selects_its_shots(main_window, make_session):
    window = _open(main_window, make_session)
    panel = window.statistics
    assert [c.values["seam_deg"] for c in panel.conditions] == ["-10", "0", "15", "30", "45"]
    panel.choose(_row_of(panel, "seam_deg -10"))
    assert window.model.current_id == "s01"
    selected = window.shot_list.view.selectionModel().selectedRows()
    ids = {window.shot_list.table_model.shot_id(window.shot_list.proxy.mapToSource(i).row())
           for i in selected}
    assert ids == {"s01", "s06"}
    assert panel.table.item(0, 1).text() == "2 of 2, 0 decided"


def test_the_grouping_is_kept_in_the_session(main_window, make_session, qtbot):
    window = _open(main_window, make_session)
    window.model.set_conditions_by([])
    qtbot.waitUntil(lambda: window.statistics.table.rowCount() == 1, timeout=30_000)
    assert window.statistics.conditions[0].label == "all shots"
    path = window.model.path
    window.close_session()
    with Session.open(path, writable=False) as session:
        assert session.conditions_by() == []


def test_an_imported_review_shows_its_marks_and_the_agreement(main_window, make_session,
                                                               tmp_path, qtbot):
    window = _open(main_window, make_session)
    from app.qt.conditions_panel import import_review_dialog

    # no second review yet: the table has the dock's width
    window.statistics.refresh_soon()
    qtbot.waitUntil(lambda: window.statistics.agreement_pane.isHidden(), timeout=30_000)

    review = tmp_path / "theirs.csv"
    review.write_text("shot,review_status,upper_final_deg,lower_final_deg,reviewed_by\n"
                      "s01,adjusted,8.0,-30.0,Bea\ns02,accepted,9.0,-2.0,Bea\n",
                      encoding="utf-8")
    import_review_dialog(window, str(review))
    window.model.set_current("s01")
    qtbot.waitUntil(lambda: bool(window.analyst_marks.text), timeout=30_000)
    marks = window.analyst_marks
    assert marks.layer_name == "Bea" and "upper +8.0°" in marks.text
    # the proposal of s01 is -6.0 ± 2.5 on the lower side (analytic_result): ours is the
    # proposal until reviewed, so the two are not compared yet
    assert len(marks.items[0].data) == 2
    assert "Bea" in window.canvas.legend.text()
    qtbot.waitUntil(lambda: "review compared with Bea" in window.statistics.agreement_label.text(), timeout=30_000)
    assert not window.statistics.agreement_pane.isHidden()
    # beside the table, not under it (a long agreement once left the table two rows)
    panel = window.statistics
    from PySide6.QtCore import QPoint

    assert panel.agreement_label.mapTo(panel, QPoint(0, 0)).x() >= (
        panel.table.mapTo(panel, QPoint(0, 0)).x() + panel.table.width())
    bad = tmp_path / "bad.csv"
    bad.write_text("shot,review_status\nnope,accepted\n", encoding="utf-8")
    import_review_dialog(window, str(bad))
    assert "bad.csv line 2 (shot nope): not in the session" in window.last_problem
    # a second table by the same reviewer replaces the first only when the analyst says so
    again = tmp_path / "theirs_v2.csv"
    again.write_text("shot,review_status,upper_final_deg,lower_final_deg,reviewed_by\n"
                     "s01,accepted,8.0,-30.0,Bea\n", encoding="utf-8")
    asked = []
    window.ask = lambda title, text, choices: asked.append(text) or 1  # keep the earlier
    import_review_dialog(window, str(again))
    assert "already holds a review by 'Bea' (2 shots, from theirs.csv)" in asked[0]
    assert len(window.model.review_layers()["Bea"].picks) == 2
    window.ask = lambda title, text, choices: 0
    import_review_dialog(window, str(again))
    assert window.model.review_layers()["Bea"].source == "theirs_v2.csv"


def test_the_ensemble_view_of_a_condition(main_window, make_session, qtbot):
    window = _open(main_window, make_session)
    from app.qt.conditions_panel import start_ensemble

    panel = window.statistics
    condition = panel.conditions[_row_of(panel, "seam_deg -10")]
    # computed on request only: until then the cell is empty and says how to get it
    before = panel.table.item(0, panel.table.columnCount() - 1)
    assert before.text() == "" and "press Ensemble view" in before.toolTip()
    assert start_ensemble(window, condition) is not None
    qtbot.waitUntil(lambda: window.job is None, timeout=120_000)
    dialog = window.ensemble_dialog
    assert dialog.canvas.shot.result is not None and not dialog.canvas.shot.editable
    assert "2 shot(s) aligned on the ball: s01, s06" in dialog.numbers.text()
    # what its ± is made of, as a shot's ± tip says it
    assert dialog.canvas.shot.result.separation.upper.uncertainty_deg
    assert dialog.numbers.toolTip().startswith("upper: ± ")
    # its field is in the ball frame, and said so (it once read "lab frame")
    assert dialog.canvas.ball_frame() and not dialog.canvas.frame_box.isEnabled()
    result = dialog.canvas.shot.result
    (cx, cy), r = result.ball_a.center_px, result.ball_a.radius_px
    reading = dialog.canvas.describe_point(cx + 2.5 * r, cy, dialog.canvas.shot)
    assert "(ball frame" in plain_reading(reading)
    assert panel.table.item(0, panel.table.columnCount() - 1).text().startswith("U ")
    dialog.close()


def _front_tab(window) -> str:
    from PySide6.QtWidgets import QTabBar

    [bar] = [b for b in window.findChildren(QTabBar) if b.parent() is window and b.count() > 1]
    return bar.tabText(bar.currentIndex())


def test_the_view_menu_brings_the_conditions_tab_to_the_front(main_window, make_session,
                                                              qtbot):
    """The dock opens tabbed behind the overview: its menu item shows it, it does not close it."""
    window = _open(main_window, make_session)
    with qtbot.waitExposed(window):
        window.show()
    dock = window.statistics_dock
    [item] = [a for a in window.view_menu.actions() if a.text() == "&Conditions and agreement"]
    assert _front_tab(window) == "Session overview" and not item.isChecked()
    item.trigger()
    assert not dock.isHidden() and _front_tab(window) == "Conditions" and item.isChecked()
    item.trigger()  # in front: the item puts it away
    assert dock.isHidden() and not item.isChecked()
    item.trigger()
    assert not dock.isHidden() and _front_tab(window) == "Conditions"
    window.overview_dock.raise_()  # the analyst clicks the overview's tab
    qtbot.waitUntil(lambda: not item.isChecked(), timeout=30_000)
