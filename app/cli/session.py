"""`wakeline import`, `wakeline process`, `wakeline table`: sessions from the command line."""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import signal
import sys
from pathlib import Path

from app.cli.conditions import column_list
from app.cli.options import (
    UsageError,
    check_outputs,
    known_ball_types,
    scheduler_address,
    whole_count,
)
from app.review.text import decisions_text
from core import STOP_SIGNALS, WakelineError
from core.store.companions import session_frame_files
from core.store.files import writing


def add_commands(subparsers) -> None:
    _add_import(subparsers)
    _add_process(subparsers)
    _add_table(subparsers)


def _add_import(subparsers) -> None:
    p = subparsers.add_parser(
        "import",
        help="import a folder of shots into a session",
        description="Import the shots listed in SRC_DIR/shots.csv (columns shot, dt_s, "
        "scale_mm_per_px, ball_diameter_mm, and optional ball_type, surface, speed_nominal_m_s, "
        "spin_rpm, spin_axis_deg, seam_deg, flight_deg, air_temp_c, camera, frames_swapped, "
        "notes; other columns are kept as metadata). dt_s is in seconds, 1e-7 to 0.01. An "
        "empty scale_mm_per_px: the scale from the fitted "
        "ball and its diameter; air_temp_c sets the air's viscosity for the Reynolds number "
        "(20 deg C when empty); shots with the same camera share a background image when the "
        "processing settings ask for one; frames_swapped yes: the camera wrote the later "
        "exposure as frame A. "
        "Frames are <shot>_a.<tif|png> and <shot>_b.<tif|png> (any case), or one two-page "
        "<shot>.tif. The session is created if it does not exist (not when no row can be "
        "imported). Bad rows are reported by line and "
        "shot; the good ones are imported and the exit code is 1.",
    )
    p.add_argument("src_dir", type=Path, help="folder with shots.csv and the frame files")
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("--embed", action="store_true",
                   help="store the frames compressed inside the session instead of "
                   "referencing them by path")
    p.add_argument("--correct-values", action="store_true",
                   help="a shot already in the session with the same frames but other values "
                   "in shots.csv (a wrong dt_s or scale) takes the new values; its picks stay, "
                   "and when the values change how it is measured (dt_s, scale, ball, "
                   "flight_deg, air_temp_c, frames_swapped) the next 'wakeline process' measures it "
                   "again")
    p.set_defaults(func=run_import)


def _add_process(subparsers) -> None:
    p = subparsers.add_parser(
        "process",
        help="measure every shot of a session not yet processed with its settings",
        description="Measure the shots of a session in parallel worker processes, saving each "
        "result as it arrives; a stopped run (Ctrl-C, SIGTERM or SIGHUP) finishes and keeps the "
        "shots in hand and the next run goes on with the rest (a second Ctrl-C aborts them; "
        "after --force the rest were up to date: the stop names them). "
        "Shots already processed with the same settings are skipped unless --force. Exit "
        "code 1 when a shot failed or the run was stopped.",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("--shots", nargs="+", metavar="ID", help="only these shots")
    p.add_argument("--workers", type=whole_count, metavar="N",
                   help="worker processes (default: one per core, as many as free memory "
                   "holds; 0 = in this process)")
    p.add_argument("--scheduler", type=scheduler_address, metavar="ADDRESS",
                   help="tcp://HOST:PORT of a dask scheduler: measure on that cluster "
                   "(its workers must see the session and frame files at the same paths)")
    p.add_argument("--force", action="store_true", help="measure again even if up to date")
    p.add_argument("--settings", type=settings_source, metavar="JSON",
                   help="new processing settings for the session: a JSON file, or the JSON "
                   "itself in quotes (text starting with '{'), e.g. --settings "
                   """'{"piv": {"passes": [{"window_px": 64, "overlap": 0.5}]}, """
                   """"find_ball": true}' or --settings my_settings.json""")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run_process)


