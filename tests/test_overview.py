"""Session overview: the numbers behind the plot, the panel's drawing and point clicks."""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from pathlib import Path

import numpy as np
import pytest

from core.store import Pick, ShotRecord
from core.summary import ShotSummary

# showing a widget on the offscreen platform logs this harmless notice
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _record(shot_id, seam, status="to review", up=None, low=None, adj_up=None, adj_low=None,
            speed=None):
    summary = ShotSummary.from_dict({
        "separation": {"upper_deg": up, "lower_deg": low},
        "flight": {"direction_deg": 180.0, "speed_m_s": speed, "displacement_px": [-8.0, 0.0]},
    })
    metadata = {"dt_s": 1e-4, "seam_deg": seam, "ball_type": "cricket", "notes": "x"}
    pick = Pick(status=status, upper_deg=adj_up, lower_deg=adj_low,
                reason="bad seeding" if status == "unusable" else "")
    return ShotRecord(shot_id, metadata, state="processed", summary=summary, pick=pick)


@pytest.fixture
def records():
    return [
        _record("a1", 0.0, "accepted", up=-9.0, low=-7.5, speed=30.1),
        _record("a2", 20.0, "adjusted", up=-8.0, low=10.0, adj_low=14.0, speed=29.5),
        _record("a3", 20.0, "to review", up=-10.0, low=12.0),
        _record("a4", 40.0, "unusable", up=-9.0, low=2.0),
        _record("a5", None, "accepted", up=-9.5, low=1.0),
        _record("a6", 30.0, "to review"),
    ]


def test_points_follow_review_status(records):
    from app.review.overview import overview_points

    pts = overview_points(records, "seam_deg")
    assert pts.shot_ids == ["a1", "a2", "a3"]
    np.testing.assert_array_equal(pts.x, [0.0, 20.0, 20.0])
    # adjusted: the analyst's lower value, the proposal on the side left alone
    np.testing.assert_array_equal(pts.upper_deg, [-9.0, -8.0, -10.0])
    np.testing.assert_array_equal(pts.lower_deg, [-7.5, 14.0, 12.0])
    assert pts.status == ["accepted", "adjusted", "to review"]
    np.testing.assert_array_equal(pts.is_final, [True, True, False])
    assert pts.left_out == {"unusable": 1, "no seam_deg": 1, "no angle": 1}


def test_repeats_are_drawn_side_by_side():
    from app.review.overview import spread_ties

    x = np.array([0.0, 20.0, 20.0, 40.0, 20.0])
    drawn = spread_ties(x, fraction=0.01)  # step 0.4 on a range of 40
    np.testing.assert_allclose(drawn, [0.0, 19.6, 20.0, 40.0, 20.4])


def test_numeric_columns_prefer_seam_and_add_pseudo_columns(records):
    from app.review.overview import MEASURED_SPEED, SHOT_ORDER, column_value, numeric_columns

    columns = numeric_columns(records)
    assert columns[0] == "seam_deg"
    assert "dt_s" in columns and "ball_type" not in columns and "notes" not in columns
    assert columns[-2:] == [MEASURED_SPEED, SHOT_ORDER]
    assert column_value(records[1], MEASURED_SPEED, 1) == 29.5
    assert column_value(records[1], SHOT_ORDER, 1) == 2.0


def test_panel_draws_and_switches_column(qtbot, records, tmp_path):
    from app.qt.overview import SessionOverview
    from app.review import colours
    from app.review.overview import SHOT_ORDER

    panel = SessionOverview()
    qtbot.addWidget(panel)
    panel.resize(520, 380)
    panel.set_records(records)
    panel.show()
    qtbot.waitExposed(panel)
    assert panel.column() == "seam_deg"
    assert len(panel.upper_item.points()) == 3 and len(panel.lower_item.points()) == 3
    # colour by status; hollow (white brush) for the proposal not yet reviewed
    brushes = {p.data(): p.brush().color().name() for p in panel.upper_item.points()}
    assert brushes["a1"] == colours.STATUS_COLOURS["accepted"]
    assert brushes["a2"] == colours.STATUS_COLOURS["adjusted"]
    assert brushes["a3"] == "#ffffff"
    assert "1 unusable" in panel.note_label.text()

    image = panel.grab().toImage()
    image.save(str(tmp_path / "overview.png"))
    adjusted = colours.STATUS_COLOURS["adjusted"]
    found = any(image.pixelColor(x, y).name() == adjusted
                for x in range(0, image.width(), 2) for y in range(0, image.height(), 2))
    assert found, "the adjusted shot's point is not drawn"

    panel.set_column(SHOT_ORDER)
    assert panel.points().column == SHOT_ORDER
    np.testing.assert_array_equal(panel.points().x, [1.0, 2.0, 3.0, 5.0])


