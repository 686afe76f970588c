"""`wakeline sheet`: the shot sheet PDF of a session."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from app.cli.options import UsageError, check_outputs
from core import WakelineError
from core.store.companions import session_frame_files
from core.store.files import writing


def add_commands(subparsers) -> None:
    _add_sheet(subparsers)


def _add_sheet(subparsers) -> None:
    p = subparsers.add_parser(
        "sheet",
        help="write the shot sheet of a session as PDF",
        description="Write a vector PDF handing over a session: a cover page (counts by review "
        "status, the overview plot of separation angles), "
        "a page of the conditions (separation against the condition with error bars, their "
        "statistics, with --ensemble their ensemble proposals; the agreement with an imported "
        "second review) and a panel per shot (vorticity and vectors, ball, flight, separation "
        "marks, numbers, "
        "metadata, review). Needs no display.",
    )
    p.add_argument("session", type=Path, help="session file (.h5)")
    p.add_argument("-o", "--output", type=_pdf_file, required=True, metavar="OUT.pdf",
                   help="the PDF file to write")
    p.add_argument("--shots", nargs="+", metavar="ID", help="only these shots")
    p.add_argument("--per-page", type=int, default=2, choices=(1, 2, 3, 4), metavar="N",
                   help="shot panels per page: 1, 2 (default), 3 or 4")
    p.add_argument("--status", type=_statuses, metavar="LIST",
                   help="only shots with these review statuses, comma-separated, e.g. "
                   "accepted,adjusted (statuses: to review, accepted, adjusted, unusable; back to "
                   "review, the decisions a new measurement sent back, a part of to review)")
    p.add_argument("--column", metavar="NAME",
                   help="numeric metadata column for the cover's overview plot "
                   "(default: seam_deg when present)")
    p.add_argument("--vorticity-limit", type=_vorticity_limit, metavar="W|session",
                   help="the same vorticity colour range on every panel, so they compare: "
                   "+-W 1/s, or 'session' for one range from the shots on the sheet "
                   "(default: each panel its own)")
    p.add_argument("--ensemble", action="store_true",
                   help="add each condition's ensemble proposal to the conditions page "
                   "(slower: correlates every condition's shots as one)")
    p.set_defaults(func=run_sheet)


def _vorticity_limit(text: str):
    if text == "session":
        return text
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not 0 < value < float("inf"):
        raise argparse.ArgumentTypeError(f"a positive number or 'session', not {text!r}")
    return value


def _pdf_file(text: str) -> Path:
    if text == "-":
        raise argparse.ArgumentTypeError("the shot sheet is a PDF file: give its file name "
                                         "('-', standard output, is for 'wakeline table')")
    return Path(text)


def _statuses(text: str):
    from app.sheet import parse_statuses

    try:
        return parse_statuses(text)
    except WakelineError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("--status: ")) from None


def run_sheet(args: argparse.Namespace) -> int:
    from app.sheet import make_sheet
    from app.sheet.content import sheet_name_problem
    from app.sheet.document import ColumnError
    from core.store import Session

    with Session.open(args.session, writable=False) as session:
        check_outputs([args.output], session.path, session_frame_files(session))
        if problem := sheet_name_problem(args.output):
            raise UsageError(f"argument -o/--output: {problem}")
        ensembles = None
        if args.ensemble:
            from app.cli.conditions import condition_ensembles
            from app.sheet.document import sheet_conditions

            records = list(session.values())
            ensembles = condition_ensembles(session, sheet_conditions(session, records)[1])
        with writing(args.output):
            try:
                report = make_sheet(session, args.output, shot_ids=args.shots,
                                    per_page=args.per_page, statuses=args.status,
                                    column=args.column, vorticity_limit_1_s=args.vorticity_limit,
                                    ensembles=ensembles)
            except ColumnError as exc:  # a column the session lacks: bad usage
                raise UsageError(f"argument {exc}") from None
    print(f"{report.path}: {report.pages} page(s), {len(report.shot_ids)} shot(s)")
    if report.damaged:
        print(f"wakeline: {damaged_note(report.damaged, args.session)}", file=sys.stderr)
    return 0


def damaged_note(shot_ids: list[str], session) -> str:
    """One line on shots whose stored result could not be read (their panels say so)."""
    import shlex

    names = " ".join(shot_ids)
    command = shlex.join(["wakeline", "process", str(session), "--force", "--shots", *shot_ids])
    return (f"stored result damaged, its panel says so: {names}; measure again with "
            f"{command}")
