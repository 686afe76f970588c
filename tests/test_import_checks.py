"""What an import (and `pair`) must not accept silently: a manifest with a column twice, frames
A and B of different bit depth or scaling, a TIFF of three pages, shot ids that differ only in
case; and frames reached through a linked folder are kept by the path given."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile
from data.session_helpers import HEADER, write_pair, write_shot_folder

from app.cli import main
from core import WakelineError
from core.images import read_frame_pair
from core.store import Session, import_folder


def test_a_manifest_with_a_column_twice_is_refused(tmp_path):
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text(f"{HEADER},dt_s\nS0,2e-05,0.08,71.6,0,,3e-05\n")
    with pytest.raises(WakelineError, match=r"shots\.csv: column 'dt_s' appears twice"):
        import_folder(src, tmp_path / "s.h5")
    assert not (tmp_path / "s.h5").exists()


def _frames(tmp_path, a: np.ndarray, b: np.ndarray):
    tifffile.imwrite(tmp_path / "A.tif", a)
    tifffile.imwrite(tmp_path / "B.tif", b)
    return tmp_path / "A.tif", tmp_path / "B.tif"


def _particles(seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.integers(0, 4000, (64, 64))


@pytest.mark.parametrize(("a", "b", "message"), [
    (_particles().astype(np.uint16), (_particles() // 16).astype(np.uint8),
     r"B\.tif: 8-bit frame but .*A\.tif is 16-bit"),
    (_particles().astype(np.uint16), (_particles() * 16).astype(np.uint16),
     r"B\.tif: brightness scale differs from .*A\.tif"),
    (_particles().astype(np.float32), _particles().astype(np.uint16),
     r"B\.tif: 16-bit frame but .*A\.tif is 32-bit float"),
], ids=["bit-depth", "scaling", "float-and-counts"])
def test_frames_of_different_depth_or_scaling_are_refused(tmp_path, a, b, message, capsys):
    path_a, path_b = _frames(tmp_path, a, b)
    with pytest.raises(WakelineError, match=message):
        read_frame_pair(path_a, path_b)
    assert main(["pair", str(path_a), str(path_b), "--no-ball"]) == 1
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_frames_alike_but_for_the_light_are_accepted(tmp_path):
    a = _particles().astype(np.uint16)
    frame_a, frame_b = read_frame_pair(*_frames(tmp_path, a, (a * 0.6).astype(np.uint16)))
    assert frame_a.shape == frame_b.shape == (64, 64)


def test_a_tiff_of_three_pages_is_refused(tmp_path):
    page = _particles().astype(np.uint16)
    for _ in range(3):
        tifffile.imwrite(tmp_path / "T.tif", page, append=True)
    with pytest.raises(WakelineError, match=r"T\.tif: has 3 pages; a frame pair is two"):
        read_frame_pair(tmp_path / "T.tif")


def test_shot_ids_that_differ_only_in_case_are_refused(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2, extra_rows=("s1,2e-05,0.08,71.6,0,",))
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0", "S1"]
    assert len(report.problems) == 1 and "line 4 (shot s1)" in report.problems[0]
    assert "differs from shot S1 only in case" in report.problems[0]
    other = tmp_path / "other"
    other.mkdir()
    write_pair(other, "s0", (1.0, 0.0))
    (other / "shots.csv").write_text(f"{HEADER}\ns0,2e-05,0.08,71.6,0,\n")
    report = import_folder(other, tmp_path / "s.h5")  # against a shot already in the session
    assert report.imported == [] and "differs from shot S0 only in case" in report.problems[0]


def test_frames_in_a_linked_folder_are_kept_by_the_path_given(tmp_path):
    real = write_shot_folder(tmp_path / "disk" / "2024" / "raw", 1)
    (tmp_path / "shots").symlink_to(real)
    report = import_folder(tmp_path / "shots", tmp_path / "s.h5")
    assert report.imported == ["S0"]
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S0"].frames["path_a"] == "shots/S0_a.tif"  # not disk/2024/raw/...
        assert s.check_frames() == {}


def test_an_unknown_ball_type_is_refused_at_import(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,ball_type\n"
                                   "S0,2e-05,0.08,,Cricket\nS1,2e-05,0.08,,cricketball\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    err = capsys.readouterr().err
    assert "line 3 (shot S1): ball_type 'cricketball' is not one this wakeline knows" in err
    assert "baseball, cricket, softball" in err
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert list(s) == ["S0"]  # the rulebook word in any case is fine


def test_an_air_temperature_below_absolute_zero_is_refused_at_import(tmp_path, capsys):
    # it once went in and failed the shot at processing
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,air_temp_c\n"
                                   "S0,2e-05,0.08,71.6,18.5\nS1,2e-05,0.08,71.6,-400\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    err = capsys.readouterr().err
    assert "line 3 (shot S1): air_temp_c -400 deg C is at or below absolute zero" in err
    # and what to do about it, naming the manifest in its folder
    assert (f"note: correct the rows named in {src / 'shots.csv'} (or those shots' frame files) "
            "and import the folder again: the shots imported now are left as they are") in err
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert list(s) == ["S0"]


def test_a_time_between_frames_in_microseconds_is_refused_at_import(tmp_path, capsys):
    # it went in and measured speeds of micrometres a second, with no separation proposed
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm\n"
                                   "S0,2e-05,0.08,71.6\nS1,287.7,0.08,71.6\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    err = capsys.readouterr().err
    assert ("line 3 (shot S1): dt_s 287.7 s is outside 1e-07 to 0.01 s, the time between a "
            "double-pulse laser's two pulses; in microseconds? 287.7 us is 0.0002877 s") in err
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert list(s) == ["S0"]


@pytest.mark.parametrize("row", ["S1,6e-O5,0.08,71.6,10,", "S1,2e-05,-0.08,71.6,10,",
                                 "S1,2e-05,0.08,71.6,10,,extra cell"],
                         ids=["bad-number", "negative-scale", "too-many-cells"])
def test_frames_of_a_refused_row_are_not_called_unnamed(tmp_path, row):
    src = write_shot_folder(tmp_path / "src", 2)
    write_pair(src, "S9", (1.0, 0.0))  # named by no row
    lines = (src / "shots.csv").read_text().splitlines()
    (src / "shots.csv").write_text("\n".join([*lines[:2], row]) + "\n")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0"] and "line 3 (shot S1)" in report.problems[0]
    assert report.notes == ["2 image file(s) not named in shots.csv: S9_a.tif, S9_b.tif"]


def test_the_frame_left_of_a_half_pair_is_not_called_unnamed(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "S1_b.tif").unlink()
    report = import_folder(src, tmp_path / "s.h5")
    assert report.problems[0].endswith("S1_a.tif is there but not its frame B (S1_b.<tif|png>, "
                                       "in any case)") and report.notes == []


@pytest.mark.parametrize("repeat", ["S1,2e-05,0.08,71.6,10,shot 1", "S1,3e-05,0.08,71.6,10,"],
                         ids=["identical", "differing"])
def test_a_shot_id_given_twice_is_named_as_such(tmp_path, repeat, capsys):
    src = write_shot_folder(tmp_path / "src", 2, extra_rows=(repeat,))
    assert main(["import", str(src), str(tmp_path / "s8.h5")]) == 1
    err = capsys.readouterr().err
    first, remedy = err.splitlines()
    assert first == f"wakeline: {src / 'shots.csv'} line 4: shot id S1 is given twice (also line 3)"
    assert remedy.startswith("note: correct the rows named in ")
    with Session.open(tmp_path / "s8.h5", writable=False) as s:
        assert list(s) == ["S0", "S1"] and s["S1"].metadata["dt_s"] == 2e-5


def test_a_manifest_of_only_its_header_is_refused_and_makes_no_session(tmp_path, capsys):
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text(f"{HEADER}\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 1
    assert "shots.csv: no shots (a header and no rows)" in capsys.readouterr().err
    assert not (tmp_path / "s.h5").exists()


def test_a_column_that_nearly_spells_a_known_one_is_named_at_import(tmp_path, capsys):
    # seam_angle_deg went in as text: the seam angles were pooled into one condition unnoticed
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,seam_angle_deg,"
                                   "operator\nS0,2e-05,0.08,71.6,10,ann\n")
    assert main(["import", str(src), str(tmp_path / "s.h5")]) == 0
    err = capsys.readouterr().err
    assert ("column 'seam_angle_deg' is not one wakeline reads (kept as text); did you mean "
            "'seam_deg'?") in err
    assert "operator" not in err  # a column of the lab's own is no slip


def test_a_missing_column_points_at_a_near_miss_and_a_shorter_slip_is_named(tmp_path):
    # difflib's ratio: seam_angle / seam_deg 0.67, ball_diamter_mm / ball_diameter_mm 0.97
    src = write_shot_folder(tmp_path / "src", 1)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diamter_mm\n"
                                   "S0,2e-05,0.08,71.6\n")
    with pytest.raises(WakelineError, match=r"shots.csv: missing column 'ball_diameter_mm' \(is "
                                            r"'ball_diamter_mm' meant\?\)$"):
        import_folder(src, tmp_path / "s.h5")
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,seam_angle\n"
                                   "S0,2e-05,0.08,71.6,10\n")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.notes == [(f"{src / 'shots.csv'}: column 'seam_angle' is not one wakeline "
                            "reads (kept as text); did you mean 'seam_deg'?")]


def test_a_diameter_that_cannot_be_the_ball_type_is_noted_at_import(tmp_path):
    # Laws of Cricket, Law 4: no grade's cricket ball exceeds 22.9 cm round (72.9 mm across);
    # 97 mm is a 12 in softball's (12 in / pi = 97.0 mm). The shot goes in, the note says so.
    src = write_shot_folder(tmp_path / "src", 3)
    (src / "shots.csv").write_text("shot,dt_s,scale_mm_per_px,ball_diameter_mm,ball_type\n"
                                   "S0,2e-05,0.08,97,cricket\nS1,2e-05,0.08,72,cricket\n"
                                   "S2,2e-05,0.08,97,Cricket\n")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0", "S1", "S2"]
    assert report.notes == [("shot(s) S0, S2: a ball diameter of 97 mm does not fit a cricket "
                             "ball (rulebook 65.3-72.9 mm): check the ball type and the "
                             "diameter; the diameter given is used")]


def test_a_spreadsheet_s_manifest_is_read_whatever_the_case_of_its_column_names(tmp_path):
    # saved by a spreadsheet: a byte-order mark, CRLF line ends, "Shot" and "DT_S" headers
    src = write_shot_folder(tmp_path / "src", 2)
    lines = (src / "shots.csv").read_text().splitlines()
    lines[0] = lines[0].replace("shot,dt_s,", " Shot ,DT_S,") + ",Operator"
    lines[1:] = [row + ",someone" for row in lines[1:]]
    (src / "shots.csv").write_bytes(("\ufeff" + "\r\n".join(lines) + "\r\n").encode())
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == ["S0", "S1"] and not report.problems
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S1"].metadata["dt_s"] == 2e-05
        assert s["S1"].metadata["Operator"] == "someone"  # other columns keep their names


def test_an_id_that_ends_the_files_shot_part_is_pointed_at_it(tmp_path):
    # frames shot_001_A.tif / _B.tif listed as 001: the folder's own spelling is offered
    src = write_shot_folder(tmp_path / "src", 1)
    for ab in ("a", "b"):
        (src / f"S0_{ab}.tif").rename(src / f"run_S0_{ab.upper()}.tif")
    report = import_folder(src, tmp_path / "s.h5")
    assert report.problems[0].endswith(
        "no frame files S0_a/_b.<tif|png> or S0.tif in the folder (is 'run_S0' meant? the shot "
        "column must name the files' shot part)")


def test_an_import_whose_every_row_is_refused_leaves_no_session(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    manifest = src / "shots.csv"
    manifest.write_text(manifest.read_text().replace("2e-05", "20"))  # microseconds, both rows
    report = import_folder(src, tmp_path / "s.h5")
    assert report.imported == [] and len(report.problems) == 2
    assert f"no shot imported: {tmp_path / 's.h5'} not made" in report.notes
    assert sorted(p.name for p in tmp_path.iterdir()) == ["src"]
