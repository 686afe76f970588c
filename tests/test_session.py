"""The session store: picks and their history survive, reprocessing keeps picks, bad files are
named, the lock keeps a second writer out, old files still open."""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest
from data.make_session_v1 import EXPECTED as V1
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.store import (
    FORMAT_VERSION,
    Pick,
    Session,
    SessionLocked,
    import_folder,
)

ROOT = Path(__file__).resolve().parent.parent
V1_FILE = Path(__file__).resolve().parent / "data" / "session_v1.h5"


@pytest.fixture
def session_path(tmp_path):
    """A closed session of three referenced shots, none processed."""
    report = import_folder(write_shot_folder(tmp_path / "src", 3), tmp_path / "s.h5")
    assert report.problems == []
    return tmp_path / "s.h5"


def test_create_refuses_existing_file(session_path):
    with pytest.raises(WakelineError, match="already exists"):
        Session.create(session_path)


def test_pick_and_history_survive_close_and_reopen(session_path):
    with Session.open(session_path) as s:
        s.save_result("S1", fake_result(s.settings_for("S1"), 6.0, -2.0))
        s.set_pick("S1", status="accepted", who="ann")
        s.set_pick("S1", status="adjusted", upper_deg=8.5, note="later", who="ben")
    with Session.open(session_path, writable=False) as s:
        rec = s["S1"]
        assert rec.pick.status == "adjusted" and rec.pick.upper_deg == 8.5
        assert rec.final_deg("upper") == 8.5
        assert rec.final_deg("lower") == -2.0  # side left alone keeps the proposal
        history = s.history("S1")
        assert [(p.status, p.who) for p in history] == [("accepted", "ann"), ("adjusted", "ben")]
        assert all(p.when.endswith("Z") for p in history)
        assert s.history("S0") == []


def test_edits_are_kept_by_the_journal_without_close(session_path):
    s = Session.open(session_path)
    s.set_pick("S0", status="unusable", reason="ball out of the sheet")
    journal = session_path.with_name("s.h5.journal")
    assert journal.exists()
    s._journal.close()  # as if the process died: no close(), no compaction
    s._lock.release()
    with Session.open(session_path) as again:
        assert again["S0"].pick.reason == "ball out of the sheet"
        assert len(again.history("S0")) == 1
    assert not journal.exists()  # folded into the snapshot on close
    with Session.open(session_path, writable=False) as again:
        assert again["S0"].pick.status == "unusable"


def test_reprocessing_updates_the_proposal_and_keeps_the_pick(session_path):
    with Session.open(session_path) as s:
        s.save_result("S2", fake_result(s.settings_for("S2"), 4.0, -1.0))
        s.set_pick("S2", status="adjusted", lower_deg=3.0)
        s.save_result("S2", fake_result(s.settings_for("S2"), 7.0, 2.0))
        s.save_failure("S2", "frame file gone")
    with Session.open(session_path, writable=False) as s:
        rec = s["S2"]
        assert rec.proposed_deg("upper") == 7.0 and rec.proposed_deg("lower") == 2.0
        assert rec.pick.status == "adjusted" and rec.pick.lower_deg == 3.0
        assert rec.state == "failed" and rec.failure == "frame file gone"
        assert s.load_result("S2").separation.upper.angle_deg == 7.0  # last good result kept


def test_a_result_whose_uncertainty_an_earlier_version_made_is_not_up_to_date(
        session_path, monkeypatch):
    # 0.3 changed how the proposals' ± is made (core.results.UNCERTAINTY_SINCE): `process`
    # measures such shots again, keeping the analyst's pick
    monkeypatch.setattr("core.store.session.__version__", "0.2.0")
    with Session.open(session_path) as s:
        s.save_result("S1", fake_result(s.settings_for("S1"), 4.0, -1.0))
        s.set_pick("S1", status="adjusted", upper_deg=5.5)
    monkeypatch.undo()
    with Session.open(session_path) as s:
        assert s["S1"].software_version == "0.2.0" and s.needs_processing("S1")
        s.save_result("S1", fake_result(s.settings_for("S1"), 4.2, -1.0))
        assert not s.needs_processing("S1") and s["S1"].pick.upper_deg == 5.5


