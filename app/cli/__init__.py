"""The `wakeline` command: the review window by default, subcommands for headless work.

Exit codes: 0 success, 1 failure (one line on stderr), 2 bad usage (argparse's own code).
"""

from __future__ import annotations

import argparse
import importlib
import sys
import traceback
from datetime import UTC, datetime

from core import WakelineError, __version__

# Each module adds its subcommands with add_commands(subparsers); each subcommand sets func.
COMMAND_MODULES = ("app.cli.pair", "app.cli.session", "app.cli.conditions", "app.cli.sheet",
                   "app.cli.demo")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="wakeline",
        description="PIV of seamed balls: velocity, vorticity and separation angles per shot. "
        "With no command, opens the review window.",
    )
    parser.add_argument("--version", action="version", version=f"wakeline {__version__}")
    subparsers = parser.add_subparsers(title="commands", metavar="COMMAND")
    for name in COMMAND_MODULES:
        importlib.import_module(name).add_commands(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    func = getattr(args, "func", None)
    try:
        if func is None:
            return open_window()
        return int(func(args) or 0)
    except WakelineError as exc:
        print(f"wakeline: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("wakeline: stopped", file=sys.stderr)
        return 1
    except OSError as exc:
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        print(f"wakeline: {where}{exc.strerror or exc}", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - a bug of ours: traceback to the log, not the screen
        log = write_crash_log()
        print(f"wakeline: internal error: {type(exc).__name__}: {exc} (details in {log})",
              file=sys.stderr)
        return 1


def open_window() -> int:
    """The review window, or a one-line refusal where Qt has no screen to show it on."""
    from app.cli import display

    if not display.has_display():
        raise WakelineError(
            "no display to open the window on (DISPLAY is not set); the headless commands "
            "are listed by 'wakeline --help'"
        )
    from app.qt.window import run_window

    return run_window(None)


def write_crash_log() -> str:
    """Append the current exception's traceback to the user's wakeline log; return its path."""
    from core.paths import user_data_dir

    try:
        path = user_data_dir() / "wakeline-errors.log"
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(f"--- {datetime.now(UTC).isoformat()} wakeline {__version__}\n")
            fh.write(traceback.format_exc())
    except OSError as exc:
        return f"no log written: {exc.strerror}"
    return str(path)

