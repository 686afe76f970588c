"""Time the review window through a day of shots: start-up, open, filter, step, decide.

1. A small session of synthetic ball shots, processed with the batch code: the window opened
   offscreen steps through every shot as a user pressing Down would, timed from the change of
   the current shot until the canvas has painted (target < 100 ms).
2. A 200-shot session (stored results made up, frames of ``--list-frame`` px): the start-up of
   ``wakeline SESSION.h5`` in a process of its own until the window is shown (target ~2 s) and
   until the first shot is drawn, then in the window: open (< 1 s), sort, a filter of several
   conditions on measured values, a step (< 50 ms), a decision on 50 selected shots as one undo
   step (< 0.5 s) and its undo. Prints figures; asserts nothing.

    .venv/bin/python benchmarks/bench_step.py [--size 1024] [--shots 6] [--workers 2]
        [--list-shots 200] [--list-frame 512]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def make_session(folder: Path, size: int, shots: int, workers: int | None) -> Path:
    from core.batch import process_shots
    from core.images import write_frame
    from core.store import Session
    from core.synth_shot import ball_shot

    path = folder / "bench.h5"
    radius = size / 10
    with Session.create(path, name="bench") as session:
        for index in range(shots):
            frame_a, frame_b, truth = ball_shot(
                (size, size), radius_px=radius, shift_px=max(4.0, size / 128),
                upper_deg=4.0 + 3 * index, lower_deg=-2.0 + 2 * index, seed=index,
            )
            shot_id = f"b{index + 1:02d}"
            path_a, path_b = folder / f"{shot_id}_a.tif", folder / f"{shot_id}_b.tif"
            write_frame(path_a, frame_a)
            write_frame(path_b, frame_b)
            session.add_shot(shot_id, path_a, path_b, {
                "dt_s": truth.dt_s, "scale_mm_per_px": truth.scale_mm_per_px,
                "ball_diameter_mm": truth.ball_diameter_mm, "seam_deg": 10.0 * index,
            })
        start = time.perf_counter()
        report = process_shots(session, workers=workers)
        print(f"processed {len(report.processed)} shots ({len(report.failed)} failed) "
              f"in {time.perf_counter() - start:.1f} s")
    return path


def time_steps(path: Path, rounds: int) -> dict[str, list[float]]:
    import pyqtgraph as pg
    from PySide6.QtWidgets import QApplication

    from app.qt.window import MainWindow

    app = QApplication.instance() or QApplication([])
    pg.setConfigOptions(imageAxisOrder="row-major")
    window = MainWindow(workers=0)
    window.act_auto.setChecked(False)
    window.resize(1600, 1000)
    window.show()
    app.processEvents()
    window.open_session(path)
    app.processEvents()
    ids = window.shot_list.visible_ids()
    times: dict[str, list[float]] = {"first visit, canvas drawn": [],
                                     "first visit, whole window": [],
                                     "revisit, canvas drawn": [], "revisit, whole window": []}
    for round_index in range(rounds):
        key = "first visit" if round_index == 0 else "revisit"
        for _ in ids:
            start = time.perf_counter()
            window.shot_list.step(1) if window.model.current_id != ids[-1] else \
                window.model.set_current(ids[0])
            window.canvas.graphics.viewport().repaint()
            times[f"{key}, canvas drawn"].append((time.perf_counter() - start) * 1e3)
            app.processEvents()  # the list, readout and overview catch up
            times[f"{key}, whole window"].append((time.perf_counter() - start) * 1e3)
    times.update(breakdown(window, ids, app))
    window.close()
    return times


def breakdown(window, ids, app) -> dict[str, list[float]]:
    """Where a first visit spends its time: reading the result, the frames, drawing, painting."""
    parts: dict[str, list[float]] = {"  read result": [], "  read frames": [],
                                     "  build canvas": [], "  paint canvas": []}
    model = window.model
    for shot_id in ids:
        model._results.clear()
        model._frames.clear()
        start = time.perf_counter()
        model.result(shot_id)
        parts["  read result"].append((time.perf_counter() - start) * 1e3)
        start = time.perf_counter()
        model.frames(shot_id)
        parts["  read frames"].append((time.perf_counter() - start) * 1e3)
        start = time.perf_counter()
        model.set_current(shot_id)
        window._show_current(full=True)
        parts["  build canvas"].append((time.perf_counter() - start) * 1e3)
        start = time.perf_counter()
        window.canvas.graphics.viewport().repaint()
        parts["  paint canvas"].append((time.perf_counter() - start) * 1e3)
    return parts


def make_big_session(folder: Path, shots: int, frame_px: int = 512) -> Path:
    """A session of many shots sharing one frame pair, with small made-up stored results whose
    proposals, speeds and qualities vary (what the list sorts and filters on)."""
    import numpy as np

    from core.images import write_frame
    from core.results import BallFit, Flight, SeparationResult, SideProposal, VectorField
    from core.shot import ShotResult
    from core.store import Session

    rng = np.random.default_rng(0)
    path = folder / "many.h5"
    frame = rng.uniform(0, 4000, (frame_px, frame_px))
    write_frame(folder / "day_a.tif", frame)
    write_frame(folder / "day_b.tif", np.roll(frame, 2, axis=1))
    y, x = np.mgrid[8:frame_px:16, 8:frame_px:16].astype(float)
    zeros = np.zeros_like(x, dtype=bool)
    centre, radius = frame_px / 2, frame_px / 10
    with Session.create(path, name="a day of shots") as session:
        for index in range(shots):
            shot_id = f"m{index:04d}"
            session.add_shot(shot_id, folder / "day_a.tif", folder / "day_b.tif",
                             {"dt_s": 2e-5, "scale_mm_per_px": 0.1, "ball_diameter_mm": 71.6,
                              "seam_deg": float(5 * (index % 10))})
            field = VectorField(x, y, np.full_like(x, 2.0), np.zeros_like(x), ~zeros, zeros,
                                zeros, np.full_like(x, 3.0))
            upper, lower = rng.normal(10, 8), rng.normal(0, 8)
            result = ShotResult(
                field=field, settings=session.settings_for(shot_id),
                ball_a=BallFit((centre, centre), radius), ball_b=BallFit((centre - 2, centre),
                                                                         radius),
                flight=Flight(180.0, float(rng.uniform(20, 40)), (-2.0, 0.0)),
                separation=SeparationResult(
                    SideProposal(upper, 1.0, float(rng.uniform(0.3, 1.0))),
                    SideProposal(lower, 1.0, float(rng.uniform(0.3, 1.0)))),
                scale_mm_per_px=0.1, vorticity_1_s=rng.normal(0, 50, x.shape),
            )
            session.save_result(shot_id, result)
    return path


STARTUP_CHILD = """
import sys, time
start = float(sys.argv[1])
marks = {}
import app.cli.display as display
display.has_display = lambda: True  # offscreen here; a desktop has a display
import app.qt.window as window_module
from PySide6.QtCore import QTimer
shown = window_module.MainWindow.show
def show(self):
    shown(self)
    marks["window shown"] = time.time() - start
    def opened():
        if self.model.session is None or not self.model.current_id:
            QTimer.singleShot(5, opened)
            return
        self.canvas.graphics.viewport().repaint()
        marks["session open, first shot drawn"] = time.time() - start
        begin = time.time()
        self.close()
        marks["closing the window"] = time.time() - begin
    QTimer.singleShot(0, opened)
