"""Options of the `wakeline` commands as a new user meets them: what --help promises works, a
bad value is bad usage (exit 2, the command's own name on the error line), outputs to standard
output, and errors that name the user's own file and the real cause."""

from __future__ import annotations

import json
import sys

import pytest
from data.session_helpers import FAST_PIV, write_shot_folder

from app.cli import main
from core import WakelineError
from core.shot_result import ShotSettings
from core.store import Session, import_folder


@pytest.fixture
def session_path(tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 2), tmp_path / "s.h5")
    return tmp_path / "s.h5"


def usage_error(argv, capsys) -> str:
    """The error line of a command refused as bad usage (exit 2)."""
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    return capsys.readouterr().err.strip().splitlines()[-1]


# --settings: a JSON file or the JSON itself

def test_settings_given_inline_as_the_help_shows(session_path, capsys):
    settings = {"piv": FAST_PIV.to_dict(), "find_ball": False}
    code = main(["process", str(session_path), "--settings", json.dumps(settings),
                 "--workers", "0", "--quiet"])
    assert code == 0, capsys.readouterr().err
    with Session.open(session_path, writable=False) as s:
        assert s.processing_settings()["piv"]["passes"][0]["window_px"] == 32


def test_settings_from_a_file_still_work(session_path, tmp_path, capsys):
    file = tmp_path / "settings.json"
    file.write_text(json.dumps({"piv": FAST_PIV.to_dict(), "find_ball": False}))
    assert main(["process", str(session_path), "--settings", str(file), "--workers", "0",
                 "--quiet"]) == 0
    with Session.open(session_path, writable=False) as s:
        assert s.processing_settings()["find_ball"] is False


def test_bad_inline_settings_are_one_line_bad_usage(session_path, capsys):
    line = usage_error(["process", str(session_path), "--settings", '{"piv": '], capsys)
    assert line.startswith("wakeline process: error: argument --settings: not valid JSON")


@pytest.mark.parametrize(("settings", "said"), [
    ('{"piv": 3}', "settings: piv must be an object of PIV settings, not 3"),
    ('{"piv": {"passes": "x"}}', 'PIV settings: passes must be a list of passes, not "x"'),
    ('{"find_ball": "false"}', 'settings: find_ball must be true or false, not "false"'),
    ('{"normalise_spacings": "3"}',
     'settings: normalise_spacings must be a finite number or null, not "3"'),
    ('{"background": "mean"}', 'settings: background must be min or median or null, not "mean"'),
    ('{"normalise_spacings": -3}',
     "settings: normalise_spacings must be 0 or more (0 or null: no normalisation), not -3"),
], ids=["piv a number", "passes a word", "switch a word", "number a word", "no such background",
        "negative spacings"])
def test_settings_of_the_wrong_kind_are_refused_in_one_line(session_path, settings, said,
                                                            capsys):
    # values of the wrong kind were once taken at Python's word ("false" switched a step on)
    # or ended in an internal error; values out of range were kept in the session and then
    # refused by every later run
    with Session.open(session_path, writable=False) as s:
        before = s.processing_settings()
    code = main(["process", str(session_path), "--settings", settings, "--quiet"])
    err = capsys.readouterr().err.strip()
    assert code == 1 and err == f"wakeline: {said}"
    with Session.open(session_path, writable=False) as s:
        assert s.processing_settings() == before


def help_text(command: str, capsys) -> str:
    """``wakeline COMMAND --help`` as printed, lines joined."""
    with pytest.raises(SystemExit) as stop:
        main([command, "--help"])
    assert stop.value.code == 0
    return " ".join(capsys.readouterr().out.split())


def test_the_help_of_settings_says_both_ways(capsys):
    text = help_text("process", capsys)
    assert "a JSON file, or the JSON itself" in text and "--settings '{\"piv\"" in text


# bad option values are bad usage (exit 2), like argparse's own refusals

