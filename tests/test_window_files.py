"""The review window's files headless: importing a folder (with corrected values, cancelled),
dropped and bad files, a session held elsewhere, the frame-file check."""

from __future__ import annotations

import pytest
from PySide6.QtCore import QMimeData, QPointF, Qt, QUrl
from PySide6.QtGui import QDropEvent
from test_window import _open

from core.store import Session

# The offscreen platform warns that it cannot propagate size hints; harmless (DEVELOPERS.md).
pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


def test_bad_drops_give_a_message_not_a_crash(main_window, make_session, qtbot, tmp_path):
    window = main_window(workers=0)
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"this is not a session")
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(junk))])
    drop = QDropEvent(QPointF(10, 10), Qt.DropAction.CopyAction, mime,
                      Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier)
    window.dropEvent(drop)
    assert "junk.h5" in window.last_problem
    assert window.model.session is None
    empty = tmp_path / "no_manifest"
    empty.mkdir()
    window.open_dropped(empty)
    assert "shots.csv" in window.last_problem
    path = make_session(2)
    window.open_dropped(__import__("pathlib").Path(path))
    assert window.model.session is not None


def test_import_folder_from_the_window_opens_the_new_session(main_window, qtbot, tmp_path):
    from conftest import synthetic_frames

    from core.images import write_frame

    folder = tmp_path / "launches"
    folder.mkdir()
    rows = ["shot,dt_s,scale_mm_per_px,ball_diameter_mm,seam_deg"]
    for index in range(2):
        frame_a, frame_b, truth = synthetic_frames(index)
        write_frame(folder / f"L{index}_a.tif", frame_a)
        write_frame(folder / f"L{index}_b.tif", frame_b)
        rows.append(f"L{index},{truth.dt_s},{truth.scale_mm_per_px},71.6,{10 * index}")
    rows.append("L9,2e-5,0.1,71.6,0")  # no frames: reported, the rest still imported
    (folder / "shots.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    job = window.import_folder(folder, tmp_path / "launches.h5")
    with qtbot.waitSignal(job.finished, timeout=60_000):
        pass
    assert window.model.shot_ids() == ["L0", "L1"]
    assert "L9" in window.last_problem
    assert window.model.current_id == "L0"
    assert "Not processed yet" in window.canvas.message.text()


def test_notes_of_a_clean_import_are_shown(main_window, qtbot, tmp_path):
    # every row goes in, but a diameter no cricket ball has (Laws of Cricket, Law 4) is noted
    from data.session_helpers import write_shot_folder

    folder = write_shot_folder(tmp_path / "launches", 2)
    lines = (folder / "shots.csv").read_text().splitlines()
    rows = [lines[0] + ",ball_type"] + [row.replace(",71.6,", ",97,") + ",cricket"
                                        for row in lines[1:]]
    (folder / "shots.csv").write_text("\n".join(rows) + "\n")
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    with qtbot.waitSignal(window.import_folder(folder, tmp_path / "l.h5").finished,
                          timeout=60_000):
        pass
    assert window.model.shot_ids() == ["S0", "S1"]
    assert window.last_problem.startswith("Import: notes to check: shot(s) S0, S1: a ball "
                                          "diameter of 97 mm does not fit a cricket ball")


@pytest.mark.parametrize("take", [True, False], ids=["taken", "declined"])
def test_corrected_values_found_on_import_are_offered_and_keep_the_picks(
        main_window, qtbot, tmp_path, take, monkeypatch):
    from data.session_helpers import write_shot_folder

    from core.store import Session

    folder = write_shot_folder(tmp_path / "launches", 2)
    session_path = tmp_path / "launches.h5"
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    with qtbot.waitSignal(window.import_folder(folder, session_path).finished, timeout=60_000):
        pass
    window.close_session()
    with Session.open(session_path) as session:
        session.set_pick("S1", status="adjusted", upper_deg=4.5)
    manifest = folder / "shots.csv"
    manifest.write_text(manifest.read_text().replace("S1,2e-05", "S1,2.5e-05"))
    asked, imports = [], []
    window._ask_take_corrections = lambda shots: asked.append(shots) or take
    from app.qt import window_session

    import_job = window_session.import_job
    monkeypatch.setattr(window_session, "import_job",
                        lambda *a, **k: imports.append(a[0]) or import_job(*a, **k))
    with qtbot.waitSignal(window.import_folder(folder, session_path).finished, timeout=60_000):
        pass
    if take:  # the second import, taking the values, runs and opens the session
        qtbot.waitUntil(lambda: window.job is None and window.model.session is not None,
                        timeout=60_000)
    assert asked == [["S1"]] and len(imports) == 1  # the folder is not read a second time
    record = window.model.record("S1")
    assert record.metadata["dt_s"] == (2.5e-05 if take else 2e-05)
    assert record.pick.status == "adjusted" and record.pick.upper_deg == 4.5
    if take:
        assert "the values of 1 corrected, the picks kept, 1 to be processed again" in (
            window.statusBar().currentMessage())
    else:
        assert "with other values (dt_s 2e-05 -> 2.5e-05)" in window.last_problem


def test_an_import_can_be_cancelled_and_opens_what_came_in(main_window, qtbot, tmp_path):
    from data.session_helpers import write_shot_folder

    folder = write_shot_folder(tmp_path / "launches", 20)
    window = main_window(workers=0)
    window.act_auto.setChecked(False)
    job = window.import_folder(folder, tmp_path / "launches.h5")
    assert not window.cancel_button.isHidden() and window.act_cancel.isEnabled()
    assert not window.act_settings.isEnabled()  # settings stay as they are while a job runs
    with qtbot.waitSignal(job.finished, timeout=60_000) as finished:
        window.cancel_processing()
    assert finished.args[0].cancelled
    assert "Import stopped" in window.statusBar().currentMessage()
    assert window.model.session is not None and len(window.model.shot_ids()) < 20


def test_a_session_held_elsewhere_is_reported_or_opened_read_only(main_window, make_session,
                                                                    qtbot):
    path = make_session(2)
    with Session.open(path):
        window = main_window(workers=0)
        window._ask_read_only = lambda text: False  # the user says no
        assert not window.open_session(path)
        assert "Session in use" in window.last_problem
        assert window.model.session is None
        window._ask_read_only = lambda text: True  # the user asks for a read-only look
        assert window.open_session(path)
        assert window.model.read_only and window.windowTitle().endswith("[read-only]")
        assert not window.review_actions["accepted"].isEnabled()
        assert not window.canvas.handle("upper").movable
        window.set_status("accepted")  # ignored, nothing written
        assert window.model.record("s01").pick.status == "to review"


def test_a_damaged_journal_line_is_offered_read_only_as_saved_before_it(main_window,
                                                                        make_session, qtbot):
    from pathlib import Path

    path = make_session(2)
    with Session.open(path) as s:
        s.set_pick("s01", status="unusable", reason="fog too thin")
        s._journal.close()  # as a killed window leaves it: the edit in the journal only
        journal = Path(path + ".journal").read_bytes()
        s._dirty = False
    Path(path + ".journal").write_bytes(journal + b'{"seq": 999999, "op": "bogus"}\n')
    window = main_window(workers=0)
    asked = []
    window.ask = lambda title, text, choices: asked.append(choices) or 1  # Cancel
    assert not window.open_session(path) and window.model.session is None
    assert asked == [("Open read-only without line 2 on", "Cancel")]
    window.ask = lambda title, text, choices: 0
    assert window.open_session(path)
    assert window.model.read_only and window.model.record("s01").pick.reason == "fog too thin"
    assert window.last_problem.startswith("Session opened read-only: ")
    assert "line 2 is damaged" in window.last_problem


def test_frame_check_reports_a_changed_file(main_window, make_session, qtbot, tmp_path):
    path = make_session(2)
    frame = tmp_path / "review_frames" / "s02_b.tif"
    frame.write_bytes(frame.read_bytes()[:-64] + bytes(64))
    window = _open(main_window, qtbot, path)
    window.model.set_current("s02")
    assert "s02" in window.canvas.message.text()  # shown in place when the shot is drawn
    job = window.check_frames()
    with qtbot.waitSignal(job.finished, timeout=30_000):
        pass
    assert "s02" in window.last_problem and "s01" not in window.last_problem


def test_a_bad_file_leaves_the_open_session_open(main_window, make_session, qtbot, tmp_path):
    path = make_session(2)
    window = _open(main_window, qtbot, path)
    junk = tmp_path / "other.h5"
    junk.write_bytes(b"\x89HDF\r\n\x1a\n but cut short")
    assert not window.open_session(junk)
    assert "other.h5" in window.last_problem
    assert window.model.session is not None and window.model.current_id == "s01"
    assert window.open_session(path)  # reopening the same file works (its lock is ours)