def test_clicking_a_point_emits_its_shot(qtbot, records):
    from PySide6.QtCore import QPoint, Qt
    from PySide6.QtWidgets import QApplication

    from app.qt.overview import SessionOverview

    panel = SessionOverview()
    qtbot.addWidget(panel)
    panel.resize(520, 380)
    panel.set_records(records)
    panel.show()
    qtbot.waitExposed(panel)
    QApplication.processEvents()  # let the layout and the auto-range settle before mapping
    view = panel.plot
    for shot_id, side in (("a2", "lower"), ("a3", "upper")):
        scene_pos = panel.point_scene_pos(shot_id, side)
        pos = view.mapFromScene(scene_pos)
        with qtbot.waitSignal(panel.shot_clicked, timeout=30_000) as blocker:
            qtbot.mouseClick(view.viewport(), Qt.MouseButton.LeftButton, pos=QPoint(pos.x(),
                                                                                    pos.y()))
        assert blocker.args == [shot_id]
    panel.set_current("a2")
    assert len(panel.current_item.points()) == 2


# -- in the review window -------------------------------------------------------------------------


def _window(main_window, qtbot, path):
    from PySide6.QtWidgets import QApplication

    window = main_window(workers=0)
    with qtbot.waitExposed(window):
        window.show()
    assert window.open_session(path)
    qtbot.waitUntil(lambda: len(window.overview.points() or []) == 4, timeout=30_000)
    QApplication.processEvents()  # let the dock's plot take its size before mapping positions
    return window


def test_clicking_an_overview_point_selects_the_shot(main_window, make_session, qtbot):
    from PySide6.QtCore import QPoint, Qt

    window = _window(main_window, qtbot, make_session(4))
    assert window.overview_dock.isVisible()
    assert window.model.current_id == "s01"
    view = window.overview.plot
    for shot_id in ("s03", "s02"):
        pos = view.mapFromScene(window.overview.point_scene_pos(shot_id, "lower"))
        qtbot.mouseClick(view.viewport(), Qt.MouseButton.LeftButton, pos=QPoint(pos.x(), pos.y()))
        qtbot.waitUntil(lambda s=shot_id: window.model.current_id == s, timeout=30_000)
        panel = window.shot_list
        row = panel.proxy.mapToSource(panel.view.currentIndex()).row()
        assert panel.table_model.shot_id(row) == shot_id
        assert len(panel.view.selectionModel().selectedRows()) == 1
    # a review edit in the window shows in the overview: the accepted point fills in
    window.model.apply_pick("s02", status="accepted")
    qtbot.waitUntil(lambda: window.overview.points().is_final[1], timeout=30_000)


def test_export_menu_writes_the_sheet_and_the_table(main_window, make_session, qtbot, tmp_path,
                                                     monkeypatch):
    from pypdf import PdfReader

    from app.qt.export import export_sheet
    from core.store import Session, write_table_csv

    window = _window(main_window, qtbot, make_session(4))
    texts = [a.text() for a in window.export_menu.actions()]
    assert texts == ["Shot sheet (&PDF)…", "Shot sheet of the &listed shots (PDF)…",
                     "&Table (CSV)…", "", "Picture (P&NG)…", "Picture (S&VG)…"]
    assert window.export_menu.isEnabled()

    table = tmp_path / "from_window.csv"
    monkeypatch.setattr("app.qt.export.ask_path", lambda *a, **k: str(table))
    window.act_export_table.trigger()
    reference = tmp_path / "from_store.csv"
    with Session.open(window.model.session.path, writable=False) as session:
        write_table_csv(session, reference)
    assert table.read_bytes() == reference.read_bytes()
    gone = tmp_path / "no such folder" / "t.csv"  # told as the command tells it
    monkeypatch.setattr("app.qt.export.ask_path", lambda *a, **k: str(gone))
    window.act_export_table.trigger()
    assert window.last_problem == f"Table: {gone}: cannot write here (the folder does not exist)"

    sheet = tmp_path / "from_window.pdf"
    monkeypatch.setattr("app.qt.export.ask_path", lambda *a, **k: str(sheet))
    window.act_export_sheet.trigger()
    assert len(PdfReader(str(sheet)).pages) == 1 + 1 + 2  # cover, conditions, shots
    report = export_sheet(window, tmp_path / "one.pdf", per_page=1, shot_ids=["s04"])
    assert report.pages == 3 and report.shot_ids == ["s04"]
    assert export_sheet(window, tmp_path / "none.pdf", shot_ids=["nope"]) is None
    assert "no shot 'nope'" in window.last_problem
    # the listed shots: those the list's filter leaves
    listed = tmp_path / "listed.pdf"
    window.shot_list.text_filter.setText("s04")
    monkeypatch.setattr("app.qt.export.ask_path", lambda *a, **k: str(listed))
    window.act_export_listed_sheet.trigger()
    assert len(PdfReader(str(listed)).pages) == 1 + 1 + 1  # cover, conditions, one shot
    window.shot_list.text_filter.setText("nothing like it")
    window.act_export_listed_sheet.trigger()
    assert window.last_problem.startswith("Shot sheet: the list shows no shot")
    window.shot_list.text_filter.setText("")
    # what the session is made of and reads is refused, as the command refuses it (the window
    # once wrote a sheet over the session file itself, and over frames and shots.csv)
    session_file = Path(window.model.session.path)
    frame = Path(window.model.session.frame_source("s01")["path_a"])
    manifest = frame.with_name("shots.csv")
    manifest.write_text("shot,dt_s\n")  # the session was made without one; a folder has one
    kept = {p: p.read_bytes() for p in (session_file, frame, manifest)}
    for target in kept:
        assert export_sheet(window, target) is None
        assert window.last_problem.startswith(f"Shot sheet: {target}: is the")
        monkeypatch.setattr("app.qt.export.ask_path", lambda *a, t=target, **k: str(t))
        window.act_export_table.trigger()
        assert window.last_problem.startswith(f"Table: {target}: is the")
    assert all(p.read_bytes() == data for p, data in kept.items())
    # a PDF under another kind of file's name is refused (the window once wrote one)
    named = tmp_path / "picks.csv"
    assert export_sheet(window, named) is None
    assert window.last_problem == (f"Shot sheet: {named}: the shot sheet is a PDF: name it "
                                   ".pdf (not picks.csv); nothing written")
    assert not named.exists()


