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
    from core.session import Session
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

    from app.window import MainWindow

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
    times: dict[str, list[float]] = {"first visit": [], "revisit": []}
    for round_index in range(rounds):
        key = "first visit" if round_index == 0 else "revisit"
        for shot_id in ids[1:] + ids[:1]:
            start = time.perf_counter()
            window.shot_list.step(1) if shot_id != ids[0] else window.model.set_current(shot_id)
            window.canvas.graphics.viewport().repaint()
            app.processEvents()
            times[key].append((time.perf_counter() - start) * 1e3)
    window.close()
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1024, help="frame side, px")
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--workers", type=int, default=None, help="processing workers")
    parser.add_argument("--rounds", type=int, default=3, help="passes through the session")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="wakeline-bench-") as tmp:
        path = make_session(Path(tmp), args.size, args.shots, args.workers)
        times = time_steps(path, args.rounds)
    print(f"step to a processed shot, {args.size}x{args.size} frames (target < 100 ms):")
    for key, values in times.items():
        if values:
            print(f"  {key:12s} median {statistics.median(values):6.1f} ms   "
                  f"max {max(values):6.1f} ms   ({len(values)} steps)")


if __name__ == "__main__":
    main()
