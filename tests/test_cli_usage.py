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
    assert "process: error: argument --settings: not valid JSON" in line


def help_text(command: str, capsys) -> str:
    """``wakeline COMMAND --help`` as printed, lines joined."""
    with pytest.raises(SystemExit) as stop:
        main([command, "--help"])
    assert stop.value.code == 0
    return " ".join(capsys.readouterr().out.split())


def test_the_help_of_settings_says_both_ways(capsys):
    text = help_text("process", capsys)
    assert "a JSON file, or the JSON itself" in text and "--settings '{\"piv\"" in text