@pytest.mark.parametrize(("argv", "said"), [
    (["pair", "a.tif", "b.tif", "--scale", "0"], "argument --scale: must be positive, got 0"),
    (["pair", "a.tif", "b.tif", "--ball-diameter", "nan"], "'nan' is not a finite number"),
    (["pair", "a.tif", "b.tif", "--normalise", "-1"], "--normalise: must be 0 (off) or positive"),
    (["sheet", "{s}", "-o", "x.pdf", "--status", "acepted"],
     "argument --status: unknown review status 'acepted'"),
    (["conditions", "{s}", "--by", "nosuchcol"], "argument --by: no column 'nosuchcol'"),
    (["table", "{s}", "-o", "x.csv", "--ensemble"], "argument --ensemble: goes with --by"),
    (["pair", "a.tif", "b.tif", "--air-temp", "-300"], "-300 deg C is at or below absolute zero"),
    # a double-pulse laser's pulse separations (common practice): 50 is microseconds typed as s
    (["pair", "a.tif", "b.tif", "--dt", "50"],
     ("argument --dt: 50 s is outside 1e-07 to 0.01 s, the time between a double-pulse laser's "
     "two pulses; in microseconds? 50 us is 5e-05 s")),
    # a lab's air (common practice): 293 is kelvin typed where deg C belong
    (["pair", "a.tif", "b.tif", "--air-temp", "293"],
     "293 deg C is outside -40 to 60 deg C, the air of a lab or a range (in kelvin? give deg C)"),
    (["sheet", "{s}", "-o", "x.pdf", "--column", "operator"],
     "argument --column: 'operator' is not a numeric column of this session (choose"),
    # a misspelt column: the likely one is named, as import names a manifest's
    (["conditions", "{s}", "--by", "seam_dg"],
     "argument --by: no column 'seam_dg' with values in s.h5 (is 'seam_deg' meant?)"),
    (["sheet", "{s}", "-o", "x.pdf", "--column", "seam_dg"],
     ("argument --column: 'seam_dg' is not a numeric column of this session (is 'seam_deg' "
      "meant?)")),
], ids=["scale", "diameter", "normalise", "status", "by", "ensemble", "air temperature", "dt",
        "kelvin", "column", "by misspelt", "column misspelt"])
def test_bad_option_values_exit_2(session_path, argv, said, capsys):
    argv = [a.replace("{s}", str(session_path)) for a in argv]
    line = usage_error(argv, capsys)
    assert said in line and "Traceback" not in line


def test_a_dt_of_milliseconds_gets_no_microseconds_hint_that_would_be_out_of_range(capsys):
    # 0.05 s read as us would be 5e-08 s, itself outside the range: no such hint
    line = usage_error(["pair", "a.tif", "b.tif", "--dt", "0.05"], capsys)
    assert line.endswith("argument --dt: 0.05 s is outside 1e-07 to 0.01 s, the time between a "
                         "double-pulse laser's two pulses")


# help and usage text

def test_a_command_error_names_the_command_not_the_whole_top_level_usage(capsys):
    with pytest.raises(SystemExit):
        main(["pair"])
    err = capsys.readouterr().err
    assert err.startswith("usage: wakeline pair [-h]") and "COMMAND" not in err
    assert err.strip().splitlines()[-1].startswith("wakeline pair: error: ")


def test_help_texts_say_what_the_readme_says(capsys):
    assert "95 % interval" in help_text("conditions", capsys)
    assert "%%" not in help_text("conditions", capsys)
    assert "air_temp_c, camera" in help_text("import", capsys)
    assert "$WAKELINE_HOME" in help_text("demo", capsys)


@pytest.mark.parametrize("value", ["-6e-5", "-1", "-.5", "-inf"])
def test_a_negative_value_reaches_the_options_own_check(value, capsys):
    line = usage_error(["pair", "a.tif", "b.tif", "--dt", value], capsys)
    assert "argument --dt: must be positive" in line or "not a finite number" in line


def test_a_negative_flight_direction_in_exponent_form_is_taken():
    from app.cli import build_parser, negative_values_attached

    argv = negative_values_attached(["pair", "a.tif", "--flight-deg", "-1.5e1", "--", "-1e3"])
    assert argv[-1] == "-1e3"  # after '--' every word is left as it is
    assert build_parser().parse_args(argv[:-2]).flight_deg == -15.0


# -o - : the table to standard output

@pytest.mark.parametrize("by", [[], ["--by", "seam_deg"]], ids=["shots", "conditions"])
def test_table_to_standard_output_is_the_file_table(session_path, tmp_path, by, capsys,
                                                    monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["table", str(session_path), *by, "-o", "-"]) == 0
    printed = capsys.readouterr().out
    assert not (tmp_path / "-").exists()
    assert main(["table", str(session_path), *by, "-o", "t.csv"]) == 0
    written = (tmp_path / "t.csv").read_text(encoding="utf-8")
    assert printed.splitlines() == written.splitlines() and printed.startswith("s")


