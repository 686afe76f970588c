"""The `wakeline` command: the review window by default, subcommands for headless work.

``wakeline`` reopens the last session in the window, ``wakeline SESSION.h5`` opens that one; both
skip building the parser, whose commands import the measurement (the window must come up fast).
Exit codes: 0 success, 1 failure (one line on stderr), 2 bad usage (argparse's own code).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
from datetime import UTC, datetime
from pathlib import Path

from app.cli.options import UsageError
from core import WakelineError, __version__

# Each module adds its subcommands with add_commands(subparsers); each subcommand sets func.
COMMAND_MODULES = ("app.cli.pair", "app.cli.session", "app.cli.conditions", "app.cli.sheet",
                   "app.cli.demo")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="wakeline",
        usage="wakeline [SESSION.h5] | wakeline COMMAND ...",
        description="PIV of seamed balls: velocity, vorticity and separation angles per shot. "
        "With no command, opens the review window on the last session; with a session file, "
        "on that session.",
    )
    parser.add_argument("--version", action="version", version=f"wakeline {__version__}")
    subparsers = parser.add_subparsers(title="commands", metavar="COMMAND", prog="wakeline")
    for name in COMMAND_MODULES:
        importlib.import_module(name).add_commands(subparsers)
    for command in subparsers.choices.values():  # a bad value found late is told by its command
        command.set_defaults(command_parser=command)
    return parser


SESSION_SUFFIXES = (".h5", ".hdf5")


def window_request(argv: list[str]) -> tuple[bool, str | None]:
    """``(True, session or None)`` when the arguments ask for the window: none at all, or one
    session file (a name ending in .h5/.hdf5, or any existing file)."""
    if not argv:
        return True, None
    arg = argv[0]
    if len(argv) == 1 and not arg.startswith("-") and (
            arg.lower().endswith(SESSION_SUFFIXES) or Path(arg).is_file()):
        return True, arg
    return False, None


def negative_values_attached(argv: list[str]) -> list[str]:
    """``--dt -6e-5`` as ``--dt=-6e-5``: argparse takes a word starting with '-' for an option
    unless it is a plain negative number ("-1", "-0.5"), so a negative value in exponent form
    was refused as a missing value before the option's own check could say what is wrong."""
    out: list[str] = []
    for word in argv:
        option = out[-1] if out and "--" not in out else ""
        if option.startswith("--") and "=" not in option and _is_negative_number(word):
            out[-1] = f"{option}={word}"
        else:
            out.append(word)
    return out


#: Commands whose one positional argument is the session and that take ``--shots ID...``.
SHOTS_COMMANDS = ("process", "sheet")


def session_after_shots(argv: list[str]) -> list[str]:
    """``process --shots a b S.h5`` as ``process S.h5 --shots a b``: ``--shots`` takes every
    word up to the next option, so a session named after the ids was taken for one and the
    command refused for want of a session. Moved only where the last of those words names a
    session file and no session came before ``--shots``."""
    if len(argv) < 2 or argv[0] not in SHOTS_COMMANDS or "--shots" not in argv:
        return argv
    start = argv.index("--shots")
    if "--" in argv[:start] or any(not w.startswith("-") and w.lower().endswith(SESSION_SUFFIXES)
                                   for w in argv[1:start]):
        return argv
    end = start + 1
    while end < len(argv) and not argv[end].startswith("-"):
        end += 1
    last = argv[end - 1]
    if end - start > 2 and last.lower().endswith(SESSION_SUFFIXES):
        return [argv[0], last, *argv[1:end - 1], *argv[end:]]
    return argv


def _is_negative_number(word: str) -> bool:
    try:
        float(word)
    except ValueError:
        return False
    return word.startswith("-")


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    _printable_anywhere()
    window, session = window_request(argv)
    func = None
    if not window:
        parser = build_parser()
        args, unknown = parser.parse_known_args(
            session_after_shots(negative_values_attached(argv)))
        if unknown:  # told by the command they were given to, with its usage (not wakeline's)
            getattr(args, "command_parser", parser).error(
                f"unrecognized arguments: {' '.join(unknown)}")
        func = getattr(args, "func", None)
    try:
        if func is None:
            return open_window(session)
        code = int(func(args) or 0)
        sys.stdout.flush()  # here, where a reader that stopped early is told apart
        return code
    except UsageError as exc:
        args.command_parser.error(str(exc))  # exits 2, as argparse does for a bad value
    except WakelineError as exc:
        print(f"wakeline: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("wakeline: stopped", file=sys.stderr)
        return 1
    except BrokenPipeError:
        # a reader that stopped early (`| head`): the rest goes nowhere, quietly, as other
        # shell tools do (and closing stdout at exit raises nothing)
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except OSError as exc:
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        print(f"wakeline: {where}{exc.strerror or exc}", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - a bug of ours: traceback to the log, not the screen
        if _interrupted(exc):
            print("wakeline: stopped", file=sys.stderr)
            return 1
        log = write_crash_log()
        print(f"wakeline: internal error: {type(exc).__name__}: {exc} ({log})", file=sys.stderr)
        return 1


def _interrupted(exc: BaseException) -> bool:
    """Whether ``exc`` was raised by a Ctrl-C: compiled code (numba) that a KeyboardInterrupt
    reaches hands it on wrapped in a SystemError, its cause or context."""
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, KeyboardInterrupt):
            return True
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__
    return False


def _printable_anywhere() -> None:
    """A terminal whose encoding lacks "°", "±", "−" or "⁵" (an ASCII or Latin-1 locale) shows a
    stand-in for them rather than failing the command."""
    for stream in (sys.stdout, sys.stderr):
        reconfigure = getattr(stream, "reconfigure", None)
        if reconfigure is not None:
            reconfigure(errors="replace")


def open_window(session: str | None = None) -> int:
    """The review window (on ``session``, else the last one), or a one-line refusal where Qt
    has no screen to show it on."""
    from app.cli import display

    if session is not None and not Path(session).is_file():
        raise WakelineError(f"{session}: session file not found")
    if not display.has_display():
        raise WakelineError(
            f"no display to open the window on ({display.why_no_display()}); the headless "
            "commands are listed by 'wakeline --help'"
        )
    missing = display.missing_window_libraries()
    if missing:
        raise WakelineError(display.missing_libraries_message(missing))
    from app.qt.window import run_window

    return run_window(session)


def write_crash_log() -> str:
    """Append the current exception's traceback to the user's wakeline log; say where it went
    ("details in PATH", or why no log was written)."""
    from core.paths import user_data_dir

    try:
        path = user_data_dir() / "wakeline-errors.log"
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(f"--- {datetime.now(UTC).isoformat()} wakeline {__version__}\n")
            fh.write(traceback.format_exc())
    except OSError as exc:
        return f"no details logged: {exc.strerror or exc}"
    return f"details in {path}"