def test_corrected_values_keep_the_pick_and_mark_the_shot_for_processing(session_path):
    with Session.open(session_path) as s:
        s.save_result("S1", fake_result(s.settings_for("S1"), 4.0, -1.0))
        s.set_pick("S1", status="adjusted", upper_deg=5.5)
        assert not s.needs_processing("S1")
        values = {**s["S1"].metadata, "dt_s": 2.5e-5}
        s.set_shot_values("S1", values)
        assert s.needs_processing("S1") and s.settings_for("S1").dt_s == 2.5e-5
    for _ in range(2):  # from the journal, then from the snapshot a writer's close compacts
        with Session.open(session_path) as s:
            rec = s["S1"]
            assert rec.metadata["dt_s"] == 2.5e-5 and s.needs_processing("S1")
            assert rec.pick.status == "adjusted" and rec.pick.upper_deg == 5.5
            assert rec.proposed_deg("upper") == 4.0  # the last result stays until processed
            s.compact()


def test_result_arrays_round_trip_with_units(session_path):
    with Session.open(session_path) as s:
        original = fake_result(s.settings_for("S0"))
        s.save_result("S0", original)
        pending = s.load_result("S0")  # read from the pending file before compaction
    with Session.open(session_path, writable=False) as s:
        stored = s.load_result("S0")
    for result in (pending, stored):
        for name, array in original.arrays().items():
            np.testing.assert_array_equal(result.arrays()[name], array)
        assert result.flight.direction_deg == 180.0
    with h5py.File(session_path, "r") as f:
        assert f.attrs["format_version"] == FORMAT_VERSION
        result = f["shots/S0/result"]
        assert result["u_m_s"].attrs["units"] == "m/s"
        assert result["vorticity_1_s"].attrs["units"] == "1/s"
        assert result["dx_px"].attrs["units"] == "px"


def test_records_read_no_field_data(session_path, monkeypatch):
    with Session.open(session_path) as s:
        for shot_id in s:
            s.save_result(shot_id, fake_result(s.settings_for(shot_id)))
    s = Session.open(session_path, writable=False)

    def refuse(*args, **kwargs):
        raise AssertionError("records() opened the HDF5 file")

    monkeypatch.setattr(h5py, "File", refuse)
    records = list(s.values())
    assert [r.shot_id for r in records] == ["S0", "S1", "S2"]
    assert records[1].proposed_deg("upper") == 5.0 and records[1].uncertainty_deg("upper") == 1.5
    assert records[1].metadata["seam_deg"] == 10.0
    s.close()


def test_second_writer_gets_a_clear_read_only_message(session_path):
    with Session.open(session_path) as s:
        code = (
            "import sys; from core.store import Session, SessionLocked\n"
            f"try:\n    Session.open({str(session_path)!r})\n"
            "except SessionLocked as exc:\n    print(exc); sys.exit(3)\n"
        )
        other = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, check=False,
                               text=True, timeout=60)
        assert other.returncode == 3, other.stderr
        assert f"pid {os.getpid()}" in other.stdout and "read-only" in other.stdout
        with Session.open(session_path, writable=False) as reader:
            assert reader.read_only and list(reader) == ["S0", "S1", "S2"]
            with pytest.raises(WakelineError, match="read-only"):
                reader.set_pick("S0", status="accepted")
        s.set_pick("S0", status="accepted")


def test_second_writer_in_the_same_process_is_refused(session_path):
    with Session.open(session_path), pytest.raises(SessionLocked):
        Session.open(session_path)