def test_one_value_on_the_axis_gets_a_readable_range(qtbot):
    # one shot (or a column alike on every shot): the range is 5 % of the value either side,
    # not the few thousandths an automatic range gives a single point
    from app.qt.overview import SessionOverview

    panel = SessionOverview()
    qtbot.addWidget(panel)
    panel.show()
    qtbot.waitExposed(panel)
    view = panel.plot.getPlotItem().getViewBox()
    panel.set_records([_record("b1", 40.0, up=-9.0, low=2.0)])
    qtbot.wait(50)
    low, high = view.viewRange()[0]
    assert low == pytest.approx(38.0) and high == pytest.approx(42.0)
    panel.set_records([_record("b1", 40.0, up=-9.0, low=2.0), _record("b2", 0.0, up=-9.0)])
    qtbot.wait(50)
    low, high = view.viewRange()[0]
    assert low < 0.0 and high > 40.0 and high - low < 60.0  # two values: the automatic range
    axis = panel.plot.getPlotItem().getAxis("bottom")
    assert axis._tickLevels is None  # evenly spread ticks
    # five shots alike (one seam): shown side by side about 20, the axis labelled 20 alone
    # (ticks at 19.98, 19.99, ... read as a seam sweep)
    panel.set_records([_record(f"s{i}", 20.0, up=-9.0, low=2.0) for i in range(5)])
    qtbot.wait(50)
    low, high = view.viewRange()[0]
    assert low == pytest.approx(19.0) and high == pytest.approx(21.0)
    assert axis._tickLevels == [[(20.0, "20")]]
    # one shot's seam corrected: two values, evenly spread ticks again, with the same count
    panel.set_records([_record(f"s{i}", 30.0 if i == 0 else 20.0, up=-9.0, low=2.0)
                       for i in range(5)])
    qtbot.wait(50)
    assert axis._tickLevels is None
    # every shot's: the one value is the new one
    panel.set_records([_record(f"s{i}", 30.0, up=-9.0, low=2.0) for i in range(5)])
    qtbot.wait(50)
    assert axis._tickLevels == [[(30.0, "30")]]
    low, high = view.viewRange()[0]
    assert low == pytest.approx(28.5) and high == pytest.approx(31.5)
    # a small value's one label is the value itself: no "(x1e-06)" beside the axis title
    for record in (records := [_record(f"s{i}", 30.0, up=-9.0, low=2.0) for i in range(3)]):
        record.metadata["seam_deg"] = 6e-05
    panel.set_records(records)
    qtbot.wait(50)
    assert axis._tickLevels == [[(6e-05, "6e-05")]] and axis.autoSIPrefixScale == 1.0


def test_one_value_alike_on_every_shot_is_drawn_at_its_own_scale():
    # a column such as dt_s (6e-05 s on every shot) was spread by hundredths of its unit, and
    # the sheet's axis ran from -0.1 to 0.1
    from app.review.overview import OverviewPoints

    n = 4
    points = OverviewPoints("dt_s", [f"s{i}" for i in range(n)], np.full(n, 6e-5),
                            np.full(n, -9.0), np.full(n, 2.0), ["to review"] * n,
                            np.zeros(n, bool))
    assert points.single_x() == 6e-5
    low, high = points.single_x_range()
    assert low == pytest.approx(5.7e-5) and high == pytest.approx(6.3e-5)
    assert np.all(np.abs(points.drawn_x() - 6e-5) <= 0.5 * (high - 6e-5))
    points.x[0] = 7e-5
    assert points.single_x() is None and points.single_x_range() is None
