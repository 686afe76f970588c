"""Finding shots (issue 14, item 3): filter and sort on any column, measured values included,
with several conditions; unprocessed shots read "not processed"."""

from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from app.review.columns import MEASURED_BY_NAME, matches_status, parse_filter, status_text
from core.store import Pick, ProcessState, ShotRecord
from core.summary import ShotSummary

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _record(shot_id, speed, upper, lower, quality, reynolds=None, seam=0.0, status="to review"):
    side = {"upper": {"angle_deg": upper, "uncertainty_deg": 1.5, "quality": quality},
            "lower": {"angle_deg": lower, "uncertainty_deg": 2.5, "quality": 0.9}}
    data = {"separation": {**side, "wake_deflection_deg": upper + lower},
            "flight": {"direction_deg": 180.0, "speed_m_s": speed,
                       "displacement_px": [-8.0, 0.0]}}
    if reynolds is not None:
        data["reynolds"] = {"value": reynolds, "air_temp_c": 20.0}  # as the measurement adds it
    return ShotRecord(shot_id, {"seam_deg": seam, "ball_type": "cricket"},
                      state=ProcessState.PROCESSED, summary=ShotSummary.from_dict(data),
                      pick=Pick(status=status))


@pytest.fixture
def records():
    return [
        _record("a1", 25.0, 10.0, -5.0, 0.9, reynolds=1.2e5, seam=0.0),
        _record("a2", 31.0, 20.0, 2.0, 0.4, reynolds=1.6e5, seam=15.0),
        _record("b3", 34.5, 5.0, 4.0, 0.8, reynolds=1.8e5, seam=30.0, status="unusable"),
        ShotRecord("b4", {"seam_deg": 45.0}),  # not processed
    ]


def _found(text, records):
    query = parse_filter(text, records)
    return [r.shot_id for r in records if query.matches(r)], query.problem


def test_measured_values_metadata_and_summary_paths_filter_together(records):
    assert _found("speed_m_s>30", records) == (["a2", "b3"], "")
    assert _found("speed_m_s>30 seam_deg:0..20", records) == (["a2"], "")
    assert _found("quality<0.5", records) == (["a2"], "")  # the weaker side of the two
    assert _found("upper_minus_lower_deg>=15", records) == (["a1", "a2"], "")
    assert _found("wake_deflection_deg>8", records) == (["a2"], "")  # b3 unusable: none
    assert _found("upper_uncertainty_deg=1.5 a", records) == (["a1", "a2"], "")
    assert _found("reynolds>1.5e5", records) == (["a2", "b3"], "")
    assert _found("reynolds.air_temp_c=20 speed_m_s<30", records) == (["a1"], "")
    assert _found("ball_type=cricket", records) == (["a1", "a2", "b3"], "")
    assert _found("ball_type!=cricket", records) == (["b4"], "")
    assert _found("B", records) == (["b3", "b4"], "")
    # an unusable shot has no angle to report; a shot not processed has no measured value
    assert _found("upper_deg>0", records) == (["a1", "a2"], "")


def test_a_filter_word_it_cannot_read_says_so_and_matches_nothing(records):
    found, problem = _found("sped_m_s>30", records)
    assert found == [] and "no column 'sped_m_s'" in problem
    found, problem = _found("seam_deg:10", records)
    assert found == [] and "seam_deg:low..high" in problem
    # a comparison with a word that is not a number
    found, problem = _found("seam_deg>abc", records)
    assert found == [] and problem == "seam_deg>abc: 'abc' is not a number"
    found, problem = _found("seam_deg:0..x", records)
    assert found == [] and problem == "seam_deg:0..x: a range's ends are numbers"
    # = and != compare words too
    assert _found("ball_type=cricket", records)[1] == ""


def test_a_new_measured_value_is_one_line(records):
    """The Reynolds number (summary["reynolds"]["value"]) is a column of its own."""
    column = MEASURED_BY_NAME["reynolds"]
    assert [column.value(r) for r in records] == [1.2e5, 1.6e5, 1.8e5, None]
    assert column.text(records[1]) == "1.60e5"


def test_an_unusable_shot_has_no_wake_in_the_list_as_in_the_table(records):
    column = MEASURED_BY_NAME["wake_deflection_deg"]
    assert [column.value(r) for r in records] == [5.0, 22.0, None, None]
    assert _found("wake_deflection_deg>0", records) == (["a1", "a2"], "")