@pytest.mark.parametrize("argv", [["table", "{s}", "-o", "-"], ["conditions", "{s}"]],
                         ids=["table", "conditions"])
def test_a_reader_that_stops_early_ends_the_output_quietly(session_path, argv, monkeypatch,
                                                           capsys):
    import os

    read_end, write_end = os.pipe()
    os.close(read_end)  # as `| head` does once it has its lines
    out = open(write_end, "w", encoding="utf-8")  # noqa: SIM115 - closed below
    monkeypatch.setattr(sys, "stdout", out)
    assert main([a.replace("{s}", str(session_path)) for a in argv]) == 0
    out.close()  # what was left unwritten goes nowhere: no error at exit either
    assert "Broken pipe" not in capsys.readouterr().err


@pytest.mark.parametrize("address", ["garbage", "localhost:abc", "tcp://localhost", "",
                                     "tcp://host:70000"])
def test_a_scheduler_address_without_host_and_port_is_bad_usage(session_path, address, capsys):
    # it once waited 20 s for a client and printed dask's traceback
    line = usage_error(["process", str(session_path), "--scheduler", address], capsys)
    assert line.endswith(f"{address!r} is not an address like tcp://HOST:PORT")


def test_scheduler_addresses_as_dask_takes_them():
    from app.cli.options import scheduler_address

    assert scheduler_address("10.0.0.5:8786") == "tcp://10.0.0.5:8786"
    assert scheduler_address("tls://node-3.lab:8786") == "tls://node-3.lab:8786"
    assert scheduler_address("tcp://[::1]:8786") == "tcp://[::1]:8786"


def test_the_sheet_refuses_standard_output(session_path, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    line = usage_error(["sheet", str(session_path), "-o", "-"], capsys)
    assert line.startswith("wakeline sheet: error: argument -o/--output: the shot sheet is a PDF")
    assert not (tmp_path / "-").exists()
    # nor is it written under another kind's name (a table's, say)
    line = usage_error(["sheet", str(session_path), "-o", "picks.csv"], capsys)
    assert line.endswith("the shot sheet is a PDF: name it .pdf (not picks.csv)")
    assert not (tmp_path / "picks.csv").exists()


# a read-only file system: the user's own file and the real cause

def _read_only_file_system(monkeypatch, folder):
    """Writes into ``folder`` fail as on a file system mounted read-only."""
    import errno
    import os

    real_replace, real_statvfs = os.replace, os.statvfs

    def replace(src, dst, *args, **kwargs):
        if str(src).startswith(str(folder)):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(src))
        return real_replace(src, dst, *args, **kwargs)

    class ReadOnly:
        f_flag = os.ST_RDONLY

    monkeypatch.setattr(os, "replace", replace)
    monkeypatch.setattr(os, "statvfs", lambda path: ReadOnly() if str(path).startswith(
        str(folder)) else real_statvfs(path))
    monkeypatch.setattr(os, "access", lambda path, mode, **kw: False)


@pytest.mark.parametrize(("command", "name"), [("table", "out.csv"), ("sheet", "out.pdf")])
def test_an_output_on_a_read_only_file_system_names_the_file_and_the_cause(
        session_path, tmp_path, monkeypatch, command, name, capsys):
    out = tmp_path / "rodir" / name
    out.parent.mkdir()
    _read_only_file_system(monkeypatch, out.parent)
    assert main([command, str(session_path), "-o", str(out)]) == 1
    assert capsys.readouterr().err == f"wakeline: {out}: cannot write here (read-only file " \
                                      "system)\n"
    assert list(out.parent.iterdir()) == []


def test_pair_outputs_on_a_read_only_file_system(session_path, tmp_path, monkeypatch, capsys):
    src = session_path.parent / "src"
    out = tmp_path / "rodir" / "r.json"
    out.parent.mkdir()
    _read_only_file_system(monkeypatch, out.parent)
    assert main(["pair", str(src / "S0_a.tif"), str(src / "S0_b.tif"), "--no-ball", "--json",
                 str(out)]) == 1
    assert capsys.readouterr().err == f"wakeline: {out}: cannot write here (read-only file " \
                                      "system)\n"


def test_a_session_on_a_read_only_file_system_is_not_called_a_read_only_file(
        session_path, monkeypatch, capsys):
    _read_only_file_system(monkeypatch, session_path.parent)
    assert main(["process", str(session_path), "--workers", "0"]) == 1
    err = capsys.readouterr().err
    assert "cannot edit the session here (read-only file system)" in err and "mode" not in err