window_module.MainWindow.show = show
from app.cli import main
code = main([sys.argv[2]])
import json
print(json.dumps(marks), flush=True)
"""


def time_startup(path: Path, rounds: int = 3) -> None:
    """``wakeline SESSION.h5`` in a fresh process: until the window shows, until the first shot
    is drawn, the close, and the whole process (its exit included). Median of ``rounds``."""
    import subprocess

    root = Path(__file__).resolve().parent.parent
    env = {**os.environ, "PYTHONPATH": str(root),
           "WAKELINE_HOME": tempfile.mkdtemp(prefix="wakeline-bench-home-")}
    figures: dict[str, list[float]] = {}
    for _ in range(rounds):
        start = time.time()
        done = subprocess.run([sys.executable, "-c", STARTUP_CHILD, str(start), str(path)],
                              capture_output=True, text=True, env=env, check=False)
        figures.setdefault("whole process, exit included", []).append(time.time() - start)
        lines = done.stdout.strip().splitlines()
        for key, value in (json.loads(lines[-1]) if lines else {}).items():
            figures.setdefault(key, []).append(value)
    print(f"start-up of 'wakeline {path.name}' (median of {rounds}; target: shown within ~2 s):")
    for label, values in figures.items():
        print(f"  {label:34s} {statistics.median(values) * 1e3:8.0f} ms")


def time_list(path: Path) -> None:
    """Open a big session and time what a user does with the list: sort, filter, step, decide."""
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication

    from app.qt.window import MainWindow

    app = QApplication.instance() or QApplication([])
    window = MainWindow(workers=0)
    window.act_auto.setChecked(False)
    window.act_advance.setChecked(False)
    window.resize(1600, 1000)
    window.show()
    app.processEvents()
    figures = {}
    start = time.perf_counter()
    window.open_session(path)
    app.processEvents()
    figures["open session, list and first shot (< 1 s)"] = time.perf_counter() - start
    panel = window.shot_list
    upper = panel.table_model.column_of("upper_deg")
    ids = window.model.shot_ids()
    for label, action in (
        ("sort by upper angle", lambda: panel.view.sortByColumn(upper,
                                                                Qt.SortOrder.DescendingOrder)),
        ("filter speed_m_s>30 seam_deg:10..30 quality<0.8",
         lambda: panel.text_filter.setText("speed_m_s>30 seam_deg:10..30 quality<0.8")),
        ("clear the filter", lambda: panel.text_filter.setText("")),
        ("accept one shot (row update)", lambda: window.set_status("accepted")),
        ("decide 50 selected shots, one undo step (< 0.5 s)",
         lambda: (panel.select_ids(ids[50:100]), window.set_status("adjusted"))),
        ("undo that decision", window.undo_stack.undo),
    ):
        start = time.perf_counter()
        action()
        app.processEvents()
        figures[label] = time.perf_counter() - start
    drawn, whole = [], []
    panel.view.sortByColumn(panel.table_model.column_of("shot"), Qt.SortOrder.AscendingOrder)
    for _ in range(30):
        start = time.perf_counter()
        panel.step(1)
        window.canvas.graphics.viewport().repaint()
        drawn.append(time.perf_counter() - start)
        app.processEvents()  # the list, readout and overview catch up
        whole.append(time.perf_counter() - start)
        time.sleep(0.1)  # an analyst looks at the shot: the next one is read meanwhile
        app.processEvents()
    figures["step, canvas drawn (median of 30, < 50 ms)"] = statistics.median(drawn)
    figures["step, whole window (median of 30)"] = statistics.median(whole)
    figures["step, canvas drawn, slowest of 30"] = max(drawn)
    start = time.perf_counter()
    window.close()
    figures["quit: window closed, journal folded in"] = time.perf_counter() - start
    print(f"a day of {len(ids)} shots ({path.name}):")
    for label, seconds in figures.items():
        print(f"  {label:50s} {seconds * 1e3:8.1f} ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1024, help="frame side, px")
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--workers", type=int, default=None, help="processing workers")
    parser.add_argument("--rounds", type=int, default=3, help="passes through the session")
    parser.add_argument("--list-shots", type=int, default=200,
                        help="shots of the big session for the list timing (0: skip)")
    parser.add_argument("--list-frame", type=int, default=512,
                        help="frame side of the big session's shots, px")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="wakeline-bench-") as tmp:
        path = make_session(Path(tmp), args.size, args.shots, args.workers)
        times = time_steps(path, args.rounds)
    print(f"step to a processed shot, {args.size}x{args.size} frames (target < 100 ms):")
    for key, values in times.items():
        if values:
            print(f"  {key:26s} median {statistics.median(values):6.1f} ms   "
                  f"max {max(values):6.1f} ms   ({len(values)} steps)")
    if args.list_shots:
        with tempfile.TemporaryDirectory(prefix="wakeline-bench-") as tmp:
            start = time.perf_counter()
            path = make_big_session(Path(tmp), args.list_shots, args.list_frame)
            print(f"made a {args.list_shots}-shot session in {time.perf_counter() - start:.1f} s")
            time_startup(path)
            time_list(path)


if __name__ == "__main__":
    main()