def _add_table(subparsers) -> None:
    p = subparsers.add_parser(
        "table",
        help="write the table of picks as CSV",
        description="One row per shot: metadata, proposed and final separation angles on both "
        "sides, uncertainty, wake deflection and state, review status, who and when. "
        "UTF-8 CSV with a header row; units are in the column names; empty cell = no value. "
        "With --by: one row per condition instead (see 'wakeline conditions').",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("-o", "--output", type=Path, required=True, metavar="OUT.csv",
                   help="the CSV file to write; - writes the table to standard output")
    p.add_argument("--by", nargs="?", const=[], type=column_list, metavar="COLUMNS",
                   help="one row per condition of these comma-separated manifest columns "
                   "(alone: the session's grouping): shots, mean, sd and 95 %% interval of "
                   "each side, upper - lower, wake deflection, Reynolds number range")
    p.add_argument("--ensemble", action="store_true",
                   help="with --by: add each condition's ensemble separation (slower)")
    p.set_defaults(func=run_table)


def run_import(args: argparse.Namespace) -> int:
    from core.store import import_folder
    from core.store.manifest import MANIFEST_NAME

    if not args.src_dir.is_dir():
        raise WakelineError(f"{args.src_dir}: " + (
            f"is a file; give the folder that holds it and its {MANIFEST_NAME}"
            if args.src_dir.exists() else "folder not found"))
    report = import_folder(args.src_dir, args.session, embed=args.embed,
                           ball_types=known_ball_types(), correct_values=args.correct_values)
    for problem in report.problems:
        print(f"wakeline: {problem}", file=sys.stderr)
    for note in report.notes:
        print(f"note: {note}", file=sys.stderr)
    bad_rows = [p for p in report.problems
                if p.startswith(f"{args.src_dir / MANIFEST_NAME} line")]
    if len(bad_rows) > len(report.differing):  # the differing ones have their own remedy
        kept = (": the shots imported now are left as they are" if args.session.exists()
                else "")
        print(f"note: correct the rows named in {args.src_dir / MANIFEST_NAME} (or those shots' "
              f"frame files) and import the folder again{kept}", file=sys.stderr)
    if report.differing:
        shots = list(report.differing)
        print(f"note: to take the new values of {', '.join(shots[:5])}"
              f"{' ...' if len(shots) > 5 else ''} as corrections, import again "
              "with --correct-values", file=sys.stderr)
    print(f"{args.session}: imported {len(report.imported)} shot(s)"
          + (f", corrected the values of {len(report.corrected)}" if report.corrected else "")
          + (f", {len(report.problems)} problem(s)" if report.problems else ""))
    return 1 if report.problems else 0


class _StopFlag:
    """The first stop signal asks the run to stop after the shots in hand (they are saved); a
    second one aborts (the shots in hand are dropped, everything saved so far is kept)."""

    def __init__(self):
        self.stop = False

    def __call__(self) -> bool:
        return self.stop

    def on_signal(self, signum, frame) -> None:
        if self.stop:
            raise KeyboardInterrupt
        self.stop = True
        with contextlib.suppress(OSError):  # the terminal may be gone (SIGHUP)
            again = "Ctrl-C" if signum == signal.SIGINT else "the same signal"
            print(f"\nstopping: finished shots are kept ({again} again to abort)",
                  file=sys.stderr)


def run_process(args: argparse.Namespace) -> int:
    from core.batch import plan_shots, process_shots
    from core.store import Session
    from core.store.table import shot_warnings

    with Session.open(args.session) as session:
        if args.settings is not None:
            session.set_processing_settings(_read_settings(args.settings))
        todo, skipped = plan_shots(session, args.shots, args.force)
        if skipped:
            print(f"{len(skipped)} shot(s) already processed with these settings")
        flag = _StopFlag()
        previous = {signum: signal.signal(signum, flag.on_signal) for signum in STOP_SIGNALS}
        bar = _progress_bar(len(todo), args.quiet)
        try:
            report = process_shots(session, todo, workers=args.workers, scheduler=args.scheduler,
                                   force=True, on_result=lambda o: _show(bar, o),
                                   should_stop=flag)
        finally:
            bar.close()
            for signum, handler in previous.items():
                signal.signal(signum, handler)
        warned = shot_warnings(session.values())
    code = _process_summary(args.session, report, args.force, todo)
    if ids := [shot_id for shot_id in report.processed if shot_id in warned]:
        print(f"note: {len(ids)} shot(s) measured with warnings or checks to look at "
              f"({', '.join(ids[:6])}{', ...' if len(ids) > 6 else ''}): the table's warnings "
              "column, the window's readout and the sheet say what", file=sys.stderr)
    return 1 if _tell_problems(session) else code


def _tell_problems(session) -> bool:
    """Print what saving found damaged or lost, one line per shot part; True if anything."""
    for problem in session.problems:
        print(f"wakeline: {problem}", file=sys.stderr)
    return bool(session.problems)


def settings_source(text: str) -> Path | dict:
    """``--settings``: inline JSON (text starting with ``{``) read now, else a file's path.

    Raises
    ------
    argparse.ArgumentTypeError
        Inline text that is not a JSON object (bad usage, exit 2).
    """
    if not text.lstrip().startswith("{"):
        return Path(text)
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise argparse.ArgumentTypeError("expected a JSON object of settings")
    return data


def _read_settings(source: Path | dict) -> dict:
    """The settings of ``--settings``: given inline, or read from the JSON file named."""
    if isinstance(source, dict):
        return source
    path = source
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise WakelineError(f"{path}: settings file not found (give a JSON file, or the "
                            "JSON itself starting with '{')") from None
    except IsADirectoryError:
        raise WakelineError(f"{path}: is a folder, not a settings file") from None
    except UnicodeDecodeError:
        raise WakelineError(f"{path}: not UTF-8 text") from None
    except ValueError as exc:
        raise WakelineError(f"{path}: not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise WakelineError(f"{path}: expected a JSON object of settings")
    return data


def _progress_bar(total: int, quiet: bool):
    from tqdm import tqdm

    return tqdm(total=total, unit="shot", desc="processing", disable=quiet or total == 0,
                file=sys.stderr, dynamic_ncols=True)


def _show(bar, outcome) -> None:
    if not outcome.ok:
        bar.write(f"wakeline: {_with_shot(outcome.shot_id, outcome.message)}", file=sys.stderr)
    elif outcome.decision:
        bar.write(f"wakeline: shot {outcome.shot_id}: {outcome.decision}", file=sys.stderr)
    bar.update(1)


def _with_shot(shot_id: str, message: str) -> str:
    return message if message.startswith(f"shot {shot_id}:") else f"shot {shot_id}: {message}"


def _process_summary(path: Path, report, forced: bool = False, todo=()) -> int:
    line = f"{path}: processed {len(report.processed)} shot(s)"
    if report.failed:
        line += f", {len(report.failed)} failed"
    if report.skipped:
        line += f", {len(report.skipped)} already up to date"
    if decisions := decisions_text(len(report.reopened), len(report.changed)):
        line += f"{decisions} (named above)"
    if report.interrupted and forced:  # up to date before: a plain run would skip them
        done = {*report.processed, *report.failed}
        rest = [shot_id for shot_id in todo if shot_id not in done]
        line += (f"; stopped with {report.not_run} shot(s) not measured again"
                 + (f" (--force --shots {' '.join(rest)} measures them)" if 0 < len(rest) <= 12
                    else " (--force with --shots and their ids measures them)"))
    elif report.interrupted:
        line += f"; stopped with {report.not_run} shot(s) left for the next run"
    print(f"{line} ({report.elapsed_s:.1f} s)")
    return 1 if report.failed or report.interrupted else 0


def run_table(args: argparse.Namespace) -> int:
    from core.store import Session, write_table_csv
    from core.store.table import session_table_rows

    if args.ensemble and args.by is None:
        raise UsageError("argument --ensemble: goes with --by (one row per condition)")
    to_stdout = str(args.output) == STDOUT
    with Session.open(args.session, writable=False) as session:
        if not to_stdout:
            check_outputs([args.output], session.path, session_frame_files(session))
        if args.by is not None:
            return _condition_table(session, args, to_stdout)
        if to_stdout:
            _print_csv(*session_table_rows(session))
            return 0
        with writing(args.output):
            count = write_table_csv(session, args.output)
    print(f"{args.output}: {count} shot(s)")
    return 0


#: ``-o -``: the table goes to standard output.
STDOUT = "-"


def _print_csv(header: list[str], rows: list[list]) -> None:
    """A table as CSV on standard output, cells as the table files have them. A reader that
    stops early (``| head``) ends the output quietly, as other shell tools do."""
    from core.store.table import write_csv_rows

    try:
        write_csv_rows(sys.stdout, header, rows)
        sys.stdout.flush()
    except BrokenPipeError:
        # what is left unwritten goes nowhere, so that closing stdout at exit raises nothing
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())


def _condition_table(session, args: argparse.Namespace, to_stdout: bool = False) -> int:
    from app.cli.conditions import condition_ensembles, grouping_of
    from core.conditions import condition_table, group_conditions, write_condition_csv

    by = grouping_of(session, args.by or None)
    conditions = group_conditions(session.values(), by)
    ensembles = condition_ensembles(session, conditions) if args.ensemble else None
    if to_stdout:
        _print_csv(*condition_table(conditions, by, ensembles))
        return 0
    with writing(args.output):
        count = write_condition_csv(session, args.output, by, ensembles)
    print(f"{args.output}: {count} condition(s) by {', '.join(by) or 'nothing'}")
    return 0
