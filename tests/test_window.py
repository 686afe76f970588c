"""The review window driven headless with pytest-qt: stepping, dragging, review keys, processing
(its files: test_window_files.py; its sizes: test_window_layout.py; keeping what the analyst
did when saving fails: test_window_saving.py)."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import QEvent, QPoint, QPointF, Qt
from PySide6.QtGui import QMouseEvent
from PySide6.QtWidgets import QApplication

from app.qt.canvas_items import mark_circle
from core.geometry import angle_of_point, point_at_angle
from core.store import Session

# The offscreen platform warns that it cannot propagate size hints; harmless (DEVELOPERS.md).
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def _open(main_window, qtbot, path, show=False, **kwargs):
    window = main_window(workers=0, **kwargs)
    if show:
        with qtbot.waitExposed(window):
            window.show()
        window.activateWindow()
        with qtbot.waitActive(window):
            pass
    assert window.open_session(path)
    if show:
        qtbot.wait(30)  # let the plot layout settle before mapping positions
    return window


def reactivate(qtbot, window) -> None:
    """After a dialog the offscreen platform leaves the window inactive (a desktop's window
    manager activates it again): shortcuts need an active window."""
    window.activateWindow()
    with qtbot.waitActive(window):
        pass
    window.shot_list.view.setFocus()


def _key(qtbot, window, key, modifier=Qt.KeyboardModifier.NoModifier):
    """Press a key in the focused widget of the window (shortcuts fire as for a user)."""
    target = QApplication.focusWidget() or window.shot_list.view
    qtbot.keyClick(target, key, modifier)


def _viewport_point(canvas, x_px, y_px) -> QPoint:
    scene = canvas.view.mapViewToScene(QPointF(x_px, y_px))
    return canvas.graphics.mapFromScene(scene)


def _upper_mark_drag(window, shot_id: str, by_deg: float) -> tuple[float, QPoint, QPoint]:
    """The upper proposal (deg) and a drag of its mark by ``by_deg`` along the outline: the
    viewport points where it starts and ends."""
    canvas = window.canvas
    result = window.model.result(shot_id)
    proposal = window.model.record(shot_id).proposed_deg("upper")
    handle = canvas.handle("upper")
    start = _viewport_point(canvas, handle.pos().x(), handle.pos().y())
    end = _viewport_point(canvas, *point_at_angle(*mark_circle(result),
                                                  result.flight.direction_deg, "upper",
                                                  proposal + by_deg))
    return proposal, start, end


def _view_point(canvas, point: QPoint) -> tuple[float, float]:
    view = canvas.view.mapSceneToView(canvas.graphics.mapToScene(point))
    return view.x(), view.y()


def _mouse(widget, kind, point: QPoint, buttons, button=Qt.MouseButton.LeftButton) -> None:
    moving = kind == QEvent.Type.MouseMove
    button = Qt.MouseButton.NoButton if moving else button
    local = QPointF(point)
    event = QMouseEvent(kind, local, widget.mapToGlobal(local), button, buttons,
                        Qt.KeyboardModifier.NoModifier)
    QApplication.sendEvent(widget, event)


def _drag(qtbot, widget, start: QPoint, end: QPoint, during=None, steps: int = 12) -> None:
    """Press at ``start``, move in steps to ``end``, release; ``during()`` runs before release."""
    left = Qt.MouseButton.LeftButton
    _mouse(widget, QEvent.Type.MouseMove, start, Qt.MouseButton.NoButton)  # hover first, as a hand
    qtbot.wait(15)
    _mouse(widget, QEvent.Type.MouseButtonPress, start, left)
    for i in range(1, steps + 1):
        t = i / steps
        p = QPoint(round(start.x() + t * (end.x() - start.x())),
                   round(start.y() + t * (end.y() - start.y())))
        _mouse(widget, QEvent.Type.MouseMove, p, left)
        qtbot.wait(15)  # pyqtgraph drops moves closer than its mouse rate limit
    if during is not None:
        during()
    _mouse(widget, QEvent.Type.MouseButtonRelease, end, Qt.MouseButton.NoButton)
    qtbot.wait(10)


def test_keyboard_steps_through_every_shot_and_views_follow(main_window, make_session, qtbot):
    path = make_session(4)
    window = _open(main_window, qtbot, path, show=True)
    ids = window.shot_list.visible_ids()
    assert ids == ["s01", "s02", "s03", "s04"]
    window.shot_list.view.setFocus()
    seen = []
    for step in range(len(ids)):
        if step:
            _key(qtbot, window, Qt.Key.Key_Down)
        shot_id = window.model.current_id
        seen.append(shot_id)
        assert window.canvas.shot.shot_id == shot_id
        assert window.readout.title.text() == f"Shot {shot_id}"
        record = window.model.record(shot_id)
        assert window.readout.cells[("proposed", "upper")].text() == \
            f"{record.proposed_deg('upper'):+.1f}°"
        assert window.canvas.mark_angle("upper") == pytest.approx(record.proposed_deg("upper"))
    assert seen == ids
    _key(qtbot, window, Qt.Key.Key_PageUp)
    assert window.model.current_id == "s01"
    _key(qtbot, window, Qt.Key.Key_N)
    assert window.model.current_id == "s02"
    _key(qtbot, window, Qt.Key.Key_P)
    assert window.model.current_id == "s01"


def test_drag_upper_mark_follows_geometry_undo_redo_and_reopen(main_window, make_session, qtbot):
    path = make_session(3)
    window = _open(main_window, qtbot, path, show=True)
    canvas = window.canvas
    record = window.model.record("s01")
    result = window.model.result("s01")
    centre, radius = mark_circle(result)
    flight = result.flight.direction_deg
    proposal = record.proposed_deg("upper")
    handle = canvas.handle("upper")
    start = _viewport_point(canvas, handle.pos().x(), handle.pos().y())
    target_deg = proposal + 25.0
    end = _viewport_point(canvas, *point_at_angle(centre, radius, flight, "upper", target_deg))
    # geometry of the pointer's own position (mouse events land on whole pixels)
    pointer_deg = angle_of_point(centre, flight, "upper", _view_point(canvas, end))
    live = {}

    def read_live():
        live["text"] = window.readout.live_text("upper")
        live["mark"] = canvas.mark_angle("upper")

    _drag(qtbot, canvas.graphics.viewport(), start, end, during=read_live)
    assert live["mark"] == pytest.approx(pointer_deg, abs=0.2)
    assert float(live["text"].rstrip("°")) == pytest.approx(pointer_deg, abs=0.2)
    assert pointer_deg == pytest.approx(target_deg, abs=2.0)

    adjusted = window.model.record("s01")
    assert adjusted.pick.status == "adjusted"
    assert adjusted.final_deg("upper") == pytest.approx(pointer_deg, abs=0.2)
    assert adjusted.final_deg("lower") == pytest.approx(record.proposed_deg("lower"))
    hx, hy = canvas.handle("upper").pos().x(), canvas.handle("upper").pos().y()
    assert math.hypot(hx - centre[0], hy - centre[1]) == pytest.approx(radius, abs=1e-6)

    _key(qtbot, window, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    undone = window.model.record("s01")
    assert undone.pick.status == "to review" and undone.pick.upper_deg is None
    assert canvas.mark_angle("upper") == pytest.approx(proposal)
    _key(qtbot, window, Qt.Key.Key_Z,
         Qt.KeyboardModifier.ControlModifier | Qt.KeyboardModifier.ShiftModifier)
    redone = window.model.record("s01")
    assert redone.pick.status == "adjusted"
    assert redone.final_deg("upper") == pytest.approx(pointer_deg, abs=0.2)

    window.close()
    with Session.open(path, writable=False) as session:
        kept = session["s01"]
        history = session.history("s01")
    assert kept.pick.status == "adjusted"
    assert kept.final_deg("upper") == pytest.approx(redone.final_deg("upper"))
    assert [p.status for p in history] == ["adjusted", "to review", "adjusted"]


def test_review_keys_nudges_and_notes_persist(main_window, make_session, qtbot):
    from conftest import answer_dialog

    path = make_session(4)
    window = _open(main_window, qtbot, path, show=True)
    window.act_advance.setChecked(False)  # each shot is chosen by hand here
    window.shot_list.view.setFocus()
    _key(qtbot, window, Qt.Key.Key_A)  # s01 accepted
    _key(qtbot, window, Qt.Key.Key_Down)
    answer_dialog(lambda d: (d.setTextValue("laser sheet misfired"), d.accept()))
    _key(qtbot, window, Qt.Key.Key_U)  # s02 unusable with the reason
    reactivate(qtbot, window)
    _key(qtbot, window, Qt.Key.Key_E)  # its marks stay, and the window says why
    assert window.model.record("s02").pick.status == "unusable"
    assert "marked unusable: R puts it back" in window.statusBar().currentMessage()
    _key(qtbot, window, Qt.Key.Key_Down)
    proposal = window.model.record("s03").proposed_deg("upper")
    lower = window.model.record("s03").proposed_deg("lower")
    _key(qtbot, window, Qt.Key.Key_E)  # s03 upper +0.5
    _key(qtbot, window, Qt.Key.Key_E)
    _key(qtbot, window, Qt.Key.Key_E, Qt.KeyboardModifier.ShiftModifier)  # +0.1
    _key(qtbot, window, Qt.Key.Key_Z)  # lower -0.5
    _key(qtbot, window, Qt.Key.Key_Down)
    _key(qtbot, window, Qt.Key.Key_Q)  # s04 upper -0.5, then back: nothing decided
    assert window.model.record("s04").pick.status == "adjusted"
    _key(qtbot, window, Qt.Key.Key_E)
    assert window.model.record("s04").pick.status == "to review"
    assert window.canvas.mark_angle("upper") == pytest.approx(
        window.model.record("s04").proposed_deg("upper"))
    _key(qtbot, window, Qt.Key.Key_D)  # s04 adjusted as proposed
    window.readout.note.setFocus()
    qtbot.keyClicks(window.readout.note, "wake hits the frame edge")
    qtbot.keyClick(window.readout.note, Qt.Key.Key_Escape)
    assert window.model.record("s04").pick.note == "wake hits the frame edge"
    assert QApplication.focusWidget() is window.shot_list.view  # Up/Down work again
    # nudges of one mark merge into one undo step
    assert window.undo_stack.count() == 6
    window.close()

    with Session.open(path, writable=False) as session:
        s01, s02, s03, s04 = (session[s] for s in ("s01", "s02", "s03", "s04"))
    assert s01.pick.status == "accepted"
    assert s01.final_deg("upper") == s01.proposed_deg("upper")
    assert s02.pick.status == "unusable" and s02.pick.reason == "laser sheet misfired"
    assert s03.pick.status == "adjusted"
    assert s03.final_deg("upper") == pytest.approx(proposal + 1.1)
    assert s03.final_deg("lower") == pytest.approx(lower - 0.5)
    assert s04.pick.status == "adjusted"
    assert s04.final_deg("upper") == pytest.approx(s04.proposed_deg("upper"))
    assert s04.pick.note == "wake hits the frame edge"


def test_processing_started_from_window_completes(main_window, make_session, qtbot):
    path = make_session(3, processed=False)
    window = _open(main_window, qtbot, path)  # unprocessed shots start processing on open
    job = window.job
    assert job is not None and window.progress.isVisible() is not None
    landed = []
    job.item_done.connect(lambda outcome: landed.append(window.model.record(outcome.shot_id)))
    with qtbot.waitSignal(job.finished, timeout=120_000) as blocker:
        pass
    outcome = blocker.args[0]
    assert not outcome.error and not outcome.cancelled
    assert outcome.value.processed + outcome.value.failed == 3
    assert [r.state for r in landed] == [window.model.record(r.shot_id).state for r in landed]
    assert all(window.model.record(s).state != "unprocessed" for s in ("s01", "s02", "s03"))
    assert window.job is None
    current = window.model.current_id
    if window.model.record(current).state == "processed":
        assert window.canvas.shot.result is not None


def test_the_end_of_processing_says_what_became_of_the_analysts_decisions(main_window,
                                                                            make_session, qtbot):
    # decided shots sent back to review and adjusted ones whose angles were kept or carried:
    # counted, and the first named with what was done (the outcomes' words were dropped)
    from app.qt.workers import JobOutcome, ProcessSummary

    window = _open(main_window, qtbot, make_session(2))
    summary = ProcessSummary(processed=2, total=2, reopened=1, decisions=[
        ("s01", ("the flight turned by 180.0° (0.0° → 180.0°): the adjusted marks would lie "
                 "on the other side of the ball: back to review")),
        ("s02", "the adjusted pick keeps lower -3.00° (the proposal there moved)")])
    window._on_processing_finished(JobOutcome(summary))
    assert window.statusBar().currentMessage() == (
        "Processing finished: 2 processed, 0 failed; 1 decided shot(s) back to review; 1 "
        "adjusted shot(s) whose angles were kept, carried or renewed: shot s01: the flight turned by "
        "180.0° (0.0° → 180.0°): the adjusted marks would lie on the other side of the ball: "
        "back to review (and 1 more)")


def test_cancel_stops_processing(main_window, make_session, qtbot, _private_user_files):
    path = make_session(5, processed=False)
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    assert window.open_session(path)
    assert window.job is None  # the preference was off
    job = window.start_processing()
    with qtbot.waitSignal(job.item_done, timeout=60_000):
        pass
    window.cancel_processing()
    with qtbot.waitSignal(job.finished, timeout=60_000) as blocker:
        pass
    assert blocker.args[0].cancelled
    states = [window.model.record(s).state for s in window.model.shot_ids()]
    assert states.count("unprocessed") >= 1


def test_screenshot_of_a_processed_shot_is_not_blank(main_window, make_session, qtbot, tmp_path):
    path = make_session(3)
    window = _open(main_window, qtbot, path, show=True)
    qtbot.wait(50)
    image = window.grab().toImage()
    image.save(str(tmp_path / "window.png"))
    canvas_rect = window.canvas.graphics.geometry()
    origin = window.canvas.graphics.mapTo(window, QPoint(0, 0))
    crop = image.copy(origin.x(), origin.y(), canvas_rect.width(), canvas_rect.height())
    crop = crop.convertToFormat(crop.Format.Format_RGB32)
    raw = np.frombuffer(crop.constBits(), dtype=np.uint8)
    pixels = raw.reshape(crop.height(), crop.bytesPerLine() // 4, 4)[:, : crop.width(), :3]
    colours = np.unique(pixels.reshape(-1, 3) // 16, axis=0)
    assert len(colours) > 200  # particles, vorticity map, vectors, marks: far from blank
    # the upper mark's own colour is in the picture
    assert np.any(np.all(np.abs(pixels.astype(int) - [0x2b, 0x4c, 0x9a]) < 12, axis=-1))


def test_failed_shot_shows_its_reason(main_window, make_session, qtbot):
    path = make_session(2)
    with Session.open(path) as session:
        session.save_failure("s02", "shot s02: no ball found in frame A")
    window = _open(main_window, qtbot, path)
    window.model.set_current("s02")
    assert "no ball found" in window.canvas.message.text()
    assert window.canvas.message.isVisibleTo(window)
    assert "no ball found" in window.readout.problem.text()
    row = window.shot_list.table_model.row_of("s02")
    index = window.shot_list.table_model.index(row, 0)
    assert "no ball found" in index.data(Qt.ItemDataRole.ToolTipRole)
    assert index.data(Qt.ItemDataRole.DecorationRole) is not None
    # its last run that succeeded is still shown, and said to be
    assert window.canvas._shot.result is not None
    assert "Shown: the last run that succeeded." in window.canvas.message.text()


def test_reprocessing_a_shot_whose_frame_is_gone_is_refused_and_keeps_its_result(
        main_window, make_session, qtbot):
    path = make_session(2)
    window = _open(main_window, qtbot, path)
    window.model.set_current("s02")
    Path(path).with_name("review_frames").joinpath("s02_a.tif").rename(
        Path(path).with_name("s02_a.tif"))
    window.reprocess_current()
    assert window.job is None
    assert "frame file" in window.last_problem and "last result is kept" in window.last_problem
    record = window.model.record("s02")
    assert record.state == "processed" and window.model.result("s02") is not None


def test_settings_layers_and_recent_sessions_are_kept(main_window, make_session, qtbot):
    path = make_session(2)
    first = _open(main_window, qtbot, path)
    first.canvas.vectors_box.setChecked(False)
    first.canvas.stride_box.setValue(3)
    first.resize(760, 560)  # within the offscreen screen, which restoreGeometry clamps to
    first.overview_dock.close()  # the analyst closes the overview
    assert first.overview_dock.isHidden()
    first.close()
    second = main_window(workers=0)
    assert second.overview_dock.isHidden()
    assert not second.canvas.vectors_box.isChecked()
    assert second.canvas.stride_box.value() == 3
    assert second.size().width() == 760
    assert second.recent_sessions()[0].endswith("review.h5")


def test_filter_by_status_and_metadata(main_window, make_session, qtbot):
    path = make_session(5)
    window = _open(main_window, qtbot, path)
    window.set_status("accepted")
    window.model.set_current("s03")
    window.set_status("accepted")
    panel = window.shot_list
    panel.status_filter.setCurrentText("accepted")
    assert panel.visible_ids() == ["s01", "s03"]
    panel.status_filter.setCurrentText("all shots")
    panel.text_filter.setText("seam_deg:0..20")  # seams -10, 0, 15, 30, 45
    assert panel.visible_ids() == ["s02", "s03"]
    panel.text_filter.setText("seam_deg>20")
    assert panel.visible_ids() == ["s04", "s05"]
    panel.text_filter.setText("s0")
    assert len(panel.visible_ids()) == 5
    panel.text_filter.clear()
    panel.view.sortByColumn(3, Qt.SortOrder.DescendingOrder)  # upper angle, largest first
    uppers = [window.model.record(s).proposed_deg("upper") for s in panel.visible_ids()]
    assert uppers == sorted(uppers, reverse=True)


def test_unexpected_error_is_logged_and_shown(main_window, make_session, qtbot):
    import logging

    from app.qt.window import install_excepthook, log_file

    path = make_session(2)
    window = _open(main_window, qtbot, path)
    handler = logging.FileHandler(log_file(), encoding="utf-8")
    logging.getLogger("wakeline").addHandler(handler)
    saved = sys.excepthook
    install_excepthook(window)
    try:
        try:
            raise RuntimeError("a slot went wrong")
        except RuntimeError as exc:
            sys.excepthook(type(exc), exc, exc.__traceback__)
    finally:
        sys.excepthook = saved  # the hook holds the window
        logging.getLogger("wakeline").removeHandler(handler)
        handler.close()
    assert "a slot went wrong" in window.last_problem
    assert "a slot went wrong" in log_file().read_text(encoding="utf-8")
    assert window.model.session is not None


def test_shortcut_list_names_the_review_keys(main_window):
    window = main_window(workers=0)
    html = window.shortcut_table_html()
    for text in ("Accept proposal", "Mark unusable", "Nudge upper mark rearward 0.5°", "Undo"):
        assert text in html
    assert window.export_menu.title() == "&Export"


def test_the_key_list_names_every_key_and_quit_has_one(main_window):
    """F1 lists the list's, the note field's and every action's keys (README's table)."""
    from PySide6.QtGui import QKeySequence

    window = main_window(workers=0)
    quit_keys = window.act_quit.shortcut()
    assert not quit_keys.isEmpty()
    rows = dict(window.shortcut_rows())
    assert rows[quit_keys.toString(QKeySequence.SequenceFormat.NativeText)] == "Quit"
    html = window.shortcut_table_html()
    for keys in ("Shift+Up / Shift+Down, Ctrl+A", "Ctrl+Return / Esc", "Ctrl+Shift+Z, Ctrl+Y"):
        assert keys in html
    for action in window.actions():
        for key in action.shortcuts():
            assert key.toString(QKeySequence.SequenceFormat.NativeText) in html
    # undo names the key's job, not the step it would take now
    window.act_undo.setText("Undo Nudge upper mark to -9.6°")  # as the undo stack sets it
    assert "to -9.6°" not in window.shortcut_table_html()
    assert "Undo the last edit" in window.shortcut_table_html()


def test_closing_during_processing_stops_the_worker(main_window, make_session, qtbot):
    path = make_session(3, processed=False)
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    assert window.open_session(path)
    job = window.start_processing()
    ended = []
    job.finished.connect(ended.append)
    window.close()  # must not leave a running thread behind
    assert not job.is_running() and ended and ended[0].cancelled
    assert window.model.session is None


def test_run_window_opens_the_session_and_returns_when_closed(make_session, qtbot):
    from PySide6.QtCore import QTimer

    from app.qt.window import MainWindow, run_window

    path = make_session(2)
    seen = {}
    hook_before = sys.excepthook

    def close_when_open():
        windows = [w for w in QApplication.topLevelWidgets() if isinstance(w, MainWindow)]
        if not windows or windows[0].model.session is None:
            QTimer.singleShot(0, close_when_open)  # not yet: look again on the next turn
            return
        seen["title"] = windows[0].windowTitle()
        seen["current"] = windows[0].model.current_id
        seen["hook"] = sys.excepthook
        windows[0].close()

    QTimer.singleShot(0, close_when_open)
    assert run_window(path) == 0
    assert "review" in seen["title"] and seen["current"] == "s01"
    assert seen["hook"] is not hook_before and sys.excepthook is hook_before


def test_the_next_shot_is_read_ahead_in_the_direction_of_travel(main_window, make_session, qtbot):
    path = make_session(4)
    window = _open(main_window, qtbot, path)
    qtbot.waitUntil(lambda: window.model._results.get("s02") is not None, timeout=30_000)
    window.model.set_current("s04")
    window.model.set_current("s03")  # moving up: s02 is next
    window.model._results.clear()
    window.model.set_current("s02")
    qtbot.waitUntil(lambda: window.model._results.get("s01") is not None, timeout=30_000)
    assert window.model._results.get("s03") is None


def test_right_click_during_a_drag_puts_the_mark_back(main_window, make_session, qtbot):
    path = make_session(2)
    window = _open(main_window, qtbot, path, show=True)
    canvas = window.canvas
    proposal, start, end = _upper_mark_drag(window, "s01", 20.0)
    viewport = canvas.graphics.viewport()
    left, right = Qt.MouseButton.LeftButton, Qt.MouseButton.RightButton

    def cancel():
        assert canvas.mark_angle("upper") != pytest.approx(proposal, abs=1.0)
        _mouse(viewport, QEvent.Type.MouseButtonPress, end, left | right, right)
        _mouse(viewport, QEvent.Type.MouseButtonRelease, end, left, right)

    _drag(qtbot, viewport, start, end, during=cancel)
    assert canvas.mark_angle("upper") == pytest.approx(proposal)
    assert window.model.record("s01").pick.status == "to review"
    assert window.undo_stack.count() == 0
    assert window.readout.live_text("upper") == "—"


def test_a_damaged_stored_result_is_reported_in_place(main_window, make_session, qtbot):
    import h5py

    path = make_session(2)
    with h5py.File(path, "r+") as f:
        groups = [name for name in f["shots"] if "result" in f["shots"][name]]
        del f["shots"][sorted(groups)[1]]["result"]["dx_px"]  # s02's vectors are gone
    window = _open(main_window, qtbot, path)
    window.model.set_current("s02")
    # the store's own words, once: the shot and the damage; the fix in the window's words
    message = window.canvas.message.text()
    assert message.startswith("shot s02: result stored in ") and "is damaged" in message
    assert message.endswith("; reprocess it (Ctrl+Shift+P)") and message.count("shot s02:") == 1
    assert window.canvas.shot.frame_a is not None  # the frames still show
    window.model.set_current("s01")
    assert window.canvas.shot.result is not None


def test_processing_settings_are_saved_in_the_session_and_mark_shots_stale(main_window,
                                                                           make_session, qtbot):
    path = make_session(2)
    window = _open(main_window, qtbot, path)
    dialog = window.edit_processing_settings()
    assert dialog.passes.text() == "32" and dialog.overlap.value() == 50  # the test session's
    dialog.passes.setText("48, 24/75, abc")
    dialog.accept()
    assert "abc" in dialog.problem.text() and dialog.isVisible()  # stays open, nothing saved
    assert window.model.session.processing_settings()["piv"]["passes"][0]["window_px"] == 32
    dialog.passes.setText("48, 24/75")
    dialog.flight.setText("181.5")
    dialog.workers.setValue(1)
    dialog.accept()
    saved = window.model.session.processing_settings()
    assert [p["window_px"] for p in saved["piv"]["passes"]] == [48, 24]
    assert saved["piv"]["passes"][1]["overlap"] == 0.75 and saved["flight_deg"] == 181.5
    assert all(window.model.session.needs_processing(s) for s in ("s01", "s02"))
    assert "2 shots need processing" in window.statusBar().currentMessage()
    assert int(window.settings.value("processing/workers")) == 1  # kept for this computer


def test_the_readout_names_a_result_whose_uncertainty_is_from_an_earlier_version(
        main_window, make_session, qtbot):
    from dataclasses import replace

    window = _open(main_window, qtbot, make_session(2))
    shot_id = window.model.current_id
    current = window.model.record(shot_id)
    window.readout.show_record(current)
    assert "earlier way" not in window.readout.notes.text()
    window.readout.show_record(replace(current, software_version="0.2.0"))
    assert "wakeline 0.2.0" in window.readout.notes.text()
    assert not window.readout.notes.isHidden()




def test_the_window_keeps_its_preferences_in_wakeline_home(tmp_path, monkeypatch):
    # one folder for every per-user file of wakeline when WAKELINE_HOME is set (core.paths)
    from app.qt.window import app_settings

    monkeypatch.setenv("WAKELINE_HOME", str(tmp_path / "home"))
    settings = app_settings()
    settings.setValue("view/probe", 1)
    settings.sync()
    assert settings.fileName() == str(tmp_path / "home" / "wakeline.ini")
    assert (tmp_path / "home" / "wakeline.ini").exists()


def test_without_wakeline_home_the_preferences_are_in_qts_place_for_them(monkeypatch,
                                                                          _private_user_files):
    # the user's settings folder (~/.config on Linux), which the tests point at a temp folder
    from app.qt.window import app_settings

    monkeypatch.delenv("WAKELINE_HOME")
    name = app_settings().fileName()
    assert name.startswith(str(_private_user_files / "settings")) and name.endswith(
        "wakeline.ini")


def test_the_readout_keeps_the_width_its_angles_need_for_the_shot_shown(
        main_window, make_session, qtbot):
    # measured once the new texts are laid out (it once took the previous shot's width), from
    # the angles alone: a long shot id wraps instead of widening the panel
    from dataclasses import replace

    window = _open(main_window, qtbot, make_session(2))
    readout = window.readout
    current = window.model.record(window.model.current_id)
    readout.show_record(None)
    readout.show_record(current)
    assert readout.minimumWidth() >= readout._angles.minimumSizeHint().width()
    readout.show_record(replace(current, shot_id="a_shot_id_of_fifty_characters_from_a_big_camera"))
    assert readout.minimumWidth() < 400