def test_stale_lock_of_a_dead_process_is_recovered(session_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    lock = session_path.with_name("s.h5.lock")
    lock.write_text(json.dumps({"host": socket.gethostname(), "pid": dead.pid, "since": "x"}))
    with Session.open(session_path) as s:
        s.set_pick("S1", status="accepted")
    assert not lock.exists()


def test_lock_of_another_host_is_respected(session_path):
    lock = session_path.with_name("s.h5.lock")
    lock.write_text(json.dumps({"host": "elsewhere.invalid", "pid": 1, "since": "x"}))
    with pytest.raises(SessionLocked, match="elsewhere.invalid"):
        Session.open(session_path)


def test_torn_last_journal_line_is_ignored_and_appending_goes_on(session_path):
    s = Session.open(session_path)
    s.set_pick("S0", status="accepted")
    s._journal.close()
    s._lock.release()
    journal = session_path.with_name("s.h5.journal")
    with open(journal, "ab") as fh:
        fh.write(b'{"seq": 99, "op": "pick", "shot": "S0", "pick": {"stat')  # killed mid-write
    with Session.open(session_path, writable=False) as reader:
        assert reader["S0"].pick.status == "accepted"
    s = Session.open(session_path)
    s.set_pick("S0", status="unusable", reason="blurred")
    s._journal.close()
    s._lock.release()
    with Session.open(session_path) as again:
        assert [p.status for p in again.history("S0")] == ["accepted", "unusable"]


def test_compaction_killed_before_dropping_the_journal_replays_nothing_twice(session_path):
    journal = session_path.with_name("s.h5.journal")
    s = Session.open(session_path)
    s.save_result("S1", fake_result(s.settings_for("S1")))
    s.set_pick("S1", status="accepted")
    kept = journal.read_bytes()
    s.close()  # snapshot replaced, journal dropped; now put the journal back as if killed
    journal.write_bytes(kept)
    with Session.open(session_path) as s:
        assert len(s.history("S1")) == 1
        s.set_pick("S1", status="adjusted", upper_deg=1.0)
    with Session.open(session_path, writable=False) as s:
        assert [p.status for p in s.history("S1")] == ["accepted", "adjusted"]
        assert s.load_result("S1") is not None


def test_leftovers_of_a_killed_writer_are_removed(session_path):
    pending = session_path.with_name("s.h5.pending")
    pending.mkdir()
    (pending / "000000042.h5.tmp").write_bytes(b"half")
    (pending / "000000043.h5").write_bytes(b"not referenced by the journal")
    session_path.with_name("s.h5.tmp").write_bytes(b"half a snapshot")
    with Session.open(session_path) as s:
        assert list(s) == ["S0", "S1", "S2"]
    assert not session_path.with_name("s.h5.tmp").exists()
    assert not pending.exists() or not any(pending.iterdir())


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (None, r"damaged or truncated session file \(\d+ of its \d+ bytes are there\)$"),
        (b"shot,dt_s\n", "not an HDF5 file"),
        (b"", "damaged or truncated session file"),
    ],
)
def test_bad_session_files_give_one_line_naming_the_file(session_path, content, message):
    with Session.open(session_path) as s:
        s.set_pick("S0", status="accepted")
    if content is None:  # truncated: the first half of a real session file
        content = session_path.read_bytes()[: session_path.stat().st_size // 2]
    session_path.write_bytes(content)
    journal = session_path.with_name("s.h5.journal")
    journal.write_text("kept\n")
    for writable in (True, False):
        with pytest.raises(WakelineError, match=message) as info:
            Session.open(session_path, writable=writable)
        text = str(info.value)
        assert str(session_path) in text and "\n" not in text
    assert session_path.read_bytes() == content and journal.read_text() == "kept\n"
    assert not session_path.with_name("s.h5.lock").exists()


def test_foreign_hdf5_file_is_named(tmp_path):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f["data"] = np.zeros(3)
    with pytest.raises(WakelineError, match=r"other\.h5: not a wakeline session"):
        Session.open(path)


def test_newer_format_version_is_refused_with_a_message(session_path):
    with h5py.File(session_path, "a") as f:
        f.attrs["format_version"] = FORMAT_VERSION + 1
    with pytest.raises(WakelineError, match="newer than this wakeline"):
        Session.open(session_path, writable=False)


def test_committed_format_1_file_still_opens():
    with Session.open(V1_FILE, writable=False) as s:
        assert s.name == V1["name"] and list(s) == V1["shots"]
        r1, r2 = s["R1"], s["R2"]
        assert r1.proposed_deg("upper") == V1["R1"]["upper_proposed_deg"]
        assert r1.proposed_deg("lower") == V1["R1"]["lower_proposed_deg"]
        assert r1.pick.status == V1["R1"]["status"]
        assert r1.final_deg("upper") == V1["R1"]["final_upper_deg"]
        assert len(s.history("R1")) == V1["R1"]["edits"]
        assert s.load_result("R1").field.dx_px.shape == V1["R1"]["shape"]
        assert r2.state == "failed" and r2.failure == V1["R2"]["failure"]
        frame_a, _ = s.load_frames("R2")
        assert frame_a.shape == (48, 64) and frame_a.dtype == np.float32


def test_committed_format_1_file_is_rewritten_in_the_current_format(tmp_path):
    copy = tmp_path / "old.h5"
    shutil.copyfile(V1_FILE, copy)
    with Session.open(copy) as s:
        s.set_pick("R2", status="unusable", reason="no ball")
    with Session.open(copy, writable=False) as s:
        assert len(s.history("R1")) == V1["R1"]["edits"]
        assert s["R2"].pick.reason == "no ball"
        assert s.load_result("R1") is not None


def test_changed_and_missing_frame_files_are_reported_per_shot(session_path):
    src = session_path.parent / "src"
    with open(src / "S1_b.tif", "ab") as fh:
        fh.write(b"\0")
    (src / "S2_a.tif").unlink()
    with Session.open(session_path, writable=False) as s:
        problems = s.check_frames()
        assert set(problems) == {"S1", "S2"}
        assert "S1_b.tif changed since import" in problems["S1"]
        assert "S2_a.tif not found" in problems["S2"]
        with pytest.raises(WakelineError, match="shot S1: frame file .*S1_b.tif changed"):
            s.load_frames("S1")
        assert s.load_frames("S0")[0].shape == (192, 256)


def test_frame_files_gone_unreadable_or_turned_folders_are_named(session_path, monkeypatch):
    # an unreadable frame once reached the window as a PermissionError traceback
    from core.store import frames

    src = session_path.parent / "src"
    (src / "S2_a.tif").unlink()
    (src / "S2_a.tif").mkdir()
    real = frames.sha256_of

    def refused(path):
        if path.name == "S1_a.tif":
            raise PermissionError(13, "Permission denied", str(path))
        return real(path)

    monkeypatch.setattr(frames, "sha256_of", refused)
    with Session.open(session_path, writable=False) as s:
        problems = s.check_frames()
        assert problems["S1"].endswith("S1_a.tif cannot be read (Permission denied)")
        assert problems["S2"].endswith("S2_a.tif is a folder")
        with pytest.raises(WakelineError, match="S1_a.tif cannot be read"):
            s.load_frames("S1")


def test_a_session_copied_away_from_its_frames_says_where_it_looks_for_them(session_path,
                                                                            tmp_path):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    shutil.copyfile(session_path, elsewhere / "copy.h5")
    said = ("not found .the session keeps its frames' places relative to its own folder, "
            ".*elsewhere: if the session file was moved or copied, move its frames with it")
    with (Session.open(elsewhere / "copy.h5", writable=False) as s,
          pytest.raises(WakelineError, match=said)):
        s.load_frames("S0")


def test_embedded_frames_do_not_need_the_source_folder(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    import_folder(src, tmp_path / "e.h5", embed=True)
    with Session.open(tmp_path / "e.h5", writable=False) as s:
        expected = s.load_frames("S1")
    shutil.rmtree(src)
    with Session.open(tmp_path / "e.h5", writable=False) as s:
        frame_a, frame_b = s.load_frames("S1")
        assert s.check_frames() == {}
    np.testing.assert_array_equal(frame_a, expected[0])
    np.testing.assert_array_equal(frame_b, expected[1])


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"status": "done"}, "not one of"),
        ({"status": "unusable"}, "needs a reason"),
        ({"status": "adjusted"}, "needs an upper or lower angle"),
        ({"upper_deg": float("nan")}, "finite angle"),
    ],
)
def test_bad_picks_are_refused_and_nothing_is_written(session_path, kwargs, message):
    with Session.open(session_path) as s:
        with pytest.raises(WakelineError, match=message):
            s.set_pick("S0", **kwargs)
        assert s.history("S0") == [] and s["S0"].pick == Pick()


