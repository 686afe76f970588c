"""`wakeline demo`: the bundled demo session, drawn, processed and reviewed, in the window or on
paper."""

from __future__ import annotations

import argparse
import csv
import importlib.util
import shutil
import sys
from pathlib import Path

from app.cli import display
from app.cli.options import known_ball_types, whole_count
from core import WakelineError
from core.store.files import failure_cause

SAMPLE_RUNS = Path(__file__).resolve().parents[2] / "sample_runs"
DEMO_SESSION = "demo_session.h5"
DEMO_SHEET = "demo_sheet.pdf"
DEMO_TABLE = "demo_table.csv"
DEMO_REVIEWER = "demo analyst (invented)"
DEMO_NAME = "Seam-angle sweep at 30 m/s (invented demo)"
#: The invented analyst's marks and unusable shots, replayed after processing (not a table for
#: 'wakeline add-review': the demo's review is decided against the proposals as measured).
DEMO_MARKS = "analyst_marks.csv"
DEMO_INPUTS = ("shots.csv", "truth.csv", DEMO_MARKS, "README.md")
RECIPE = "make_demo.py"  # draws the frames (too large to ship)
DRAW_PEAK_BYTES = 0.3e9  # memory to draw one shot (235 MB peak measured for a 1280 x 1024 pair)


def add_commands(subparsers) -> None:
    _add_demo(subparsers)


def _add_demo(subparsers) -> None:
    p = subparsers.add_parser(
        "demo",
        help="draw and process the bundled demo session and open it",
        description="Draw the bundled demo shots (an invented seam-angle sweep of a cricket "
        "ball, see sample_runs/README.md) into a folder of yours (the first time only), import "
        "and process them, replay the invented analyst's review decisions, then open the review "
        "window. With no display (or --no-window) write the shot sheet PDF and the CSV table "
        "next to the session instead.",
    )
    p.add_argument("--out", type=Path, metavar="DIR",
                   help="where the demo session goes (default: the folder demo in "
                   "$WAKELINE_HOME when set, else in $XDG_DATA_HOME/wakeline, else in "
                   "~/.local/share/wakeline)")
    p.add_argument("--no-window", action="store_true",
                   help="do not open the window; write the shot sheet and the table")
    p.add_argument("--fresh", action="store_true",
                   help="start again from the bundled shots, discarding the demo session's edits")
    p.add_argument("--workers", type=whole_count, metavar="N",
                   help="worker processes for drawing and processing (default: one per core, "
                   "as many as free memory holds; 0 = in this process)")
    p.set_defaults(func=run_demo)


def demo_dir(out: Path | None) -> Path:
    """The folder of the demo session (created)."""
    from core.paths import user_data_dir

    folder = Path(out) if out is not None else user_data_dir() / "demo"
    if folder.resolve() == SAMPLE_RUNS.resolve():
        raise WakelineError(f"{folder}: the bundled demo folder is kept as shipped; choose --out")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise WakelineError(f"{folder}: cannot create the demo folder "
                            f"({failure_cause(exc)})") from None
    return folder


def run_demo(args: argparse.Namespace) -> int:
    folder = demo_dir(args.out)
    session_path = prepare_demo(folder, fresh=args.fresh, workers=args.workers)
    process_demo(session_path, workers=args.workers)
    if args.no_window:
        return write_demo_outputs(session_path)
    if not display.has_display():
        print("no display found: writing the shot sheet and the table instead of opening "
              "the window")
        return write_demo_outputs(session_path)
    missing = display.missing_window_libraries()
    if missing:
        print(f"wakeline: {display.missing_libraries_message(missing)}; writing the shot sheet "
              "and the table instead of opening the window", file=sys.stderr)
        return write_demo_outputs(session_path)
    from app.qt.platform_libs import unreachable_display

    unreachable = unreachable_display()
    if unreachable:
        print(f"wakeline: {unreachable}; writing the shot sheet and the table instead of "
              "opening the window", file=sys.stderr)
        return write_demo_outputs(session_path)
    from app.qt.window import run_window

    return run_window(session_path)


