"""Output paths of the commands never overwrite what they read: the session, its companion files,
its frames or the input frames of `pair`, nor another session (any HDF5 file) or its companion
files; a folder given as output is refused, leaving nothing."""

from __future__ import annotations

import pytest
from data.session_helpers import write_shot_folder

from app.cli import main
from core.store import Session, import_folder


@pytest.fixture
def session_path(tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 2), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_pick("S0", status="unusable", reason="kept")
    return tmp_path / "s.h5"


def _files(folder) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


@pytest.mark.parametrize("command", ["table", "sheet"])
@pytest.mark.parametrize("target", ["s.h5", "s.h5.journal", "s.h5.lock", "s.h5.tmp",
                                    "s.h5.pending/000000001.h5", "src/S1_a.tif", "src/shots.csv"])
def test_table_and_sheet_refuse_to_overwrite_the_session_or_its_files(
        session_path, command, target, capsys):
    folder = session_path.parent
    before = _files(folder)
    assert main([command, str(session_path), "-o", str(folder / target)]) == 1
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and target.rsplit("/", 1)[-1] in err
    assert "choose another" in err
    assert _files(folder) == before
    with Session.open(session_path, writable=False) as s:
        assert s["S0"].pick.reason == "kept"


def test_the_session_reached_by_another_name_is_refused(session_path, capsys):
    link = session_path.parent / "link.h5"
    link.symlink_to(session_path)
    assert main(["table", str(session_path), "-o", str(link)]) == 1
    assert "is the session" in capsys.readouterr().err
    assert link.is_symlink()


@pytest.mark.parametrize("target", ["other.h5", "other.h5.journal", "other.h5.lock"])
def test_table_refuses_to_overwrite_another_session_or_its_files(session_path, target, capsys):
    # `table s.h5 -o other.h5` once replaced the other session by a CSV, even while a process
    # held it open (which then could not save it)
    import shutil

    folder = session_path.parent
    shutil.copy(session_path, folder / "other.h5")
    for companion in ("other.h5.journal", "other.h5.lock"):
        (folder / companion).write_bytes(b"kept")
    before = _files(folder)
    assert main(["table", str(session_path), "-o", str(folder / target)]) == 1
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and target in err and "choose another" in err
    assert ("HDF5" in err) == (target == "other.h5")
    assert _files(folder) == before


@pytest.mark.parametrize("option", ["--vectors", "--json"])
def test_pair_refuses_to_overwrite_a_session(session_path, option, capsys):
    src = session_path.parent / "src"
    before = session_path.read_bytes()
    code = main(["pair", str(src / "S0_a.tif"), str(src / "S0_b.tif"), "--no-ball",
                 option, str(session_path)])
    assert code == 1 and "is an HDF5 file (a session?)" in capsys.readouterr().err
    assert session_path.read_bytes() == before


def test_a_csv_is_written_over_an_old_csv_as_before(session_path, capsys):
    old = session_path.parent / "old.csv"
    old.write_text("shot\n")
    assert main(["table", str(session_path), "-o", str(old)]) == 0
    assert old.read_text().startswith("shot,")


@pytest.mark.parametrize("option", ["--vectors", "--json"])
def test_pair_refuses_to_overwrite_an_input_frame(session_path, option, capsys):
    frame_b = session_path.parent / "src" / "S0_b.tif"
    before = frame_b.read_bytes()
    code = main(["pair", str(frame_b.with_name("S0_a.tif")), str(frame_b), "--no-ball",
                 option, str(frame_b)])
    assert code == 1
    assert "frame" in capsys.readouterr().err
    assert frame_b.read_bytes() == before


def test_pair_refuses_one_file_for_two_outputs(session_path, tmp_path, capsys):
    src = session_path.parent / "src"
    out = tmp_path / "out.txt"
    code = main(["pair", str(src / "S0_a.tif"), str(src / "S0_b.tif"), "--no-ball",
                 "--json", str(out), "--vectors", str(out)])
    assert code == 1 and "both" in capsys.readouterr().err
    assert not out.exists()


