"""Importing a folder of shots: good rows go in, each bad row is named by line and shot."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import tifffile
from data.session_helpers import HEADER, fake_result, write_pair, write_shot_folder

from app.cli import main
from core import WakelineError
from core.store import Session, import_folder

ROOT = Path(__file__).resolve().parent.parent


def test_good_folder_imports_every_shot_with_its_metadata(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    a = tifffile.imread(src / "S0_a.tif")
    tifffile.imwrite(src / "T1.tif", np.stack([a, a]))  # one two-page TIFF
    (src / "shots.csv").write_text(
        "shot,dt_s,scale_mm_per_px,ball_diameter_mm,ball_type,seam_deg,spin_rpm,operator\n"
        "S0,2e-05,0.08,71.6,cricket,15,1200,Ann\n"
        "S1,2.5e-05,,72.0,cricket,-10,,Bo\n"
        "T1,2e-05,0.08,,baseball,,,Ann\n",
        encoding="utf-8",
    )
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0", "S1", "T1"] and report.problems == []
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        meta = s["S1"].metadata
        assert meta["dt_s"] == 2.5e-5 and meta["scale_mm_per_px"] is None  # derived from ball
        assert meta["seam_deg"] == -10.0 and meta["spin_rpm"] is None
        assert meta["operator"] == "Bo"  # unknown column kept as text
        assert s.settings_for("S1").scale_mm_per_px is None
        assert s["T1"].frames["path_b"] is None
        frame_a, frame_b = s.load_frames("T1")
        np.testing.assert_array_equal(frame_a, frame_b)
        assert s["S0"].frames["path_a"] == "src/S0_a.tif"  # relative to the session


def test_bad_rows_are_reported_by_line_and_shot_and_good_rows_imported(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 3, extra_rows=("S9,2e-05,0.08,71.6,0,",))
    lines = (src / "shots.csv").read_text().splitlines()
    lines[2] = lines[2].replace("2e-05", "abc")  # S1: non-numeric dt
    (src / "shots.csv").write_text("\n".join(lines) + "\n")
    code = main(["import", str(src), str(tmp_path / "s.h5")])
    err = capsys.readouterr().err
    assert code == 1
    assert "shots.csv line 3 (shot S1): dt_s 'abc' is not a number" in err
    assert "shots.csv line 5 (shot S9): no frame files S9_a/_b" in err
    assert "not named" not in err  # S1 is named: its row was refused, its files not unused
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert list(s) == ["S0", "S2"]


def test_missing_column_refuses_the_manifest_and_creates_nothing(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text("shot,scale_mm_per_px,ball_diameter_mm\nS0,0.08,71.6\n")
    with pytest.raises(WakelineError, match=r"shots\.csv: missing column 'dt_s'"):
        import_folder(src, tmp_path / "s.h5")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    assert "missing column 'dt_s'" in capsys.readouterr().err
    assert not (tmp_path / "s.h5").exists()


def test_an_empty_manifest_and_a_file_for_a_folder_are_named_as_such(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text("\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    assert capsys.readouterr().err.strip() == f"wakeline: {src / 'shots.csv'}: manifest is empty"
    assert main(["import", str(src / "shots.csv"), str(tmp_path / "s.h5")]) == 1
    assert "shots.csv: is a file; give the folder that holds it" in capsys.readouterr().err
    assert not (tmp_path / "s.h5").exists()


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ("S0,,0.08,71.6,,", "dt_s is empty"),
        ("S0,-2e-05,0.08,71.6,,", "dt_s must be positive"),
        ("S0,2e-05,0.08,,,", "ball_diameter_mm is empty"),
        ("S0,2e-05,nan,71.6,,", "not a finite number"),
        ("S0,2e-05,0.08,71_6,,", "ball_diameter_mm '71_6' is not a number"),
        (",2e-05,0.08,71.6,,", "empty shot id"),
        ("S0,2e-05,0.08,71.6,,,,extra", "header has 6 columns"),
        ("S0,2e-05,0.08,71.6,720,", "seam_deg 720 lies outside -360 to 360 deg"),
    ],
)
def test_each_bad_value_has_its_own_message(tmp_path, row, message):
    src = tmp_path / "src"
    write_shot_folder(src, 0)
    write_pair(src, "S0", (2.0, 0.0))
    (src / "shots.csv").write_text(f"{HEADER}\n{row}\n")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == [] and len(report.problems) == 1
    assert report.problems[0].startswith(f"{src / 'shots.csv'} line 2")
    assert message in report.problems[0]


def test_a_launchers_nominal_speed_of_zero_or_less_is_refused(tmp_path):
    # it would quietly turn the measured speed's check off (core.plausibility)
    src = tmp_path / "src"
    write_shot_folder(src, 0)
    write_pair(src, "S0", (2.0, 0.0))
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,"
                                   "speed_nominal_m_s\nS0,2e-05,0.08,71.6,-30\n")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == []
    assert report.problems[0].endswith("speed_nominal_m_s must be positive, got -30")


def test_unreadable_frame_and_duplicate_row_are_reported(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2, extra_rows=("S0,2e-05,0.08,71.6,0,again",))
    tifffile.imwrite(src / "S1_b.tif", np.tile(np.uint8([200, 0, 0]), (192, 256, 1)))
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0"]
    assert any("line 3 (shot S1)" in p and "colour image" in p for p in report.problems)
    assert f"{src / 'shots.csv'} line 4: shot id S0 is given twice (also line 2)" in report.problems


def test_a_1_bit_frame_is_one_row_s_problem_and_the_rows_after_it_are_imported(tmp_path):
    src = write_shot_folder(tmp_path / "src", 3)
    tifffile.imwrite(src / "S1_a.tif", np.zeros((192, 256), bool))
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0", "S2"]
    assert len(report.problems) == 1 and "line 3 (shot S1)" in report.problems[0]
    assert "1-bit" in report.problems[0]


def test_second_import_adds_to_an_existing_session(tmp_path):
    write_shot_folder(tmp_path / "one", 1)
    two = tmp_path / "two"
    two.mkdir()
    write_pair(two, "X1", (1.0, 1.0))
    (two / "shots.csv").write_text(f"{HEADER}\nX1,1e-05,0.1,57.2,0,\n")
    import_folder(tmp_path / "one", tmp_path / "s.h5")
    report = import_folder(two, tmp_path / "s.h5")
    assert report.problems == []
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert list(s) == ["S0", "X1"]


def test_session_and_frames_moved_together_still_find_the_frames(tmp_path):
    write_shot_folder(tmp_path / "a" / "src", 1)
    import_folder(tmp_path / "a" / "src", tmp_path / "a" / "s.h5")
    shutil.move(tmp_path / "a", tmp_path / "b")
    with Session.open(tmp_path / "b" / "s.h5", writable=False) as s:
        assert s.check_frames() == {}
        assert s.load_frames("S0")[0].shape == (192, 256)


def test_import_command_from_the_shell(tmp_path):
    src = write_shot_folder(tmp_path / "src", 1)
    run = subprocess.run(
        [sys.executable, "-m", "app.cli", "import", str(src), str(tmp_path / "s.h5"), "--embed"],
        cwd=ROOT, capture_output=True, text=True, timeout=120, check=False,
    )
    assert run.returncode == 0, run.stderr
    assert "imported 1 shot" in run.stdout
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S0"].frames["storage"] == "embedded"
    bad = subprocess.run([sys.executable, "-m", "app.cli", "import", str(tmp_path / "nowhere"),
                          str(tmp_path / "s.h5")], cwd=ROOT, capture_output=True, text=True,
                         timeout=120, check=False)
    assert bad.returncode == 1 and bad.stderr.strip().endswith("nowhere: folder not found")


def test_flight_direction_column_overrides_per_shot(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text(
        "shot,dt_s,scale_mm_per_px,ball_diameter_mm,flight_deg\n"
        "S0,2e-05,0.08,71.6,175.5\nS1,2e-05,0.08,71.6,\n")
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        assert s.settings_for("S0").flight_deg == 175.5 and s.settings_for("S1").flight_deg is None
        s.set_processing_settings({"flight_deg": 180.0})  # session-wide, where a shot has none
        assert s.settings_for("S0").flight_deg == 175.5 and s.settings_for("S1").flight_deg == 180


def test_quoted_notes_with_commas_and_line_breaks(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text(
        f'{HEADER}\nS0,2e-05,0.08,71.6,5,"seam up, new ball\nsecond line"\nS1,x,0.08,71.6,5,\n')
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0"]
    assert report.problems[0].startswith(f"{src / 'shots.csv'} line 4 (shot S1)")  # physical line
    (src / "shots.csv").write_text(f'{HEADER}\nS0,x,0.08,71.6,5,"two\nlines"\n')
    assert import_folder(src, tmp_path / "t.h5").problems[0].startswith(
        f"{src / 'shots.csv'} line 2 ")
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S0"].metadata["notes"] == "seam up, new ball\nsecond line"


def test_a_quote_never_closed_is_refused_not_read_as_one_long_note(tmp_path):
    # with csv's lenient reading the open quote swallowed every row after it into S0's notes,
    # and the import said it had imported one shot
    from core import WakelineError

    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text(
        f'{HEADER}\nS0,2e-05,0.08,71.6,5,"12 in ball\nS1,2e-05,0.08,71.6,5,ok\n')
    with pytest.raises(WakelineError, match=r"shots.csv line 2: a quote opened there is never"):
        import_folder(src, tmp_path / "s.h5")
    assert not (tmp_path / "s.h5").exists()
    (src / "shots.csv").write_text(f'{HEADER}\nS0,2e-05,0.08,71.6,5,"new ball" ,\n')
    with pytest.raises(WakelineError, match=r"line 2: a quoted cell goes on after its closing"):
        import_folder(src, tmp_path / "s.h5")


def test_an_import_stopped_part_way_keeps_what_it_imported(tmp_path):
    src = write_shot_folder(tmp_path / "src", 3)
    asked = []

    def stop_after_one():
        asked.append(True)
        return len(asked) > 1

    report = import_folder(src, tmp_path / "s.h5", should_stop=stop_after_one)
    assert report.imported == ["S0"]
    assert any("stopped after 1 of 3 rows" in note for note in report.notes)
    with Session.open(tmp_path / "s.h5") as s:
        assert list(s) == ["S0"]
        assert s.check_frames(should_stop=lambda: True) == {}  # stopped before any shot
    again = import_folder(src, tmp_path / "s.h5")  # the rest comes in on a second run
    assert again.imported == ["S1", "S2"] and again.already == ["S0"] and again.problems == []
    assert any("1 shot(s) already in s.h5" in note for note in again.notes)


def test_importing_a_folder_again_goes_on_and_refuses_only_what_differs(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 3)
    lines = (src / "shots.csv").read_text().splitlines()
    (src / "shots.csv").write_text("\n".join(lines[:2]) + "\n")  # S0 only, as if stopped
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 0
    lines[2] = lines[2].replace("shot 1", "shot 1")  # S1 unchanged
    lines[1] = lines[1].replace("shot 0", "changed")  # S0 now with other values
    (src / "shots.csv").write_text("\n".join(lines) + "\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    err = capsys.readouterr().err
    assert err.count("wakeline: ") == 1 and "line 2 (shot S0): already in s.h5 with other" in err
    lines[1] = lines[1].replace("changed", "shot 0")
    (src / "shots.csv").write_text("\n".join(lines) + "\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 0  # a plain re-run
    assert "3 shot(s) already in s.h5" in capsys.readouterr().err


def test_a_wrong_value_found_after_import_is_corrected_and_the_picks_stay(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 2)
    session = tmp_path / "s.h5"
    assert main(["import", str(src), str(session)]) == 0
    with Session.open(session) as s:
        s.set_pick("S1", status="adjusted", upper_deg=4.5)
    manifest = src / "shots.csv"
    manifest.write_text(manifest.read_text().replace("S1,2e-05", "S1,2.5e-05"))
    capsys.readouterr()
    assert main(["import", str(src), str(session)]) == 1  # without the option: said, not done
    err = capsys.readouterr().err
    assert "line 3 (shot S1): already in s.h5 with other values (dt_s 2e-05 -> 2.5e-05)" in err
    assert "note: to take the new values of S1 as corrections, import again with --correct-values" in err
    with Session.open(session, writable=False) as s:
        assert s["S1"].metadata["dt_s"] == 2e-05
    assert main(["import", str(src), str(session), "--correct-values"]) == 0
    out, err = capsys.readouterr()
    assert "corrected the values of 1" in out
    assert "1 shot(s) took the corrected values of shots.csv (S1); their picks stay" in err
    assert "measured with other values now, to be processed again: S1" in err
    with Session.open(session, writable=False) as s:
        assert s["S1"].metadata["dt_s"] == 2.5e-05 and s.settings_for("S1").dt_s == 2.5e-05
        assert s["S1"].pick.status == "adjusted" and s["S1"].pick.upper_deg == 4.5
        assert s["S0"].metadata["dt_s"] == 2e-05


def test_corrections_an_import_found_are_taken_without_reading_the_folder_again(tmp_path):
    from core.store import take_corrections

    src = write_shot_folder(tmp_path / "src", 2)
    import_folder(src, tmp_path / "s.h5")
    manifest = src / "shots.csv"
    manifest.write_text(manifest.read_text().replace("S1,2e-05", "S1,2.5e-05"))
    found = import_folder(src, tmp_path / "s.h5")
    assert list(found.differing) == ["S1"] and found.differing["S1"]["dt_s"] == 2.5e-05
    shutil.rmtree(src)  # the folder is not needed to take them
    taken = take_corrections(tmp_path / "s.h5", found.differing)
    assert taken.corrected == ["S1"] and taken.outdated == ["S1"] and taken.problems == []
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S1"].metadata["dt_s"] == 2.5e-05


def test_a_corrected_camera_with_a_background_is_named_for_a_forced_run(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    manifest = src / "shots.csv"
    lines = manifest.read_text().splitlines()
    manifest.write_text("\n".join([lines[0] + ",camera"] + [f"{row},left" for row in lines[1:]]))
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_processing_settings({"background": "min"})
    manifest.write_text(manifest.read_text().replace("shot 1,left", "shot 1,right"))
    report = import_folder(src, tmp_path / "s.h5", correct_values=True)
    assert report.corrected == ["S1"] and report.outdated == []  # its own settings: the same
    assert any(note.startswith("camera position corrected while a background image is "
                               "subtracted: S1 and the shots at its old and new camera")
               for note in report.notes)


def test_a_corrected_note_is_kept_without_measuring_again(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    session_path = tmp_path / "s.h5"
    import_folder(src, session_path)
    with Session.open(session_path) as s:
        s.save_result("S1", fake_result(s.settings_for("S1")))
    manifest = src / "shots.csv"
    manifest.write_text(manifest.read_text().replace("shot 1", "shot 1 fog low"))
    report = import_folder(src, session_path, correct_values=True)
    assert report.corrected == ["S1"] and report.outdated == []
    assert not any("processed again" in note for note in report.notes)
    with Session.open(session_path, writable=False) as s:
        assert s["S1"].metadata["notes"] == "shot 1 fog low" and not s.needs_processing("S1")


def test_the_values_that_differ_name_what_is_measured_with_first(tmp_path):
    src = write_shot_folder(tmp_path / "src", 1)
    import_folder(src, tmp_path / "s.h5")
    manifest = src / "shots.csv"
    text = manifest.read_text().replace("S0,2e-05", "S0,3e-05").replace("shot 0", "zzz")
    manifest.write_text(text.replace(",0,zzz", ",5,zzz"))  # seam_deg, notes and dt_s differ
    [problem] = import_folder(src, tmp_path / "s.h5").problems
    assert "with other values (dt_s 2e-05 -> 3e-05, notes shot 0 -> zzz, seam_deg 0" in problem


def test_a_stray_frame_beside_a_shots_pair_is_named_as_unused(tmp_path):
    src = write_shot_folder(tmp_path / "src", 1)
    shutil.copy(src / "S0_a.tif", src / "S0.tif")  # a two-page name beside the pair
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0"]
    assert "1 image file(s) not named in shots.csv: S0.tif" in report.notes


def test_other_frames_under_an_id_are_never_taken_as_a_correction(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 2)
    session = tmp_path / "s.h5"
    assert main(["import", str(src), str(session)]) == 0
    write_pair(src, "S1", (3.0, 1.0), seed=9)  # new frames under the same id
    assert main(["import", str(src), str(session), "--correct-values"]) == 1
    assert "(shot S1): already in s.h5 with other frames; give it another id" in (
        capsys.readouterr().err)


@pytest.mark.parametrize("separator", [";", "\t"], ids=["semicolon", "tab"])
def test_a_manifest_with_another_separator_says_so(tmp_path, separator):
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text(HEADER.replace(",", separator) + "\n"
                                   + separator.join(["S0", "2e-05", "0.08", "71.6", "0", ""]))
    with pytest.raises(WakelineError, match=r"separated by .*; shots\.csv must be comma-separated"):
        import_folder(src, tmp_path / "s.h5")


def test_frames_the_camera_wrote_the_other_way_round_are_said_so_in_the_manifest(tmp_path):
    # a shot found swapped after import: frames_swapped yes, imported again as a correction,
    # is measured again with its files the other way round (the shot keeps its id and frames)
    src = write_shot_folder(tmp_path / "src", 2)
    manifest = src / "shots.csv"
    lines = manifest.read_text().splitlines()
    session_path = tmp_path / "s.h5"
    import_folder(src, session_path)
    with Session.open(session_path) as s:
        before = s.settings_for("S1").fingerprint()
        s.save_result("S1", fake_result(s.settings_for("S1")))
        assert not s.needs_processing("S1") and "frames_swapped" not in before
    manifest.write_text("\n".join([lines[0] + ",frames_swapped", lines[1] + ",no",
                                   lines[2] + ",Yes"]) + "\n")
    report = import_folder(src, session_path, correct_values=True)
    assert report.corrected == ["S1"] and report.outdated == ["S1"]
    with Session.open(session_path) as s:
        assert s["S1"].metadata["frames_swapped"] == "yes"
        assert "frames_swapped" not in s["S0"].metadata  # a no is not a correction
        assert s.settings_for("S1").frames_swapped and not s.settings_for("S0").frames_swapped
        assert s.needs_processing("S1")
    manifest.write_text(manifest.read_text().replace(",Yes", ",maybe"))
    report = import_folder(src, tmp_path / "t.h5")
    assert report.imported == ["S0"]
    assert any("frames_swapped 'maybe' is not yes or no" in p for p in report.problems)


def test_the_values_that_differ_leave_out_a_column_added_empty():
    from core.store.importing import _differences

    # a column the manifest gained with no value in it is no change to report
    assert _differences({"dt_s": 6e-05, "ball_type": None},
                        {"dt_s": 5e-05, "ball_type": "", "air_temp_c": ""}) == "dt_s 6e-05 -> 5e-05"