def test_a_session_is_a_mapping_of_shot_records(session_path):
    with Session.open(session_path, writable=False) as s:
        assert "S1" in s and "S9" not in s and len(s) == 3
        assert list(s) == ["S0", "S1", "S2"] and [r.shot_id for r in s.values()] == list(s)
        assert s.get("S9") is None and s.get("S1").metadata["seam_deg"] == 10.0
        with pytest.raises(KeyError):
            s["S9"]
        s["S1"].metadata["seam_deg"] = 99.0  # a copy: the session is not changed through it
        assert s["S1"].metadata["seam_deg"] == 10.0


def test_delete_removes_a_session_with_its_companion_files(session_path):
    s = Session.open(session_path)
    s.set_pick("S0", status="accepted")
    with pytest.raises(SessionLocked):  # not while it is open for writing
        Session.delete(session_path)
    s._journal.close()  # as if the process died: its journal is left behind
    s._lock.release()
    session_path.with_name("s.h5.tmp").write_bytes(b"half a snapshot")
    Session.delete(session_path)
    assert sorted(p.name for p in session_path.parent.iterdir()) == ["src"]


def test_unknown_shot_is_named(session_path):
    with Session.open(session_path, writable=False) as s, pytest.raises(
        WakelineError, match="^shot S9: not in s.h5$"
    ):
        s["S9"]


