"""Time stepping the review window to a processed shot (load result and frames, draw the canvas).

Makes a small session of synthetic ball shots, processes it with the batch code, opens the
window offscreen and steps through every shot as a user pressing Down would, timing each step
from the change of the current shot until the canvas has painted. Prints figures; asserts nothing.

    .venv/bin/python benchmarks/bench_step.py [--size 1024] [--shots 6] [--workers 2]
"""

from __future__ import annotations

import argparse
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


def make_big_session(folder: Path, shots: int) -> Path:
    """A session of many shots with tiny frames and small stored results (list timing only)."""
    import numpy as np

    from core.images import write_frame
    from core.results import BallFit, Flight, SeparationResult, SideProposal, VectorField
    from core.shot import ShotResult
    from core.store import Session

    rng = np.random.default_rng(0)
    path = folder / "many.h5"
    frame = rng.uniform(0, 4000, (64, 64))
    write_frame(folder / "tiny_a.tif", frame)
    write_frame(folder / "tiny_b.tif", np.roll(frame, 2, axis=1))
    y, x = np.mgrid[8:64:16, 8:64:16].astype(float)
    zeros = np.zeros_like(x, dtype=bool)
    with Session.create(path, name="many") as session:
        for index in range(shots):
            shot_id = f"m{index:04d}"
            session.add_shot(shot_id, folder / "tiny_a.tif", folder / "tiny_b.tif",
                             {"dt_s": 2e-5, "scale_mm_per_px": 0.1, "ball_diameter_mm": 71.6,
                              "seam_deg": float(index % 37)})
            field = VectorField(x, y, np.full_like(x, 2.0), np.zeros_like(x), ~zeros, zeros,
                                zeros, np.full_like(x, 3.0))
            upper, lower = rng.normal(10, 8), rng.normal(0, 8)
            result = ShotResult(
                field=field, settings=session.settings_for(shot_id),
                ball_a=BallFit((32.0, 32.0), 10.0), ball_b=BallFit((30.0, 32.0), 10.0),
                flight=Flight(180.0, 20.0, (-2.0, 0.0)),
                separation=SeparationResult(SideProposal(upper, 1.0, 0.8),
                                            SideProposal(lower, 1.0, 0.8)),
            )
            session.save_result(shot_id, result)
    return path


def time_list(path: Path) -> None:
    """Open a big session and time the list operations a user does."""
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication

    from app.qt.window import MainWindow

    app = QApplication.instance() or QApplication([])
    window = MainWindow(workers=0)
    window.act_auto.setChecked(False)
    window.show()
    app.processEvents()
    figures = {}
    start = time.perf_counter()
    window.open_session(path)
    app.processEvents()
    figures["open session and fill the list"] = time.perf_counter() - start
    panel = window.shot_list
    for label, action in (
        ("sort by upper angle", lambda: panel.view.sortByColumn(3, Qt.SortOrder.DescendingOrder)),
        ("filter seam_deg:10..20", lambda: panel.text_filter.setText("seam_deg:10..20")),
        ("clear the filter", lambda: panel.text_filter.setText("")),
        ("accept one shot (row update)", lambda: window.set_status("accepted")),
    ):
        start = time.perf_counter()
        action()
        app.processEvents()
        figures[label] = time.perf_counter() - start
    steps = []
    for _ in range(30):
        start = time.perf_counter()
        panel.step(1)
        app.processEvents()
        steps.append(time.perf_counter() - start)
    figures["step (median of 30)"] = statistics.median(steps)
    window.close()
    print(f"shot list of {path.name}:")
    for label, seconds in figures.items():
        print(f"  {label:32s} {seconds * 1e3:8.1f} ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1024, help="frame side, px")
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--workers", type=int, default=None, help="processing workers")
    parser.add_argument("--rounds", type=int, default=3, help="passes through the session")
    parser.add_argument("--list-shots", type=int, default=500,
                        help="shots of the big session for the list timing (0: skip)")
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
            path = make_big_session(Path(tmp), args.list_shots)
            print(f"made a {args.list_shots}-shot session in {time.perf_counter() - start:.1f} s")
            time_list(path)


if __name__ == "__main__":
    main()
