"""Batch processing: results saved as they arrive, failures recorded, runs resume, picks kept."""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from data.session_helpers import fast_settings, shift_of, write_shot_folder

from app.cli import main
from core import WakelineError
from core.batch import iter_process, plan_shots, process_shots
from core.store import Session, import_folder, read_frames

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def session_path(tmp_path):
    """Four referenced shots with uniform shifts, fast processing settings."""
    import_folder(write_shot_folder(tmp_path / "src", 4), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_processing_settings(fast_settings())
    return tmp_path / "s.h5"


def _median_shift(result) -> tuple[float, float]:
    field = result.field
    return float(np.nanmedian(field.dx_px)), float(np.nanmedian(field.dy_px))


def test_import_process_pick_close_reopen_round_trip(session_path):
    with Session.open(session_path) as s:
        report = process_shots(s, workers=2)
        assert sorted(report.processed) == ["S0", "S1", "S2", "S3"] and not report.failed
        s.set_pick("S2", status="unusable", reason="seeding too sparse", who="ann")
    with Session.open(session_path, writable=False) as s:
        for i, shot_id in enumerate(s):
            rec = s[shot_id]
            assert rec.state == "processed" and not s.needs_processing(shot_id)
            # The frames were drawn with a known uniform shift (core.synth, derived truth).
            assert _median_shift(s.load_result(shot_id)) == pytest.approx(shift_of(i), abs=0.1)
        assert s["S2"].pick.reason == "seeding too sparse"
        assert [(p.status, p.who) for p in s.history("S2")] == [("unusable", "ann")]


def test_reprocessing_with_new_settings_keeps_picks_and_updates_results(session_path):
    with Session.open(session_path) as s:
        process_shots(s, workers=0)
        s.set_pick("S1", status="adjusted", upper_deg=12.0, lower_deg=-4.0)
        s.set_pick("S3", status="accepted")
        assert process_shots(s, workers=0).total == 0  # all up to date
        settings = fast_settings()
        settings["piv"]["passes"] = [{"window_px": 48, "overlap": 0.5}]
        s.set_processing_settings(settings)
        assert plan_shots(s)[0] == ["S0", "S1", "S2", "S3"]
        report = process_shots(s, workers=2)
        assert report.total == 4 and len(report.processed) == 4
    with Session.open(session_path, writable=False) as s:
        for shot_id in s:
            assert s[shot_id].summary.vectors.window_px == 48
            assert s.load_result(shot_id).field.window_px == 48
        s1 = s["S1"].pick
        assert (s1.status, s1.upper_deg, s1.lower_deg) == ("adjusted", 12.0, -4.0)
        assert s["S3"].pick.status == "accepted"
        assert len(s.history("S1")) == 1


def test_failing_shot_is_recorded_and_the_others_go_on(session_path, capsys):
    with Session.open(session_path) as s:
        process_shots(s, ["S1"], workers=0)
        s.set_pick("S1", status="accepted")
    with open(session_path.parent / "src" / "S1_a.tif", "ab") as fh:
        fh.write(b"changed")
    assert main(["process", str(session_path), "--workers", "2", "--quiet", "--force"]) == 1
    captured = capsys.readouterr()
    assert "shot S1: frame file" in captured.err and "changed since import" in captured.err
    assert "processed 3 shot(s), 1 failed" in captured.out
    with Session.open(session_path, writable=False) as s:
        failed = s["S1"]
        assert failed.state == "failed" and "changed since import" in failed.failure
        assert [s[x].state for x in ("S0", "S2", "S3")] == ["processed"] * 3
        assert s.needs_processing("S1")
        # Nothing is lost: the earlier result and the pick of the failed shot stay.
        assert _median_shift(s.load_result("S1")) == pytest.approx(shift_of(1), abs=0.1)
        assert failed.pick.status == "accepted"


def test_stopped_run_keeps_finished_shots_and_the_next_run_resumes(session_path):
    with Session.open(session_path) as s:
        seen = []
        report = process_shots(s, workers=0, on_result=seen.append,
                               should_stop=lambda: len(seen) >= 2)
        assert report.interrupted and len(report.processed) == 2 and report.not_run == 2
        assert [o.done for o in seen] == [1, 2] and all(o.total == 4 for o in seen)
    with Session.open(session_path) as s:
        todo, skipped = plan_shots(s)
        assert sorted(skipped) == sorted(report.processed) and len(todo) == 2
        outcomes = list(iter_process(s, workers=2))
        assert sorted(o.shot_id for o in outcomes) == sorted(todo)
        assert all(o.ok for o in outcomes)


def test_chosen_shots_and_force(session_path):
    with Session.open(session_path) as s:
        assert process_shots(s, ["S3", "S0"], workers=0).processed == ["S3", "S0"]
        assert process_shots(s, ["S0"], workers=0).skipped == ["S0"]
        assert process_shots(s, ["S0"], workers=0, force=True).processed == ["S0"]
        with pytest.raises(WakelineError, match="shot S7: not in s.h5"):
            plan_shots(s, ["S7"])


def test_process_on_a_dask_cluster(session_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster, Session.open(
                                      session_path) as s:
        report = process_shots(s, scheduler=cluster.scheduler_address)
        assert sorted(report.processed) == ["S0", "S1", "S2", "S3"]
        assert _median_shift(s.load_result("S3")) == pytest.approx(shift_of(3), abs=0.1)


def test_compacting_during_a_run_keeps_the_frames_workers_may_still_read(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    with Session.create(tmp_path / "e.h5") as s:
        for i in range(2):  # embedded frames stay in pending files until a compaction
            s.add_shot(f"S{i}", src / f"S{i}_a.tif", src / f"S{i}_b.tif", {"dt_s": 2e-5},
                       embed=True)
        source = s.frame_source("S1")  # what a worker task of a running batch holds
        assert ".pending" in source["file"]
        with s.batch_run():  # as iter_process runs
            s.compact()  # the window may save while shots are being processed
            assert read_frames("S1", source)[0].shape == (192, 256)
        s.set_processing_settings(fast_settings())
        assert all(o.ok for o in iter_process(s, workers=0))
    with Session.open(tmp_path / "e.h5", writable=False) as s:
        assert _median_shift(s.load_result("S1")) == pytest.approx(shift_of(1), abs=0.1)
    assert not (tmp_path / "e.h5.pending").exists()


def test_ctrl_c_stops_the_command_and_keeps_finished_shots(tmp_path):
    session_path = tmp_path / "s.h5"
    import_folder(write_shot_folder(tmp_path / "src", 40), session_path)
    with Session.open(session_path) as s:
        s.set_processing_settings(fast_settings())
    journal = tmp_path / "s.h5.journal"
    child = subprocess.Popen(
        [sys.executable, "-m", "app.cli", "process", str(session_path), "--workers", "1"],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    give_up = time.monotonic() + 120  # a guard against a hung run, not a timing check
    while not (journal.exists() and b'"op": "result"' in journal.read_bytes()):
        assert child.poll() is None and time.monotonic() < give_up, child.communicate()
        time.sleep(0.01)
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=120)
    assert child.returncode == 1, err
    assert "stopping: finished shots are kept (Ctrl-C again to abort)" in err
    assert "left for the next run" in out
    with Session.open(session_path, writable=False) as s:
        done = [r.shot_id for r in s.values() if r.state == "processed"]
        assert 0 < len(done) < 40 and not s.check_frames()
    assert not journal.exists()  # the stopped run closed the session cleanly


def test_a_session_background_is_taken_from_the_frames_and_subtracted(session_path, monkeypatch):
    # a fixed reflection (a constant offset here) is in every frame of the camera position:
    # the per-pixel minimum over the shots keeps it and nothing of the particles (common
    # practice: background removal), and the shifts are measured as before (uniform flow)
    import core.shot

    seen = []
    measure = core.shot.measure_shot

    def spy(frame_a, frame_b, settings, progress=None, background=None):
        seen.append(None if background is None else float(np.median(background)))
        return measure(frame_a, frame_b, settings, progress, background=background)

    monkeypatch.setattr(core.shot, "measure_shot", spy)
    with Session.open(session_path) as s:
        settings = fast_settings()
        settings["background"] = "min"
        s.set_processing_settings(settings)
        report = process_shots(s, workers=0)
        assert len(report.processed) == 4
        frames = [f for shot_id in s for f in read_frames(shot_id, s.frame_source(shot_id))]
        floor = float(np.median(np.min(frames, axis=0)))
        assert seen == [pytest.approx(floor)] * 4
        for i, shot_id in enumerate(sorted(s)):
            dx, dy = _median_shift(s.load_result(shot_id))
            assert (dx, dy) == pytest.approx(shift_of(i), abs=0.1)


def test_a_camera_position_of_one_shot_takes_the_minimum_of_its_two_frames(tmp_path):
    # the median of two frames is their mean, which holds half of each frame's particle images
    from core.batch import _background_for, _backgrounds

    src = write_shot_folder(tmp_path / "src", 3)
    lines = (src / "shots.csv").read_text().splitlines()
    rows = [lines[0] + ",camera"] + [f"{row},{'left' if i == 0 else 'right'}"
                                      for i, row in enumerate(lines[1:])]
    (src / "shots.csv").write_text("\n".join(rows) + "\n")
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        tasks = [{"shot_id": shot_id, "settings": {"background": "median"}} for shot_id in s]
        with _backgrounds(s, tasks):
            alone, shared = (_background_for(t, first) for t, first in zip(
                tasks[:2], (read_frames(i, s.frame_source(i))[0] for i in ("S0", "S1")),
                strict=True))
            first = read_frames("S0", s.frame_source("S0"))
            assert np.array_equal(alone, np.minimum(*first))
            two = [f for shot_id in ("S1", "S2") for f in read_frames(shot_id,
                                                                   s.frame_source(shot_id))]
            assert np.allclose(shared, np.median(two, axis=0))


def test_a_background_is_made_per_frame_size_and_an_unreadable_shot_stops_only_itself(
        tmp_path, monkeypatch):
    # one camera position whose shots were cropped two ways, one of them since damaged: each
    # size gets the per-pixel minimum of its own shots' frames, the damaged shot fails alone (a
    # run once stopped at "the frames differ in shape" with nothing processed)
    import tifffile

    import core.shot

    seen = {}
    measure = core.shot.measure_shot

    def spy(frame_a, frame_b, settings, progress=None, background=None):
        seen[frame_a.shape] = background
        return measure(frame_a, frame_b, settings, progress, background=background)

    monkeypatch.setattr(core.shot, "measure_shot", spy)
    # two shots a size at most: the cropped ones come after two of the other size and a third
    monkeypatch.setattr("core.batch.BACKGROUND_SHOTS", 2)
    import core.batch

    folders = set()
    pick = core.batch._background_for

    def where(task, frame):  # the files lie beside the session, which a cluster's workers see
        folders.update(Path(p).parent.parent for p in task["background"]["paths"].values())
        return pick(task, frame)

    monkeypatch.setattr(core.batch, "_background_for", where)
    src = write_shot_folder(tmp_path / "src", 5)
    for shot_id in ("S3", "S4"):
        for frame in ("a", "b"):
            path = src / f"{shot_id}_{frame}.tif"
            tifffile.imwrite(path, tifffile.imread(path)[:, :-16])
    import_folder(src, tmp_path / "s.h5")
    (src / "S2_b.tif").write_bytes(b"not a picture")
    with Session.open(tmp_path / "s.h5") as s:
        settings = fast_settings()
        settings["background"] = "min"
        s.set_processing_settings(settings)
        report = process_shots(s, workers=0)
        assert sorted(report.processed) == ["S0", "S1", "S3", "S4"]
        assert list(report.failed) == ["S2"] and "S2_b.tif" in report.failed["S2"]
        for group in (("S0", "S1"), ("S3", "S4")):
            frames = [f for i in group for f in read_frames(i, s.frame_source(i))]
            assert np.array_equal(seen[frames[0].shape], np.min(frames, axis=0))
    assert folders == {tmp_path}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.h5", "src"]  # and gone after


def test_a_session_with_nothing_to_process_runs_no_workers(session_path):
    # every shot up to date: the run starts no pool (it used to fail with "max_workers must be
    # greater than 0") and reports nothing to do
    with Session.open(session_path) as s:
        process_shots(s, workers=0)
        report = process_shots(s, workers=2)
    assert report.total == 0 and not report.failed and not report.interrupted


def test_the_command_says_which_decided_shots_went_back_to_review(session_path, capsys,
                                                                    monkeypatch):
    # the rule itself: tests/test_session.py; here what the run and the command say of it
    said = "the proposal accepted before moved (upper +5.00° → +6.00°): back to review"
    keep = Session.save_result
    carried = "the flight turned by 180.0° (0.0° → 180.0°): the adjusted marks keep ..."
    with Session.open(session_path) as s:
        s.set_pick("S2", status="accepted")
        s.set_pick("S1", status="adjusted", upper_deg=3.0)
        s.set_pick("S0", status="adjusted", upper_deg=3.0)

    def save_result(s, shot, result):  # as a moved proposal or flight would (these have none)
        keep(s, shot, result)
        if shot in ("S2", "S1"):  # an adjusted pick goes back when a mark changes sides
            s.set_pick(shot, status="to review", who="wakeline")
            return said
        return carried if shot == "S0" else ""

    monkeypatch.setattr(Session, "save_result", save_result)
    assert main(["process", str(session_path), "--workers", "0", "--quiet"]) == 0
    out, err = capsys.readouterr()
    assert f"wakeline: shot S2: {said}" in err and f"wakeline: shot S0: {carried}" in err
    assert ("processed 4 shot(s); 2 decided shot(s) back to review; 1 adjusted shot(s) whose "
            "angles were kept, carried or renewed (named above)") in out


def test_a_frame_the_worker_may_not_read_is_named_in_the_analyst_s_words(session_path,
                                                                          monkeypatch):
    # it once read "PermissionError: [Errno 13] ..." (the Python class of the failure)
    import core.batch
    from core.batch import _task, measure_task

    def refused(shot_id, source):
        raise PermissionError(13, "Permission denied", source["path_a"])

    with Session.open(session_path, writable=False) as s:
        task = _task(s, "S0")
    monkeypatch.setattr(core.batch, "read_frames", refused)
    _shot_id, result, why = measure_task(task)
    assert result is None
    assert why == f"{task['source']['path_a']}: cannot be read (Permission denied)"


def test_process_names_the_shots_measured_with_warnings(tmp_path, capsys):
    # S1 without a scale and no ball asked for: its velocities cannot be in m/s, and it says so
    src = write_shot_folder(tmp_path / "src", 3)
    manifest = src / "shots.csv"
    manifest.write_text(manifest.read_text().replace("S1,2e-05,0.08,", "S1,2e-05,,"))
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_processing_settings(fast_settings())
    assert main(["process", str(tmp_path / "s.h5"), "--workers", "0", "--quiet"]) == 0
    err = capsys.readouterr().err
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S1"].summary.warnings and not s["S0"].summary.warnings
    assert ("note: 1 shot(s) measured with warnings or checks to look at (S1): the table's "
            "warnings column, the window's readout and the sheet say what") in err


def test_a_shot_the_camera_wrote_the_other_way_round_is_measured_and_shown_as_exposed(
        tmp_path, main_window):
    # S1's files hold its exposures the other way round (B first): told so by frames_swapped,
    # the run measures the shift it was drawn with (core.synth, derived truth) and the window
    # shows the first exposure as frame A, the one its circle A was measured in
    src = write_shot_folder(tmp_path / "src", 2)
    for ab, other in (("a", "x"), ("b", "a"), ("x", "b")):
        (src / f"S1_{ab}.tif").rename(src / f"S1_{other}.tif")
    manifest = src / "shots.csv"
    lines = manifest.read_text().splitlines()
    manifest.write_text("\n".join([lines[0] + ",frames_swapped", lines[1] + ",no",
                                   lines[2] + ",yes"]) + "\n")
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_processing_settings(fast_settings())
        assert not process_shots(s, workers=0).failed
        for i, shot_id in enumerate(("S0", "S1")):
            assert _median_shift(s.load_result(shot_id)) == pytest.approx(shift_of(i), abs=0.1)
        first, _ = s.load_frames("S1")
    window = main_window(workers=0)
    assert window.open_session(tmp_path / "s.h5", writable=False)
    shown_a, _ = window.model.frames("S1")
    np.testing.assert_array_equal(shown_a, first)
    from core.store import read_frames
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        _, file_b = read_frames("S1", s.frame_source("S1"))
    np.testing.assert_array_equal(shown_a, file_b)  # the file named B, exposed first


def test_a_frame_size_without_a_background_is_named_with_the_camera():
    from core.batch import _background_for

    task = {"background": {"camera": "left", "paths": {"256x192": "unused.npy"}}}
    with pytest.raises(WakelineError) as refused:
        _background_for(task, np.zeros((100, 120)))
    assert str(refused.value) == ("background: no readable shot of camera 'left' has frames "
                                  "of 120x100 px (backgrounds made: 256x192)")
    assert _background_for({"shot_id": "S0"}, np.zeros((100, 120))) is None


def test_a_stopped_forced_run_does_not_promise_the_next_plain_run(capsys):
    # shots forced again were up to date: a plain run skips them, so the line says how to
    # measure them again rather than "left for the next run"
    from app.cli.session import _process_summary
    from core.batch import BatchReport

    report = BatchReport(total=5, processed=["a", "b"], interrupted=True, elapsed_s=1.0)
    assert _process_summary(Path("s.h5"), report, True, ["a", "b", "c", "d", "e"]) == 1
    line = capsys.readouterr().out
    assert "stopped with 3 shot(s) not measured again (--force --shots c d e measures them)" \
        in line
    assert "next run" not in line
    _process_summary(Path("s.h5"), report)
    assert "stopped with 3 shot(s) left for the next run" in capsys.readouterr().out