def test_settings_change_marks_shots_for_processing(session_path):
    with Session.open(session_path) as s:
        s.save_result("S0", fake_result(s.settings_for("S0")))
        assert not s.needs_processing("S0") and s.needs_processing("S1")
        s.set_processing_settings({"piv": {"passes": [{"window_px": 48, "overlap": 0.5}]}})
        assert s.needs_processing("S0")
        assert s.settings_for("S0").piv.passes[0].window_px == 48
        assert s.settings_for("S0").dt_s == 2e-5
        with pytest.raises(WakelineError, match="unknown key"):
            s.set_processing_settings({"windows": 3})
        # inside the PIV block too: a misspelt name or a cut-off window once kept the default
        for piv, said in (({"pases": []}, "unknown key.*pases"),
                          ({"passes": [{"window_px": 64, "overlapp": 0.7}]}, "overlapp"),
                          ({"passes": [{"window_px": 64.5, "overlap": 0.5}]}, "64.5 px"),
                          ({"passes": [[1e308, 0.5]]}, "from 8 to 4096")):
            with pytest.raises(WakelineError, match=said):
                s.set_processing_settings({"piv": piv})
    with Session.open(session_path, writable=False) as s:
        assert s.processing_settings()["piv"]["passes"][0]["window_px"] == 48


def test_repeated_reprocessing_does_not_grow_the_file_without_bound(session_path):
    sizes, unused = [], []
    for run in range(8):
        with Session.open(session_path) as s:
            for shot_id in s:
                s.save_result(shot_id, fake_result(s.settings_for(shot_id), float(run),
                                                   shape=(40, 50)))
            s.set_pick("S0", status="adjusted", upper_deg=float(run))
        sizes.append(session_path.stat().st_size)
        with h5py.File(session_path, "r") as f:
            unused.append(int(f.attrs["unused_bytes"]))
    # Replaced results leave dead space until a whole rewrite reclaims it.
    assert max(unused) > 0 and 0 in unused[1:]
    assert max(sizes) < 2.0 * sizes[0]
    with Session.open(session_path, writable=False) as s:
        assert s["S2"].proposed_deg("upper") == 7.0
        assert s.load_result("S2").separation.upper.angle_deg == 7.0
        assert [p.upper_deg for p in s.history("S0")] == [float(r) for r in range(8)]
        with h5py.File(session_path, "r") as f:
            assert sorted(f["shots"]) == ["S0", "S1", "S2"]


