"""The sheet, the table and the small things (issue 14, items 6 and 7): the header title whole,
the note's author and time apart from the decision's, angles to 0.01 deg, the README's key table,
file dialogs without a session's companion files, and where an imported session goes."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from conftest import answer_dialog
from data.make_session_v1 import EXPECTED as V1
from test_sheet import _pdf_text
from test_window import _open

from core.store import Session, write_table_csv

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")
ROOT = Path(__file__).resolve().parents[1]


def _rows(session_path, out):
    import csv

    with Session.open(session_path, writable=False) as session:
        write_table_csv(session, out)
    with open(out, encoding="utf-8", newline="") as fh:
        return {row["shot"]: row for row in csv.DictReader(fh)}


def test_a_note_keeps_its_own_author_in_an_old_session_too(tmp_path):
    """The committed format-1 session: its decision by "fixture" stays when another writes."""
    path = tmp_path / "old.h5"
    shutil.copyfile(ROOT / "tests" / "data" / "session_v1.h5", path)
    with Session.open(path) as session:
        before = session["R1"].pick
        assert before.who == "fixture" and before.note_who == ""  # not kept in format 1 files
        session.set_pick("R1", note="layer re-attaches", who="ben")
        after = session["R1"].pick
    assert (after.status, after.who, after.when) == (V1["R1"]["status"], "fixture", before.when)
    assert after.note == "layer re-attaches" and after.note_who == "ben" and after.note_when
    with Session.open(path) as session:  # kept through the compaction on close
        kept = session["R1"].pick
        assert (kept.who, kept.note_who) == ("fixture", "ben")
        session.set_pick("R1", status="accepted", who="cy")  # a new decision: its own author
        assert (session["R1"].pick.who, session["R1"].pick.note_who) == ("cy", "ben")
        assert [p.who for p in session.history("R1")] == ["fixture", "fixture", "fixture", "cy"]
    row = _rows(path, tmp_path / "t.csv")["R1"]
    assert (row["reviewed_by"], row["note_by"], row["review_note"]) == (
        "cy", "ben", "layer re-attaches")


def test_editing_the_note_in_the_window_leaves_the_decision_line(main_window, make_session,
                                                                 qtbot):
    window = _open(main_window, qtbot, make_session(2), show=True)
    window.act_advance.setChecked(False)
    window.set_status("accepted")
    decided = window.model.record("s01").pick
    window.readout.note.setFocus()
    qtbot.keyClicks(window.readout.note, "wake clipped")
    window.readout.note.clearFocus()  # leaving the field saves the note
    pick = window.model.record("s01").pick
    assert pick.note == "wake clipped" and (pick.who, pick.when) == (decided.who, decided.when)
    lines = window.readout.last_edit.text().splitlines()
    assert lines[0].startswith("accepted ") and lines[1].startswith("note ")


def test_angles_are_rounded_to_a_hundredth_in_the_table_and_on_the_sheet(make_session,
                                                                         tmp_path):
    from app.sheet import make_sheet

    path = make_session(2, name="A rather long session name that used to be cut short in the "
                                "page header of every page")
    with Session.open(path) as session:
        session.set_pick("s01", status="adjusted", upper_deg=11.234567, lower_deg=-3.0)
    rows = _rows(path, tmp_path / "t.csv")
    assert (rows["s01"]["upper_final_deg"], rows["s01"]["lower_final_deg"]) == ("11.23", "-3")
    assert re.fullmatch(r"-?\d+(\.\d{1,2})?", rows["s02"]["upper_proposed_deg"])
    with Session.open(path, writable=False) as session:
        assert session["s01"].pick.upper_deg == 11.234567  # the session keeps it whole
        report = make_sheet(session, tmp_path / "s.pdf")
    _, text = _pdf_text(report.path)
    assert "+11.23°" in text and "-3.00°" in text
    name = "A rather long session name that used to be cut short in the page header of every page"
    assert text.count(name) >= report.pages  # whole in every page header (and on the cover)
    assert "…" not in text


def test_the_readme_key_table_says_what_every_window_key_does(main_window):
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Reviewing from the keyboard", 1)[1].split("\n## ", 1)[0]
    rows = [line for line in section.splitlines() if line.startswith("| ")]
    table = "\n".join(rows)
    listed = {key for row in rows for key in re.split(r"\s*(?:/|,)\s*", row.split("|")[1].strip())}
    window = main_window(workers=0)
    missing = [f"{a.shortcut().toString()} ({a.text()})" for a in window.actions()
               if a.shortcut().toString() and a.text() and a.shortcut().toString() not in listed]
    assert not missing, f"keys of the window not in the README's table: {missing}"
    assert re.search(r"\| Ctrl\+P[^|]*\|[^|]*process the shots that need it", table)
    assert re.search(r"Ctrl\+Shift\+P[^|]*\|[^|]*reprocess this shot", table)


def test_file_dialogs_hide_the_files_a_session_keeps_beside_it(qtbot, tmp_path):
    from app.qt.file_dialogs import SESSION_FILTER, file_dialog

    for name in ("day.h5", "day.h5.journal", "day.h5.lock", "day.h5.tmp", "notes.txt"):
        (tmp_path / name).write_bytes(b"x")
    (tmp_path / "day.h5.pending").mkdir()
    (tmp_path / "frames").mkdir()
    dialog = file_dialog(None, "Open session", str(tmp_path), SESSION_FILTER)
    qtbot.addWidget(dialog)
    dialog.selectNameFilter("All files (*)")
    proxy = dialog.proxyModel()
    files = proxy.sourceModel()

    def names():  # the folder is read in the background
        root = proxy.mapFromSource(files.index(str(tmp_path)))
        return sorted(proxy.index(r, 0, root).data() for r in range(proxy.rowCount(root)))

    qtbot.waitUntil(lambda: "notes.txt" in names(), timeout=30_000)
    assert names() == ["day.h5", "frames", "notes.txt"]


def test_an_import_does_not_propose_the_program_folder_or_a_read_only_one(
        main_window, qtbot, tmp_path, monkeypatch):
    import app.qt.file_dialogs as dialogs

    shots = tmp_path / "raw" / "launches"
    shots.mkdir(parents=True)
    (tmp_path / "work").mkdir()
    beside = dialogs.new_session_path(shots, [tmp_path / "work"])
    assert beside == (tmp_path / "raw" / "launches.h5")
    sample = ROOT / "sample_runs"
    assert dialogs.new_session_path(sample, [tmp_path / "work"]) == \
        tmp_path / "work" / "sample_runs.h5"
    writable = dialogs.os.access
    monkeypatch.setattr(dialogs.os, "access",  # the raw data on a read-only share
                        lambda path, mode: writable(path, mode) and "raw" not in str(path))
    window = main_window(workers=0)
    window.settings.setValue("last_folder", str(tmp_path / "work"))
    proposed = {}

    def look(dialog):
        proposed["folder"] = dialog.directory().absolutePath()
        proposed["name"] = dialog.selectedFiles()[0]
        dialog.reject()

    answer_dialog(look)
    window.import_folder_dialog(str(shots))
    assert proposed["folder"] == str(tmp_path / "work")
    assert proposed["name"].endswith("launches.h5")