def test_pair_refuses_a_balls_description_with_no_ball(session_path, tmp_path, capsys):
    # taken without a word and used for nothing, they would read as part of the measurement
    src = session_path.parent / "src"
    code = main(["pair", str(src / "S0_a.tif"), str(src / "S0_b.tif"), "--no-ball",
                 "--ball-type", "cricket", "--flight-deg", "180"])
    assert code == 1 and capsys.readouterr().err == (
        "wakeline: --no-ball: --ball-type and --flight-deg describe the ball, and with --no-ball "
        "there is none to measure; leave one or the other out\n")


@pytest.mark.parametrize("command", ["table", "sheet"])
def test_an_output_that_is_a_folder_is_refused_and_leaves_nothing(session_path, tmp_path,
                                                                  command, capsys):
    out = tmp_path / "out"
    out.mkdir()
    before = sorted(p.name for p in tmp_path.iterdir())
    assert main([command, str(session_path), "-o", str(out)]) == 1
    assert "is a folder" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    assert not any(out.iterdir())


def test_pair_says_why_it_gives_no_reynolds_number():
    # it once left the number out without a word when the ball's diameter was not given
    from data.session_helpers import fake_result

    from app.cli.pair import describe
    from core.shot_result import ShotSettings
    from core.summary import ShotSummary

    text = describe(ShotSummary.from_dict(fake_result(ShotSettings(dt_s=2e-5)).summary()))
    assert text.endswith("note: no Reynolds number: it needs the ball's diameter "
                         "(--ball-diameter or --ball-type)")


def test_an_output_reached_by_a_link_is_written_where_the_link_points(session_path, tmp_path):
    # the link was once replaced by a file of its own, the file it named left as it was
    target = tmp_path / "runs" / "table-2026.csv"
    target.parent.mkdir()
    target.write_text("old\n")
    link = tmp_path / "latest.csv"
    link.symlink_to(target)
    assert main(["table", str(session_path), "-o", str(link)]) == 0
    assert link.is_symlink() and target.read_text().startswith("shot,")


@pytest.mark.parametrize("command", ["table", "sheet"])
def test_an_output_that_is_a_pipe_is_refused_and_left_a_pipe(session_path, tmp_path, command,
                                                             capsys):
    # outputs are written beside and renamed over: a pipe (or a device) would be replaced by an
    # ordinary file while its reader got nothing
    import os
    import stat

    out = tmp_path / "out.pipe"
    os.mkfifo(out)
    assert main([command, str(session_path), "-o", str(out)]) == 1
    assert capsys.readouterr().err == (f"wakeline: {out}: is not an ordinary file (a pipe or a "
                                       "device); give the name of a file to write\n")
    assert stat.S_ISFIFO(out.stat().st_mode)


def test_other_sessions_files_are_refused_through_links_folders_and_user_blocks(
        session_path, capsys):
    import os

    import h5py

    folder = session_path.parent
    (folder / "other.h5").write_bytes(session_path.read_bytes())
    (folder / "other.h5.journal").write_bytes(b"kept")
    (folder / "other.h5.pending").mkdir()
    os.symlink(folder / "other.h5.journal", folder / "j.csv")  # the link's target is replaced
    with h5py.File(folder / "data.mat", "w", userblock_size=512) as f:  # HDF5 after 512 bytes
        f["x"] = [1.0]
    before = _files(folder)
    for target, said in (("j.csv", "its journal (of the session other.h5)"),
                         ("other.h5.pending/t.csv", "lies in its folder of pending arrays"),
                         ("data.mat", "is an HDF5 file")):
        assert main(["table", str(session_path), "-o", str(folder / target)]) == 1
        err = capsys.readouterr().err
        assert said in err and len(err.strip().splitlines()) == 1, err
    assert _files(folder) == before
    # names that only look like a companion's suffix are written as before (they crashed)
    for name in (".lock", ".journal"):
        assert main(["table", str(session_path), "-o", str(folder / name)]) == 0
        assert (folder / name).read_text().startswith("shot,")