def test_reader_opening_during_a_compaction_sees_a_consistent_session(session_path, monkeypatch):
    import core.store.session as store

    writer = Session.open(session_path)
    writer.save_result("S0", fake_result(writer.settings_for("S0"), 3.0))
    writer.set_pick("S0", status="accepted")
    real_read = store.read_snapshot
    calls = []

    def read_then_writer_compacts(path):
        snapshot = real_read(path)
        if not calls:  # the writer replaces the snapshot and drops the journal right now
            writer.compact()
        calls.append(path)
        return snapshot

    monkeypatch.setattr(store, "read_snapshot", read_then_writer_compacts)
    with Session.open(session_path, writable=False) as reader:
        assert len(calls) == 2  # read again after seeing the file change
        assert reader["S0"].pick.status == "accepted"
        assert reader.load_result("S0").separation.upper.angle_deg == 3.0
    writer.close()


def test_stale_lock_removal_puts_back_a_lock_taken_meanwhile(session_path):
    from core.store.lock import Lock

    lock = Lock(session_path)
    fresh = {"host": socket.gethostname(), "pid": os.getpid(), "since": "now"}
    lock.path.write_text(json.dumps(fresh))  # another opener won the race a moment ago
    lock._remove_stale({"host": socket.gethostname(), "pid": 999999999, "since": "long ago"})
    assert json.loads(lock.path.read_text()) == fresh
    assert [p.name for p in session_path.parent.glob("s.h5.lock*")] == ["s.h5.lock"]


def test_a_failed_journal_write_leaves_no_partial_line(session_path, monkeypatch):
    s = Session.open(session_path)
    s.set_pick("S0", status="accepted")
    real_write = os.write

    def disk_full(fd, data):
        real_write(fd, bytes(data)[:7])
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "write", disk_full)
    with pytest.raises(WakelineError,
                       match=r"s\.h5: could not save the edit of shot S1 \(No space left"):
        s.set_pick("S1", status="accepted")
    monkeypatch.setattr(os, "write", real_write)
    assert s["S1"].pick.status == "to review"  # not applied either
    s.set_pick("S2", status="accepted")
    s._journal.close()
    s._lock.release()
    with Session.open(session_path, writable=False) as again:
        assert [again[x].pick.status for x in ("S0", "S1", "S2")] == [
            "accepted", "to review", "accepted"]


def test_a_new_result_never_changes_a_decided_angle_silently(session_path):
    with Session.open(session_path) as s:
        for shot in ("S0", "S1", "S2"):
            assert s.save_result(shot, fake_result(s.settings_for(shot), 5.0, -3.0)) == ""
        s.set_pick("S0", status="accepted", who="ana")
        s.set_pick("S1", status="adjusted", upper_deg=6.0, who="ana")  # lower left at -3.0
        s.set_pick("S2", status="accepted", who="ana")
        # measured again: the same proposals leave the decision alone
        assert s.save_result("S2", fake_result(s.settings_for("S2"), 5.0, -3.0)) == ""
        assert s["S2"].pick.status == "accepted" and len(s.history("S2")) == 1
        # the accepted proposal moved: the number accepted is gone, back to review, in the same
        # journal line as the result (a crash keeps both or neither)
        journal = session_path.with_name("s.h5.journal")
        lines = len(journal.read_bytes().splitlines())
        said = s.save_result("S0", fake_result(s.settings_for("S0"), 5.0, -3.4))
        assert len(journal.read_bytes().splitlines()) == lines + 1
        assert said == ("the proposal accepted before moved (lower -3.00° → -3.40°): "
                        "back to review")
        assert (s["S0"].pick.status, s["S0"].pick.who) == ("to review", "wakeline")
        assert s["S0"].final_deg("lower") is None
        # the adjusted pick keeps the lower angle it stood behind
        said = s.save_result("S1", fake_result(s.settings_for("S1"), 5.5, -3.4))
        assert said == "the adjusted pick keeps lower -3.00° (the proposal there moved)"
        assert [s["S1"].final_deg(side) for side in ("upper", "lower")] == [6.0, -3.0]
        assert s["S1"].pick.who == "ana"
        # a side with no proposal before has no angle to keep: the new one stands, named
        s.save_result("S2", fake_result(s.settings_for("S2"), 5.0, None))
        s.set_pick("S2", status="adjusted", upper_deg=4.0, who="ana")
        said = s.save_result("S2", fake_result(s.settings_for("S2"), 5.0, -2.0))
        assert said == "the adjusted pick takes the new proposal on lower (-2.00°): check it"
        assert s["S2"].final_deg("lower") == -2.0
    with Session.open(session_path, writable=False) as s:  # saved with the result
        assert [p.status for p in s.history("S0")] == ["accepted", "to review"]
        assert s["S1"].pick.lower_deg == -3.0