def test_conditions_by_on_a_session_it_cannot_write_gives_the_statistics_anyway(
        session_path, monkeypatch, capsys):
    # the grouping is kept in the session when it can be; the statistics only read it
    _read_only_file_system(monkeypatch, session_path.parent)
    assert main(["conditions", str(session_path), "--by", "seam_deg"]) == 0
    out, err = capsys.readouterr()
    assert "condition(s) by seam_deg" in out
    assert err == f"note: {session_path} is not writable here: the grouping is used, not " \
                  "kept in it\n"
    # the grouping it already keeps needs no note
    assert main(["conditions", str(session_path)]) == 0
    assert capsys.readouterr().err == ""


def test_a_new_session_in_a_read_only_folder_says_so(tmp_path, monkeypatch, capsys):
    import errno

    from core.store.lock import Lock

    def refuse(self, me):
        raise OSError(errno.EROFS, "Read-only file system", str(self.path))

    monkeypatch.setattr(Lock, "_try_create", refuse)
    src = write_shot_folder(tmp_path / "src", 1)
    assert main(["import", str(src), str(tmp_path / "new.h5")]) == 1
    err = capsys.readouterr().err
    assert err.endswith("new.h5: cannot write in its folder (read-only file system)\n")


def test_a_terminal_without_the_degree_sign_gets_a_stand_in_not_an_error(monkeypatch):
    import io

    from app.cli import _printable_anywhere

    raw = io.BytesIO()
    monkeypatch.setattr(sys, "stdout", io.TextIOWrapper(raw, encoding="ascii"))
    _printable_anywhere()
    print("upper: -9.6° ± 1.8°, Re 1.43 × 10⁵")
    sys.stdout.flush()
    assert raw.getvalue() == b"upper: -9.6? ? 1.8?, Re 1.43 ? 10?\n"


