"""Opening the window (issue 14, item 1): ``wakeline SESSION.h5``, plain ``wakeline`` back at
the last session and shot, recent sessions whose file is gone, and the missing-Qt-libraries line."""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile

import pytest
from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


@pytest.mark.parametrize(("argv", "expected"), [
    ([], (True, None)),
    (["day.h5"], (True, "day.h5")),
    (["DAY.HDF5"], (True, "DAY.HDF5")),
    (["pair", "a.tif"], (False, None)),
    (["--help"], (False, None)),
    (["sheet"], (False, None)),
])
def test_the_window_is_asked_for_with_no_arguments_or_one_session(argv, expected):
    from app.cli import window_request

    assert window_request(argv) == expected


def _run_cli(code: str, **env):
    environ = {**os.environ, "WAKELINE_HOME": tempfile.mkdtemp(prefix="wakeline-home-"), **env}
    return subprocess.run([sys.executable, "-c", code], check=False, capture_output=True,
                          text=True, env=environ, timeout=60)


def test_a_missing_session_file_is_one_line_exit_1(tmp_path):
    done = _run_cli(f"import sys; from app.cli import main; "
                    f"sys.exit(main([{str(tmp_path / 'gone.h5')!r}]))")
    assert done.returncode == 1, done.stderr
    assert done.stderr.strip().splitlines() == [(f"wakeline: {tmp_path / 'gone.h5'}: session "
                                                "file not found")]


def test_missing_qt_platform_libraries_name_the_debian_packages(tmp_path):
    """What a desktop without libxcb-icccm4 and libxcb-keysyms1 sees instead of Qt's abort."""
    code = ("import sys; import app.qt.platform_libs as libs; "
            "libs.missing_libraries = lambda plugin: ['libxcb-icccm.so.4', 'libxcb-keysyms.so.1']; "
            "from app.cli import main; sys.exit(main([]))")
    done = _run_cli(code, QT_QPA_PLATFORM="xcb", DISPLAY=":0")
    assert done.returncode == 1, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in done.stderr
    assert "sudo apt-get install libxcb-icccm4 libxcb-keysyms1" in lines[0]
    assert "'xcb' platform plugin" in lines[0]


def test_an_x_display_that_does_not_answer_is_refused_in_one_line():
    # a stale DISPLAY (ssh) made Qt abort the program with six lines about xcb-cursor (and the
    # demo with it, after its processing and before its sheet and table were written)
    from app.cli.display import missing_window_libraries

    env = {"DISPLAY": ":987", "QT_QPA_PLATFORM": "", "WAYLAND_DISPLAY": ""}  # no X server there
    with pytest.MonkeyPatch.context() as patch:
        for name, value in env.items():
            patch.setenv(name, value)
        if missing_window_libraries():
            pytest.skip("the window's libraries are missing here: that refusal comes first")
    done = _run_cli("import sys; from app.cli import main; sys.exit(main([]))", **env)
    assert done.returncode == 1, done.stderr
    assert done.stderr == (
        "wakeline: no display to open the window on (cannot connect to the X display "
        "DISPLAY=:987); the headless commands are listed by 'wakeline --help'\n")
    from app.qt.platform_libs import unreachable_display

    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("DISPLAY", ":987")
        for platform in ("offscreen", "xcb;offscreen"):  # not X11, or one to fall back on
            patch.setenv("QT_QPA_PLATFORM", platform)
            assert unreachable_display() is None
        patch.setenv("QT_QPA_PLATFORM", "xcb")
        assert unreachable_display() == "cannot connect to the X display DISPLAY=:987"


@pytest.mark.parametrize(("library", "package"), [
    ("libxcb-icccm.so.4", "libxcb-icccm4"),
    ("libxcb-render-util.so.0", "libxcb-render-util0"),
    ("libxkbcommon-x11.so.0", "libxkbcommon-x11-0"),
    ("libxcb-cursor.so.0", "libxcb-cursor0"),
    ("libEGL.so.1", "libegl1"),
    ("libdbus-1.so.3", "libdbus-1-3"),
    ("libglib-2.0.so.0", "libglib2.0-0"),
])
def test_library_files_map_to_their_debian_packages(library, package):
    from app.qt.platform_libs import debian_package

    assert debian_package(library) == package


def test_a_loadable_platform_is_no_problem(monkeypatch):
    import app.qt.platform_libs as libs

    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    assert libs.platform_plugins() == ["offscreen"]
    monkeypatch.setattr(libs, "missing_libraries", lambda plugin: [])
    assert libs.platform_problem() == ""


def test_plain_wakeline_reopens_the_last_session_at_the_last_shot(main_window, make_session,
                                                                   qtbot):
    from app.qt.window import MainWindow, run_window

    path = make_session(4)
    first = main_window(workers=0)
    assert first.open_session(path)
    first.model.set_current("s03")
    first.close()
    seen = {}

    def close_when_open():
        windows = [w for w in QApplication.topLevelWidgets() if isinstance(w, MainWindow)
                   and w.isVisible()]
        if not windows or windows[0].model.session is None:
            QTimer.singleShot(0, close_when_open)
            return
        seen["current"] = windows[0].model.current_id
        seen["path"] = windows[0].model.path
        windows[0].close()
        windows[0].deleteLater()  # the fixture checks that no window is left behind

    QTimer.singleShot(0, close_when_open)
    assert run_window(None) == 0
    assert seen["current"] == "s03" and seen["path"].name == "review.h5"


def test_a_recent_session_whose_file_is_gone_is_dropped_with_a_note(main_window, make_session,
                                                                     qtbot, tmp_path):
    path = make_session(2)
    window = main_window(workers=0)
    gone = str(tmp_path / "moved_away.h5")
    window.settings.setValue("recent", [gone, str(tmp_path / "review.h5")])
    assert window.reopen_last_session()
    assert window.model.path.name == "review.h5"
    assert window.recent_sessions() == [str(tmp_path / "review.h5")]
    assert "moved_away.h5 is gone" in window.statusBar().currentMessage()
    window.settings.setValue("recent", [gone, path])
    window.open_recent(gone)  # from File > Open recent
    assert gone not in window.recent_sessions()
    assert [a.text() for a in window.recent_menu.actions()] == [f"&1 {path}"]


@pytest.mark.parametrize("signum", ["SIGTERM", "SIGHUP"])
def test_a_signal_closes_the_window_like_its_close_button(make_session, tmp_path, signum):
    """A logout, ``kill`` or a closed terminal: the session is folded and unlocked, not left
    locked by a dead process (the journal would have kept every edit either way)."""
    import signal
    import time
    from pathlib import Path

    session = Path(make_session(2))
    lock = session.with_name(session.name + ".lock")
    environ = {**os.environ, "WAKELINE_HOME": str(tmp_path / "home"),
               "XDG_CONFIG_HOME": str(tmp_path / "config"), "QT_QPA_PLATFORM": "offscreen"}
    code = ("import sys; from app.qt.window import run_window; "
            f"sys.exit(run_window({str(session)!r}))")
    window = subprocess.Popen([sys.executable, "-c", code],
                              env=environ, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True)
    try:
        deadline = time.monotonic() + 60
        while not lock.exists() and window.poll() is None and time.monotonic() < deadline:
            time.sleep(0.1)
        assert lock.exists(), window.stderr.read() if window.poll() is not None else "no lock"
        window.send_signal(getattr(signal, signum))
        _, stderr = window.communicate(timeout=30)
    finally:
        window.kill()
    assert window.returncode == 0, stderr
    assert not lock.exists() and "Traceback" not in stderr
    assert not session.with_name(session.name + ".journal").exists()