def _flown(result, direction_deg: float, centre=(100.0, 80.0), source="ball displacement"):
    """``result`` with a ball (radius 30 px at ``centre`` in both frames) flying
    ``direction_deg`` (``source``: how the flight was found)."""
    from dataclasses import replace

    from core.geometry import flight_unit
    from core.results import BallFit

    fx, fy = flight_unit(direction_deg)
    result.ball_a = BallFit((centre[0] - 4 * fx, centre[1] - 4 * fy), 30.0)
    result.ball_b = BallFit((centre[0] + 4 * fx, centre[1] + 4 * fy), 30.0)
    result.flight = replace(result.flight, direction_deg=direction_deg,
                            displacement_px=(8 * fx, 8 * fy), source=source)
    return result


def _turned(s, shot: str, before: float, after: float, **pick) -> str:
    """Measure ``shot`` flying ``before``, adjust it to ``pick``, measure it again flying
    ``after``: what became of the decision."""
    s.save_result(shot, _flown(fake_result(s.settings_for(shot), 5.0, -3.0), before))
    s.set_pick(shot, status="adjusted", who="ana", **pick)
    return s.save_result(shot, _flown(fake_result(s.settings_for(shot), 5.0, -3.0), after))


def test_an_adjusted_pick_keeps_its_marks_places_when_the_flight_is_corrected(session_path):
    # frames found swapped (or a flight direction corrected) turn the flight: the analyst's
    # angles were read against the old one, so the marks keep their places on the ball and
    # their angles follow (closed form: a flight turned by 180 deg keeps the upper side on top
    # and turns rearward to forward, theta -> -theta: core.geometry)
    with Session.open(session_path) as s:
        s.save_result("S0", _flown(fake_result(s.settings_for("S0"), None, None), 0.0))
        s.set_pick("S0", status="adjusted", upper_deg=-12.0, lower_deg=-10.0, who="ana")
        said = s.save_result("S0", _flown(fake_result(s.settings_for("S0"), 8.0, 6.0), 180.0))
        assert said == ("the flight turned by 180.0° (0.0° → 180.0°): the adjusted marks keep "
                        "their places on the ball (upper -12.00° → +12.00°, lower -10.00° → "
                        "+10.00°)")
        assert (s["S0"].final_deg("upper"), s["S0"].final_deg("lower")) == pytest.approx(
            (12.0, 10.0))
        assert (s["S0"].pick.status, s["S0"].pick.who) == ("adjusted", "ana")
        # a side left at the proposal is carried too; the ball moved (a corrected circle) and
        # the flight turned 10 deg: the mark keeps its place relative to the ball
        s.save_result("S1", _flown(fake_result(s.settings_for("S1"), 5.0, -3.0), 180.0))
        s.set_pick("S1", status="adjusted", upper_deg=7.0, who="ana")
        said = s.save_result("S1", _flown(fake_result(s.settings_for("S1"), 2.0, 1.0), 190.0,
                                          centre=(103.0, 79.0)))
        # the flight frame turned 10 deg counter-clockwise on screen: a fixed place lies 10 deg
        # further rearward on the upper side (measured clockwise there) and 10 deg further
        # forward on the lower (derived)
        assert s["S1"].final_deg("upper") == pytest.approx(17.0)
        assert s["S1"].final_deg("lower") == pytest.approx(-13.0)
        assert said.startswith("the flight turned by 10.0° (180.0° → 190.0°)")
        # turned past vertical, where the sides change names: each mark keeps its place under
        # the other name (flight 60 -> 120 deg: the point 190 deg round from +x lies 20 deg
        # ahead of the new lower normal, 333 deg 57 deg behind the new upper one; derived)
        said = _turned(s, "S2", 60.0, 120.0, upper_deg=40.0, lower_deg=-3.0)
        assert said == ("the flight turned by 60.0° (60.0° → 120.0°): the adjusted marks keep "
                        "their places on the ball (upper +40.00° → lower -20.00°, lower -3.00° "
                        "→ upper +57.00°)")
        assert (s["S2"].final_deg("upper"), s["S2"].final_deg("lower")) == pytest.approx(
            (57.0, -20.0))
        # a mark pushed past the rear stagnation point onto the other's side: back to review
        said = _turned(s, "S1", 0.0, 350.0, upper_deg=85.0, lower_deg=80.0)
        assert said == ("the flight turned by 10.0° (0.0° → 350.0°): both marks would lie on the "
                        "lower side: back to review")
        assert (s["S1"].pick.status, s["S1"].pick.who) == ("to review", "wakeline")
        # measured again, the flight moving by a degree: the angles stand as the analyst set them
        s.set_pick("S2", status="adjusted", upper_deg=6.0, lower_deg=-2.0, who="ana")
        s.save_result("S2", _flown(fake_result(s.settings_for("S2"), 5.5, -3.5), 121.0))
        assert (s["S2"].final_deg("upper"), s["S2"].final_deg("lower")) == (6.0, -2.0)
        # the same degree given by hand (or the manifest): a correction, the marks carried
        said = s.save_result("S2", _flown(fake_result(s.settings_for("S2"), 5.5, -3.5), 122.0,
                                          source="override"))
        assert said.startswith("the flight turned by 1.0° (121.0° → 122.0°): the adjusted marks "
                               "keep their places")
        assert (s["S2"].final_deg("upper"), s["S2"].final_deg("lower")) == pytest.approx(
            (7.0, -3.0))
        # by one degree, but across 91 deg where the sides change names (README, Conventions):
        # each mark keeps its place under the other name (upper on the left of the picture
        # before, on its right after: 200.5 deg round from +x is 19 deg behind the new lower
        # normal at 181.5; derived)
        said = _turned(s, "S0", 90.5, 91.5, upper_deg=20.0, lower_deg=10.0)
        assert said == ("the flight turned by 1.0° (90.5° → 91.5°): the adjusted marks keep their "
                        "places on the ball (upper +20.00° → lower +19.00°, lower +10.00° → "
                        "upper +11.00°)")
        assert (s["S0"].final_deg("upper"), s["S0"].final_deg("lower")) == pytest.approx(
            (11.0, 19.0))
        # one mark set, the other following its proposal: the set one keeps its place under
        # the other name, and the side it left follows its new proposal
        _turned(s, "S1", 90.5, 91.5, upper_deg=20.0, lower_deg=None)
        assert (s["S1"].pick.upper_deg, s["S1"].pick.lower_deg) == (None, pytest.approx(19.0))
        # a mark held at the rear stagnation point, the flight reversed: at the front one now
        _turned(s, "S0", 0.0, 180.0, upper_deg=90.0, lower_deg=10.0)
        assert (s["S0"].pick.status, s["S0"].final_deg("upper"),
                s["S0"].final_deg("lower")) == ("adjusted", -90.0, pytest.approx(-10.0))