def test_an_internal_error_says_where_its_details_went(monkeypatch, tmp_path, capsys):
    from app.cli import pair

    def broken(_args):
        raise RuntimeError("a bug of ours")

    monkeypatch.setattr(pair, "run_pair", broken)
    monkeypatch.setenv("WAKELINE_HOME", str(tmp_path / "home"))
    assert main(["pair", "a.tif", "b.tif"]) == 1
    err = capsys.readouterr().err.strip()
    log = tmp_path / "home" / "wakeline-errors.log"
    assert err == f"wakeline: internal error: RuntimeError: a bug of ours (details in {log})"
    assert "RuntimeError: a bug of ours" in log.read_text()
    # where no log can be written (the home under a file), the line says so plainly
    (tmp_path / "a file").write_text("")
    monkeypatch.setenv("WAKELINE_HOME", str(tmp_path / "a file" / "home"))
    assert main(["pair", "a.tif", "b.tif"]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith("wakeline: internal error: RuntimeError: a bug of ours (no details "
                          "logged: ")


def test_a_sheet_that_cannot_be_written_says_why_in_one_line(session_path, tmp_path,
                                                            monkeypatch, capsys):
    from pathlib import Path

    real_open = Path.open

    def refuse_part(self, *args, **kwargs):
        if self.name.endswith(".part"):
            raise PermissionError(13, "Permission denied", str(self))
        return real_open(self, *args, **kwargs)

    monkeypatch.setattr(Path, "open", refuse_part)
    out = tmp_path / "out.pdf"
    assert main(["sheet", str(session_path), "-o", str(out)]) == 1
    # the system's reason, and nothing of Qt's own ("QPainter::begin(): Returned false")
    assert capsys.readouterr().err == (f"wakeline: {out}: cannot write here (no permission to "
                                       "write in this folder)\n")
    # a folder that is not there is named, as for the table, not made
    monkeypatch.undo()
    gone = tmp_path / "no" / "such" / "out.pdf"
    assert main(["sheet", str(session_path), "-o", str(gone)]) == 1
    assert capsys.readouterr().err == (f"wakeline: {gone}: cannot write here (the folder does "
                                       "not exist)\n")
    assert not (tmp_path / "no").exists()


def test_settings_read_back_from_a_session_are_taken_as_they_were_stored():
    # an older wakeline kept settings of any kind; its sessions must still open and their
    # results stay readable (only settings coming in are checked)
    import numpy as np


    stored = {"find_ball": 0, "mask_glare": "false", "flight_deg": "180",
              "piv": {"workers": True, "passes": [{"window_px": "32", "overlap": "0.5"}]}}
    settings = ShotSettings.from_dict(stored)
    assert settings.find_ball == 0 and settings.piv.passes[0].window_px == 32
    assert settings.fingerprint() == ShotSettings.from_dict(stored).fingerprint()
    # coming in, numpy's numbers are numbers, and a number too large is refused in words
    assert ShotSettings.from_dict({"dt_s": np.float32(2e-5)}, strict=True).dt_s > 0
    with pytest.raises(WakelineError, match=r"normalise_spacings must be a finite number or "
                       r"null, not 1{400}"):
        ShotSettings.from_dict({"normalise_spacings": int("1" * 400)}, strict=True)


def test_a_folder_or_a_damaged_header_given_as_a_session_is_named_as_such(tmp_path, capsys):
    assert main(["table", str(tmp_path), "-o", str(tmp_path / "t.csv")]) == 1
    assert capsys.readouterr().err.strip() == (
        f"wakeline: {tmp_path}: is a folder, not a session file (give its .h5 file)")
    # a session whose header is damaged: not called another program's file
    from core.store import Session

    path = tmp_path / "s.h5"
    Session.create(path).close()
    data = bytearray(path.read_bytes())
    data[512:1024] = bytes(512)  # the root group's attributes (found by trying, h5py 3.16)
    path.write_bytes(bytes(data))
    assert main(["table", str(path), "-o", str(tmp_path / "t.csv")]) == 1
    err = capsys.readouterr().err
    assert f"{path}: session file damaged (its header cannot be read: " in err
    assert err.rstrip().endswith("; restore it from a backup")


def test_a_folder_that_takes_no_new_files_is_not_called_missing(tmp_path):
    # a system folder (/proc) refuses new files with "no such file": the folder is there
    import errno

    from core.store.files import failure_cause

    refused = OSError(errno.ENOENT, "No such file or directory", str(tmp_path / "out.json"))
    assert failure_cause(refused) == "this folder takes no new files"
    gone = OSError(errno.ENOENT, "No such file or directory", str(tmp_path / "no" / "out.json"))
    assert failure_cause(gone) == "the folder does not exist"


def test_a_ctrl_c_inside_compiled_code_stops_like_any_ctrl_c(monkeypatch, tmp_path, capsys):
    # numba hands a KeyboardInterrupt that reaches compiled code on as a SystemError (seen on
    # `timeout -s INT` over `wakeline process`): it was reported as an internal error
    from app.cli import pair

    def interrupted(_args):
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt as exc:
            raise SystemError("CPUDispatcher(...) returned a result with an exception set") from exc

    monkeypatch.setattr(pair, "run_pair", interrupted)
    monkeypatch.setenv("WAKELINE_HOME", str(tmp_path / "home"))
    assert main(["pair", "a.tif", "b.tif"]) == 1
    assert capsys.readouterr().err.strip() == "wakeline: stopped"
    assert not (tmp_path / "home" / "wakeline-errors.log").exists()


def test_a_session_named_after_the_shots_ids_is_the_session(session_path, tmp_path, capsys):
    # `--shots` takes every word up to the next option: `sheet -o x.pdf --shots S0 S1 s.h5`
    # was refused for want of a session
    import os

    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    out = tmp_path / "x.pdf"
    assert main(["sheet", "-o", str(out), "--shots", "S0", "S1", str(session_path)]) == 0
    assert out.exists() and "2 shot(s)" in capsys.readouterr().out
    # a session given before --shots, or a shot id ending in .h5 alone, is left as written
    from app.cli import session_after_shots

    assert session_after_shots(["process", "s.h5", "--shots", "a", "b.h5"]) == [
        "process", "s.h5", "--shots", "a", "b.h5"]
    assert session_after_shots(["process", "--shots", "a.h5"]) == ["process", "--shots", "a.h5"]
    assert session_after_shots(["process", "--workers", "2", "--shots", "a", "s.h5", "--force"]) == [
        "process", "s.h5", "--workers", "2", "--shots", "a", "--force"]


def test_an_unknown_option_is_told_by_its_command_with_its_usage(session_path, capsys):
    # it was told by wakeline itself, whose usage line lists no command's options
    with pytest.raises(SystemExit) as stop:
        main(["table", str(session_path), "-o", "x.csv", "--frob"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert err.startswith("usage: wakeline table ")
    assert err.strip().splitlines()[-1] == "wakeline table: error: unrecognized arguments: --frob"
    assert usage_error(["--frob"], capsys) == "wakeline: error: unrecognized arguments: --frob"