def test_status_words(records):
    assert [status_text(r) for r in records] == ["to review", "to review", "unusable",
                                                 "not processed"]
    failed = ShotRecord("f", {}, state=ProcessState.FAILED, failure="no ball")
    assert status_text(failed) == "failed"


def test_a_decision_the_measurement_sent_back_reads_back_to_review(records):
    """An accepted shot whose proposal moved when it was measured again goes back to review
    under the measurement's name: the list tells it from a shot nobody decided yet, and the
    "to review" filter still takes it."""
    from dataclasses import replace

    from core.store.records import MEASUREMENT_AUTHOR, decision_on_new_proposals

    accepted = _record("c1", 30.0, 12.0, 3.0, 0.9, status="accepted")
    pick, said = decision_on_new_proposals(accepted, {"upper": 13.0, "lower": 3.0},
                                           "2026-12-05T10:00:00Z")
    assert pick.who == MEASUREMENT_AUTHOR and "back to review" in said
    reopened = replace(accepted, pick=pick)
    assert status_text(reopened) == "back to review"
    assert matches_status(reopened, "to review") and matches_status(reopened, "back to review")
    assert not matches_status(records[0], "back to review")
    # the analyst's own "back to review" (R) is theirs: plain "to review"
    mine = replace(accepted, pick=replace(pick, who="analyst"))
    assert status_text(mine) == "to review"


def test_the_list_sorts_and_filters_on_measured_columns(main_window, make_session, qtbot):
    from app.qt.shot_list import COL_STATUS

    path = make_session(4)
    window = main_window(workers=0)
    assert window.open_session(path)
    panel = window.shot_list
    assert panel.shown_columns() == ["upper_deg", "lower_deg", "seam_deg"]
    menu = panel._column_menu(None)  # right-click on the header
    [difference] = [a for a in menu.actions() if a.text().endswith("(upper_minus_lower_deg)")]
    difference.trigger()
    menu.deleteLater()
    assert "upper_minus_lower_deg" in panel.shown_columns()
    assert "upper_minus_lower_deg" in window.settings.value("shot_list/columns")
    col = panel.table_model.column_of("upper_minus_lower_deg")
    panel.view.sortByColumn(col, Qt.SortOrder.DescendingOrder)  # 12.5, 13.5, 14.5, 15.5 deg
    assert panel.visible_ids() == ["s04", "s03", "s02", "s01"]
    assert panel.proxy.index(0, col).data() == "+15.5°"
    panel.text_filter.setText("speed_m_s>29 upper_minus_lower_deg>13 seam_deg<=15")
    assert panel.visible_ids() == ["s03", "s02"]  # seams -10, 0, 15, 30 deg
    panel.text_filter.setText("spede>3")
    assert panel.visible_ids() == [] and "no column 'spede'" in panel.count_label.text()
    panel.text_filter.clear()
    index = panel.proxy.index(0, COL_STATUS)
    assert index.data() == "to review"


def test_unprocessed_shots_read_not_processed(main_window, make_session, qtbot):
    from app.qt.shot_list import COL_STATUS

    path = make_session(2, processed=False)
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    assert window.open_session(path)
    panel = window.shot_list
    assert [panel.proxy.index(r, COL_STATUS).data() for r in range(2)] == ["not processed"] * 2
    assert window.readout.status_label.text() == "not processed"
    panel.status_filter.setCurrentText("to review")
    assert panel.visible_ids() == []
    panel.status_filter.setCurrentText("not processed")
    assert panel.visible_ids() == ["s01", "s02"]


def test_a_manifest_column_s_header_gives_its_unit():
    from app.review.columns import metadata_column

    headers = {key: metadata_column(key).header for key in (
        "seam_deg", "dt_s", "air_temp_c", "scale_mm_per_px", "ball_diameter_mm",
        "speed_nominal_m_s", "spin_rpm", "ball_type")}
    assert headers == {"seam_deg": "seam °", "dt_s": "dt s", "air_temp_c": "air temp °C",
                       "scale_mm_per_px": "scale mm/px", "ball_diameter_mm": "ball diameter mm",
                       "speed_nominal_m_s": "speed nominal m/s", "spin_rpm": "spin rpm",
                       "ball_type": "ball type"}
