"""Comparing shots and taking the picture out (issue 14, items 4 and 5): two shots side by side
with linked zoom and one colour range, a range fixed for the session (window and sheet), the
canvas to the clipboard and as PNG or SVG at a chosen size with its legend and scale bar."""

from __future__ import annotations

import pytest
from conftest import answer_dialog
from PySide6.QtCore import QPoint, QSize, Qt
from PySide6.QtGui import QGuiApplication, QImage
from test_window import _key, _open

from app.review import colours
from app.review.scales import round_limit

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def test_two_shots_side_by_side_with_linked_zoom_and_one_colour_range(main_window,
                                                                       make_session, qtbot):
    window = _open(main_window, qtbot, make_session(4), show=True)
    canvas = window.canvas
    window.shot_list.view.setFocus()
    _key(qtbot, window, Qt.Key.Key_K)  # keep s01
    assert canvas.reference.shot_id == "s01" and canvas.side_box.isChecked()
    qtbot.wait(20)  # the second view takes its place in the layout
    window.model.set_current("s04")
    main, second = canvas.main, canvas.second
    assert canvas.shot.shot_id == "s04"
    assert main.title.text == "shot s04" and second.title.text == "shot s01 · kept"
    assert main.picture.isVisible() and second.picture.isVisible()  # frames on both sides
    assert main.vorticity.isVisible() and second.vorticity.isVisible()
    # the second view shows s01's own marks
    s01 = window.model.record("s01").proposed_deg("upper")
    assert second.overlay.labels["upper"].textItem.toPlainText() == f"U {s01:+.1f}°"
    # one colour range, from the stronger of the two shots
    fields = [window.model.result(s).vorticity_1_s for s in ("s01", "s04")]
    limit = round_limit(max(colours.symmetric_limit(w) for w in fields))
    assert canvas.limit_box.value() == limit and canvas.colour_bar.levels() == (-limit, limit)
    canvas.view.setRange(xRange=(60, 140), yRange=(40, 100), padding=0)  # zoom in on the left
    for linked, own in zip(canvas.field_view.viewRange(), canvas.view.viewRange()):
        assert linked == pytest.approx(own)
    assert canvas.legend_title() == "shot s04 | s01"
    window.model.set_current("s01")
    _key(qtbot, window, Qt.Key.Key_K)  # K on the kept shot lets it go
    assert canvas.reference is None and not second.picture.isVisible()  # frames | fields again


def test_a_fixed_colour_range_stays_for_every_shot_and_goes_on_the_sheet(main_window,
                                                                         make_session, qtbot,
                                                                         tmp_path):
    from test_sheet import _pdf_text

    from app.qt.export import export_sheet

    window = _open(main_window, qtbot, make_session(2))
    canvas = window.canvas
    assert canvas.fixed_limit() is None  # per shot by default
    window.act_fixed_range.trigger()
    canvas._set_limit(300.0)
    canvas._on_limit(300.0)
    window.model.set_current("s02")
    assert canvas.fixed_limit() == 300.0 and canvas.colour_bar.levels() == (-300.0, 300.0)
    report = export_sheet(window, tmp_path / "fixed.pdf")
    _, text = _pdf_text(report.path)
    assert "vorticity colours ±300 1/s on every panel" in text
    assert text.count("+300") == 2  # each panel's colour bar ends at the same value


def test_sheet_command_takes_one_range_for_the_session(make_session, tmp_path, capsys):
    from test_sheet import _pdf_text

    from app.cli import main
    from core.store import Session

    path = make_session(3)
    with Session.open(path, writable=False) as session:
        fields = [session.load_result(s).vorticity_1_s for s in session]
    expected = round_limit(float(sorted(colours.symmetric_limit(w) for w in fields)[1]))
    out = tmp_path / "session_range.pdf"
    assert main(["sheet", path, "-o", str(out), "--vorticity-limit", "session"]) == 0
    _, text = _pdf_text(out)
    assert f"vorticity colours ±{expected:g} 1/s on every panel" in text
    with pytest.raises(SystemExit) as exc:
        main(["sheet", path, "-o", str(out), "--vorticity-limit", "-5"])
    assert exc.value.code == 2
    assert "a positive number or 'session'" in capsys.readouterr().err


@pytest.mark.qt_log_ignore("This plugin does not support (propagateSizeHints|raise|grabbing)")
def test_the_picture_goes_to_the_clipboard_png_and_svg(main_window, make_session, qtbot,
                                                       tmp_path):
    from app.qt.picture_export import export_picture

    window = _open(main_window, qtbot, make_session(2), show=True)
    canvas = window.canvas
    canvas.graphics.customContextMenuRequested.emit(QPoint(40, 40))  # a right click
    assert [a.text() for a in canvas.context_menu.actions()] == [
        "&Copy picture", "Picture (P&NG)…", "Picture (S&VG)…"]
    canvas.context_menu.close()
    window.act_copy_picture.trigger()
    copied = QGuiApplication.clipboard().image()
    assert copied.size() == canvas.picture_size()
    on_screen = canvas.view.viewRange()
    assert export_picture(window, tmp_path / "s01.png", 1200, 800)
    for now, before in zip(canvas.view.viewRange(), on_screen):  # the window is as it was
        assert now == pytest.approx(before)
    image = QImage(str(tmp_path / "s01.png"))
    assert image.size() == QSize(1200, 800)
    bottom = [image.pixelColor(x, 790).name() for x in range(0, 1200, 4)]
    assert len(set(bottom)) > 3  # the legend line under the views
    assert export_picture(window, tmp_path / "s01.svg", 900, 600)
    svg = (tmp_path / "s01.svg").read_text(encoding="utf-8")
    assert 'viewBox="0 0 900 600"' in svg and 'width="238.125mm"' in svg  # 900 px at 96 dpi
    assert "<image" in svg and "<path" in svg  # frames and vorticity; vectors
    assert "mm" in svg and "proposal" in svg  # the scale bar and the legend


def test_the_export_asks_the_size_and_keeps_the_proportions(main_window, make_session, qtbot,
                                                            tmp_path):
    window = _open(main_window, qtbot, make_session(1), show=True)
    screen = window.canvas.picture_size()
    seen = {}

    def size(dialog):
        dialog.width_box.setValue(1000)
        seen["height"] = dialog.height_box.value()
        answer_dialog(lambda d: (d.selectFile(str(tmp_path / "chosen.png")), d.accept()))
        dialog.accept()

    answer_dialog(size)
    window.act_export_png.trigger()
    assert seen["height"] == round(1000 * screen.height() / screen.width())
    assert QImage(str(tmp_path / "chosen.png")).size() == QSize(1000, seen["height"])
    assert window.settings.value("picture/size") == QSize(1000, seen["height"])
