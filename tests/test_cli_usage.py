"""Options of the `wakeline` commands as a new user meets them: what --help promises works, a
bad value is bad usage (exit 2, the command's own name on the error line), outputs to standard
output, and errors that name the user's own file and the real cause."""

from __future__ import annotations

import json

import pytest
from data.session_helpers import FAST_PIV, write_shot_folder

from app.cli import main
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
], ids=["scale", "diameter", "normalise", "status", "by", "ensemble"])
def test_bad_option_values_exit_2(session_path, argv, said, capsys):
    argv = [a.replace("{s}", str(session_path)) for a in argv]
    line = usage_error(argv, capsys)
    assert said in line and "Traceback" not in line


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


def test_the_sheet_refuses_standard_output(session_path, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    line = usage_error(["sheet", str(session_path), "-o", "-"], capsys)
    assert line.startswith("wakeline sheet: error: argument -o/--output: the shot sheet is a PDF")
    assert not (tmp_path / "-").exists()