def load_recipe():
    """The demo's recipe, ``sample_runs/make_demo.py``, as a module."""
    name = "wakeline_demo_recipe"
    if name not in sys.modules:
        path = SAMPLE_RUNS / RECIPE
        if not path.is_file():
            raise WakelineError(f"{path}: the demo's recipe is missing")
        spec = importlib.util.spec_from_file_location(name, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module  # dataclasses and worker processes look it up by name
        spec.loader.exec_module(module)
    return sys.modules[name]


def prepare_demo(folder: Path, fresh: bool = False, workers: int | None = None) -> Path:
    """Draw the demo's frames into ``folder/frames`` and import them (unless already done).

    Returns the session path. With ``fresh`` an earlier demo session in ``folder`` is removed
    first (only the files this command makes).
    """
    from core.store import Session, import_folder

    if not (SAMPLE_RUNS / "shots.csv").is_file():
        raise WakelineError(f"{SAMPLE_RUNS}: the bundled demo shots are missing (shots.csv)")
    session_path = folder / DEMO_SESSION
    if fresh:
        _remove_demo_session(session_path)
    if session_path.exists():
        print(f"{session_path}: using the existing demo session (--fresh starts again)")
        _tell_if_outdated(session_path)
        return session_path
    frames = folder / "frames"
    frames.mkdir(parents=True, exist_ok=True)
    for name in DEMO_INPUTS:
        if (SAMPLE_RUNS / name).is_file():
            shutil.copyfile(SAMPLE_RUNS / name, frames / name)
    draw_frames(frames, workers)
    Session.create(session_path, name=DEMO_NAME).close()
    report = import_folder(frames, session_path, ball_types=known_ball_types())
    if report.problems:
        raise WakelineError(f"{frames}: demo import failed: {report.problems[0]}")
    print(f"{session_path}: imported {len(report.imported)} demo shot(s)")
    return session_path


def draw_frames(frames: Path, workers: int | None = None) -> None:
    """Draw the frames of the shots in ``frames/shots.csv`` (the same bytes every time), on
    ``workers`` processes (None: one per core; 0: in this process)."""
    import os
    from concurrent.futures import ProcessPoolExecutor

    from tqdm import tqdm

    with open(frames / "shots.csv", encoding="utf-8", newline="") as fh:
        shot_ids = [row["shot"] for row in csv.DictReader(fh)]
    recipe = load_recipe()
    if workers is None:  # one per core, as many as free memory holds
        from core.batch import available_memory_bytes

        free = available_memory_bytes()
        room = len(shot_ids) if free is None else int(free // DRAW_PEAK_BYTES)
        workers = max(1, min(len(shot_ids), os.cpu_count() or 1, room))
    with tqdm(total=len(shot_ids), unit="shot", desc="drawing the demo frames", file=sys.stderr,
              dynamic_ncols=True) as bar:
        if workers <= 1:
            for shot_id in shot_ids:
                recipe.write_pair(frames, shot_id)
                bar.update(1)
            return
        # not fork (a forked child may inherit a lock held by another thread, tqdm's monitor):
        # the batch's own workers' start, whose server the processing then uses too
        from core.batch import pool_context

        context = pool_context()
        with ProcessPoolExecutor(workers, mp_context=context, initializer=_end_with,
                                 initargs=(os.getpid(),)) as pool:
            for _ in pool.map(_write_pair, [frames] * len(shot_ids), shot_ids):
                bar.update(1)


def _end_with(parent_pid: int) -> None:
    """In a worker process: end as soon as the demo command is gone, however it ended (a
    killed parent leaves a pool's workers waiting for work that never comes)."""
    import os
    import threading
    import time

    if os.name != "posix":  # (signal 0 is a test on POSIX only)
        return

    def watch() -> None:
        while True:
            time.sleep(0.5)
            try:
                os.kill(parent_pid, 0)
            except ProcessLookupError:
                os._exit(1)

    threading.Thread(target=watch, daemon=True).start()


def _write_pair(frames: Path, shot_id: str) -> None:
    """In a worker process: draw one shot's frames."""
    load_recipe().write_pair(frames, shot_id)


def _tell_if_outdated(session_path: Path) -> None:
    """Say so when the session holds another set of shots than the bundled demo (an older one)."""
    from core.store import Session

    with open(SAMPLE_RUNS / "shots.csv", encoding="utf-8", newline="") as fh:
        bundled = {row["shot"] for row in csv.DictReader(fh)}
    with Session.open(session_path, writable=False) as session:
        held = set(session)
    if held != bundled:
        print(f"{session_path}: this demo session is not the bundled demo's (an older one?); "
              "--fresh replaces it")


def _remove_demo_session(session_path: Path) -> None:
    """The demo session and its outputs; refused (SessionLocked) while a window has it open,
    done for a damaged one (starting again is what --fresh is for)."""
    from core.store import Session

    Session.delete(session_path)
    for name in (DEMO_SHEET, DEMO_TABLE):
        (session_path.parent / name).unlink(missing_ok=True)


def process_demo(session_path: Path, workers: int | None = None) -> None:
    """Process the shots not yet processed, then replay the invented reviews on untouched shots."""
    from app.cli.session import _progress_bar, _show
    from core.batch import plan_shots, process_shots
    from core.store import Session

    with Session.open(session_path) as session:
        todo, _ = plan_shots(session)
        done = "every shot already processed"
        if todo:  # (given no shot, the batch would still start its workers, and fail)
            bar = _progress_bar(len(todo), quiet=False)
            try:
                report = process_shots(session, todo, workers=workers,
                                       on_result=lambda outcome: _show(bar, outcome))
            finally:
                bar.close()
            if report.interrupted:
                raise WakelineError(f"{session_path}: processing stopped; run the demo again")
            done = f"processed {len(report.processed)} shot(s)" + (
                f", {len(report.failed)} failed (see above)" if report.failed else "")
        applied = replay_reviews(session, marks_file(session_path.parent / "frames"))
    print(f"{session_path}: {done}"
          + (f"; replayed {applied} review decision(s)" if applied else ""))


def marks_file(frames: Path) -> Path:
    """The invented analyst's marks beside the demo frames; in a demo folder drawn before the
    file had its present name, its older name."""
    marks = frames / DEMO_MARKS
    return marks if marks.is_file() or not (frames / "reviews.csv").is_file() else (
        frames / "reviews.csv")


def replay_reviews(session, marks_csv: Path) -> int:
    """Replay the invented analyst's review on shots nobody has touched yet.

    Each row gives the analyst's marks (deg) or a reason the shot is unusable (applied whether
    or not the shot could be processed; marks only to processed shots). A proposal within
    ``ACCEPT_TOLERANCE_DEG`` of the marks on both sides is accepted; otherwise the sides that are
    off are moved to the marks (adjusted). Returns the number of shots reviewed.
    """
    from core.store import ProcessState, ReviewStatus

    if not marks_csv.is_file():
        return 0
    applied = 0
    with open(marks_csv, encoding="utf-8", newline="") as fh:
        for row in csv.DictReader(fh):
            shot_id = row["shot"]
            if shot_id not in session or session.history(shot_id):
                continue
            record = session[shot_id]
            note = row.get("note") or None
            if row.get("unusable_reason"):  # the analyst's judgement of the pictures
                session.set_pick(shot_id, status=ReviewStatus.UNUSABLE,
                                 reason=row["unusable_reason"], note=note, who=DEMO_REVIEWER)
            elif record.state != ProcessState.PROCESSED:
                continue
            else:
                moved = _moved_sides(record, row)
                status = ReviewStatus.ADJUSTED if moved else ReviewStatus.ACCEPTED
                session.set_pick(shot_id, status=status, note=note, who=DEMO_REVIEWER, **moved)
            applied += 1
    return applied


ACCEPT_TOLERANCE_DEG = 2.0


def _moved_sides(record, row: dict) -> dict[str, float]:
    """``{"upper_deg": mark, ...}`` for each side whose proposal is off the analyst's mark."""
    moved = {}
    for side in ("upper", "lower"):
        if not row.get(f"{side}_deg"):
            continue
        mark = float(row[f"{side}_deg"])
        proposed = record.proposed_deg(side)
        if proposed is None or abs(proposed - mark) > ACCEPT_TOLERANCE_DEG:
            moved[f"{side}_deg"] = mark
    return moved


def write_demo_outputs(session_path: Path) -> int:
    """Write the demo's shot sheet and table next to the session and print their paths."""
    from app.sheet import make_sheet
    from core.store import Session, write_table_csv

    sheet_path = session_path.parent / DEMO_SHEET
    table_path = session_path.parent / DEMO_TABLE
    with Session.open(session_path, writable=False) as session:
        report = make_sheet(session, sheet_path)
        write_table_csv(session, table_path)
    print(f"shot sheet: {sheet_path} ({report.pages} pages)")
    print(f"table:      {table_path}")
    return 0
