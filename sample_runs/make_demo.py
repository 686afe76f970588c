"""The demo session's recipe: its manifest, truth and review, its frames, and its report.

The scenario is invented (see README.md): a cricket ball launched at about 30 m/s through a
vertical light sheet, seam angle swept from 0 to 40 deg with three launches per angle, then a
white ball at 20 deg. The frames come from the physically built synthetic family
(``core.synth_physical``); they are too large to ship (about 3 MB a shot), so ``wakeline demo``
draws them at its first run. Every file is a pure function of the constants below and the seeds:
drawing them again gives the same bytes (given the same numpy, scipy, tifffile and zlib).

    .venv/bin/python sample_runs/make_demo.py                  # rewrite shots.csv, truth.csv,
                                                               # analyst_marks.csv here
    .venv/bin/python sample_runs/make_demo.py --frames DIR [--shots sw01 sw07]   # draw frames
    .venv/bin/python sample_runs/make_demo.py --report [DEMO_DIR]   # table of README.md
"""

from __future__ import annotations

import argparse
import csv
import functools
import io
import math
import re
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # run from a checkout without installing

FRAME_SHAPE = (1024, 1280)  # (H, W) px: a 1.3-megapixel double-frame PIV camera
BIT_DEPTH = 12
RADIUS_PX = 170.0
BALL_DIAMETER_MM = 71.6  # men's cricket ball: circumference 22.4-22.9 cm (Laws of Cricket, Law 4)
DT_S = 60e-6  # laser pulse separation: the ball moves about 8.5 px at 30 m/s
SPEED_NOMINAL_M_S = 30.0
SPIN_RPM = 1000.0  # backspin about the seam axis, as set on the launcher
AIR_TEMP_C = 19.5  # read off the lab thermometer at the start of the session
SEAM_ANGLES_DEG = (0.0, 10.0, 20.0, 30.0, 40.0)
REPEATS = 3
WHITE_BALL_SEAM_DEG = 20.0
WHITE_BALL_REPEATS = 2
SPARSE_SHOT = "sw08"  # the fog ran low
SHADOW_SHOT = "sw11"  # the return mirror was knocked out of line
SECOND_BALL_FROM = 13  # the first ball's seam split after sw12: a worn ball from then on
SEED = 20261130

# Separation model of the invented scenario (the seam is turned toward the lower side):
# - the side without the seam stays laminar and leaves the ball about 81 deg from the front
#   stagnation point, i.e. -9 deg from the plane normal to the flight (Achenbach 1972,
#   J. Fluid Mech. 54:565, memory: 80-82 deg for a subcritical smooth sphere);
# - on the seam side the seam trips the boundary layer, which then separates later (Mehta 1985,
#   Annu. Rev. Fluid Mech. 17:151, memory); the delay is largest near 25-30 deg of seam angle,
#   where the swing of a new ball peaks around 30 m/s (same source, memory), and small at 0 deg
#   (seam straight up the flight) and beyond 40 deg (seam too far round to trip in time).
# The synthetic family reaches these angles through the surface velocity: between the measured
# one (a laminar layer separates at -8.9 deg on it) and potential flow's (+13.6 deg), chosen by
# ``weight_for_separation``; where the seam side leaves later than a tripped layer can on the
# measured surface velocity (TRIPPED_FROM_DEG), its layer is tripped at the seam (Head's method
# carrying it turbulent to separation, ``tripped_weight_for_separation`` choosing the surface
# velocity), else it stays laminar.
LAMINAR_DEG = -8.9
SEAM_DELAY_MAX_DEG = 20.0
SEAM_DELAY_PEAK_DEG = 27.0
SEAM_DELAY_WIDTH_DEG = 14.0
#: A layer tripped on the measured surface velocity separates at +2.4 deg at the demo's Reynolds
#: number; seam-side angles from here on are drawn with a tripped layer.
TRIPPED_FROM_DEG = 3.0

MANIFEST_COLUMNS = ("shot", "dt_s", "scale_mm_per_px", "ball_diameter_mm", "ball_type",
                    "surface", "speed_nominal_m_s", "spin_rpm", "seam_deg", "air_temp_c", "ball",
                    "notes")
TRUTH_COLUMNS = ("shot", "upper_true_deg", "lower_true_deg", "wake_deflection_true_deg",
                 "speed_true_m_s", "flight_true_deg", "shift_px", "reynolds_number",
                 "surface", "glint", "shadow_side", "lower_layer")
README_START = "<!-- proposals against truth: written by make_demo.py --report -->"
README_END = "<!-- end of the table -->"


@dataclass(frozen=True)
class DemoShot:
    """One invented launch: its id, what the log says about it, and what it is drawn with."""

    shot_id: str
    seam_deg: float
    ball: str
    notes: str
    draw: dict  # keyword arguments of core.synth_physical.physical_shot

    @property
    def scale_mm_per_px(self) -> float:
        return BALL_DIAMETER_MM / (2.0 * RADIUS_PX)


def seam_side_deg(seam_deg: float) -> float:
    """Separation angle (deg from the plane, + rearward) on the seam side of the model."""
    delay = SEAM_DELAY_MAX_DEG * math.exp(-(((seam_deg - SEAM_DELAY_PEAK_DEG)
                                             / SEAM_DELAY_WIDTH_DEG) ** 2))
    return LAMINAR_DEG + delay


def _seam_side(lower_deg: float, seam_deg: float, speed_m_s: float) -> tuple[float, float | None]:
    """The seam side's surface-velocity weight and trip (None: laminar) for its angle."""
    from core.synth_physical.boundary_layer import (
        tripped_weight_for_separation,
        weight_for_separation,
    )
    from core.synth_physical.shot import air_kinematic_viscosity

    if lower_deg < TRIPPED_FROM_DEG:
        return weight_for_separation(lower_deg), None
    reynolds_radius = speed_m_s * 0.5e-3 * BALL_DIAMETER_MM / air_kinematic_viscosity(AIR_TEMP_C)
    return tripped_weight_for_separation(lower_deg, seam_deg, reynolds_radius), seam_deg


def _launch(rng, index: int, seam: float, ball: str, notes: str) -> DemoShot:
    """One launch: the model's separation plus launch-to-launch scatter, drawn reproducibly."""
    from core.synth_physical.boundary_layer import weight_for_separation

    shot_id = f"sw{index:02d}"
    upper = LAMINAR_DEG + abs(rng.normal(0.0, 0.8))
    lower = float(np.clip(seam_side_deg(seam) + rng.normal(0.0, 1.2), LAMINAR_DEG, 13.0))
    height, width = FRAME_SHAPE
    look = {"red 1": ("dark", bool(rng.random() < 0.5)), "red 2": ("dim", False),
            "white 1": ("bright", True)}[ball]
    speed = round(SPEED_NOMINAL_M_S + rng.normal(0.0, 0.5), 2)
    lower_share, trip = _seam_side(lower, seam, speed)
    draw = {
        "radius_px": RADIUS_PX,
        "ball_diameter_mm": BALL_DIAMETER_MM,
        "dt_s": DT_S,
        "air_temp_c": AIR_TEMP_C,
        "speed_m_s": speed,
        "flight_deg": round(180.0 + rng.normal(0.0, 0.8), 2),
        "center_px": (round(0.28 * width + rng.normal(0.0, 10.0), 1),
                      round(0.5 * (height - 1) + rng.normal(0.0, 18.0), 1)),
        "measured_share": (weight_for_separation(upper), lower_share),
        "trip_deg": (None, trip),
        "departure_deg": (round(rng.uniform(8.0, 14.0), 1), round(rng.uniform(8.0, 14.0), 1)),
        "turning_radii": (round(rng.uniform(0.8, 1.3), 2), round(rng.uniform(0.8, 1.3), 2)),
        "spreading_coefficient": round(rng.uniform(0.16, 0.20), 3),
        "closure_diameters": round(rng.uniform(1.3, 1.8), 2),
        "rollup_fraction": round(rng.uniform(0.3, 0.5), 2),
        "surface": look[0],
        "glint": look[1],
        "shadow": shot_id == SHADOW_SHOT,
        "light_from_deg": round(90.0 + rng.normal(0.0, 2.0), 1),  # the sheet comes from above
        "sheet_unevenness": 0.4,
        "bit_depth": BIT_DEPTH,
        "density_ppp": 0.012 if shot_id == SPARSE_SHOT else round(rng.uniform(0.045, 0.06), 3),
        "out_of_plane": round(rng.uniform(0.08, 0.15), 3),
        "spin_rpm": SPIN_RPM,
        "seed": SEED + index,
    }
    return DemoShot(shot_id, seam, ball, notes, draw)


@functools.cache
def demo_shots() -> tuple[DemoShot, ...]:
    """The launches of the demo session, in order."""
    rng = np.random.default_rng(SEED)
    shots = []
    for seam in SEAM_ANGLES_DEG:
        for repeat in range(REPEATS):
            index = len(shots) + 1
            ball = "red 1" if index < SECOND_BALL_FROM else "red 2"
            notes = f"launch {repeat + 1} of {REPEATS}"
            if f"sw{index:02d}" == SPARSE_SHOT:
                notes += "; fog ran low before this launch (topped up after)"
            if f"sw{index:02d}" == SHADOW_SHOT:
                notes += "; return mirror knocked out of line: no light below the ball"
            if index == SECOND_BALL_FROM:
                notes += "; red 1 split its seam after sw12: red 2 (worn, duller) from here"
            shots.append(_launch(rng, index, seam, ball, notes))
    for repeat in range(WHITE_BALL_REPEATS):
        index = len(shots) + 1
        notes = f"white ball for comparison, launch {repeat + 1} of {WHITE_BALL_REPEATS}"
        shots.append(_launch(rng, index, WHITE_BALL_SEAM_DEG, "white 1", notes))
    return tuple(shots)


def render(shot: DemoShot):
    """The frame pair of one launch (12-bit counts in ``(H, W)`` uint16 arrays) and its truth."""
    from core.synth_physical import physical_shot

    frame_a, frame_b, truth = physical_shot(FRAME_SHAPE, **shot.draw)
    return frame_a.astype(np.uint16), frame_b.astype(np.uint16), truth


def shot_truth(shot: DemoShot):
    """The truth of one launch without drawing its images (the same as :func:`render`'s)."""
    import inspect

    from core.synth_physical import physical_flow

    flow_args = inspect.signature(physical_flow).parameters  # the draw's flow, not its images
    _, truth = physical_flow(FRAME_SHAPE, **{k: v for k, v in shot.draw.items() if k in flow_args})
    return truth


def shadowed_side(shot: DemoShot) -> str:
    """The side whose separation lies in the ball's shadow (as ``physical_shot`` decides it)."""
    from core.geometry import flight_unit, side_normal

    lx, ly = flight_unit(shot.draw["light_from_deg"])  # toward the light; it travels the other way
    for side in ("upper", "lower"):
        nx, ny = side_normal(shot.draw["flight_deg"], side)
        if -(nx * lx + ny * ly) > 0.5:
            return side
    return ""


def tiff_bytes(frame: np.ndarray) -> bytes:
    """A lossless deflate-compressed single-page TIFF, with no time stamp or description."""
    import tifffile

    buf = io.BytesIO()
    tifffile.imwrite(buf, frame, compression="zlib", metadata=None)
    return buf.getvalue()


def _number(value: float) -> str:
    return f"{value:.6g}"


def manifest_text(shots: list[DemoShot]) -> str:
    # the surface is part of the condition (the white ball's shots are not pooled with the red
    # ones'); which ball of that surface, not
    rows = [[s.shot_id, _number(DT_S), _number(s.scale_mm_per_px), _number(BALL_DIAMETER_MM),
             "cricket", s.ball.split()[0], _number(SPEED_NOMINAL_M_S), _number(SPIN_RPM),
             _number(s.seam_deg), _number(AIR_TEMP_C), s.ball, s.notes] for s in shots]
    return _csv_text(MANIFEST_COLUMNS, rows)


def truth_text(shots: list[DemoShot]) -> str:
    rows = []
    for shot in shots:
        t = shot_truth(shot)
        shadow = shadowed_side(shot) if shot.draw["shadow"] else ""
        rows.append([shot.shot_id, f"{t.upper_deg:.2f}", f"{t.lower_deg:.2f}",
                     f"{t.wake_deflection_deg:.2f}", f"{t.speed_m_s:.2f}", f"{t.flight_deg:.2f}",
                     f"{math.hypot(*t.displacement_px):.4f}", f"{t.reynolds_number:.4g}",
                     shot.draw["surface"], "yes" if shot.draw["glint"] else "", shadow,
                     "laminar" if shot.draw["trip_deg"][1] is None else "tripped"])
    return _csv_text(TRUTH_COLUMNS, rows)


# The invented analyst's review, which ``wakeline demo`` replays after processing so the sheet and
# the overview show every review status. The analyst looks at each reviewed shot and sees where the
# flow leaves the ball (the drawn truth, to the analyst's half-degree); on replay a proposal within
# the tolerance on both sides is accepted, otherwise the marks are moved there (adjusted). Shots
# not listed are left to review.
REVIEWED = ("sw01", "sw02", "sw03", "sw04", "sw05", "sw06", "sw07", "sw09", "sw10", "sw12")
UNUSABLE = {
    SPARSE_SHOT: "too few particles behind the ball to follow the shear layers",
    SHADOW_SHOT: "lower side in the ball's laser shadow (return mirror out of line)",
}
NOTES = {
    "sw07": "shear layers clear on both sides; seam side leaves well behind the plane",
    "sw10": "wake leans upward as expected",
}
REVIEW_COLUMNS = ("shot", "upper_deg", "lower_deg", "unusable_reason", "note")


def _half_degree(value_deg: float) -> str:
    return _number(round(value_deg * 2.0) / 2.0)


def reviews_text(shots: list[DemoShot], truth_csv: str) -> str:
    truth = {row["shot"]: row for row in csv.DictReader(io.StringIO(truth_csv))}
    rows = []
    for shot in shots:
        if shot.shot_id in UNUSABLE:
            rows.append([shot.shot_id, "", "", UNUSABLE[shot.shot_id], ""])
        elif shot.shot_id in REVIEWED:
            t = truth[shot.shot_id]
            rows.append([shot.shot_id, _half_degree(float(t["upper_true_deg"])),
                         _half_degree(float(t["lower_true_deg"])), "",
                         NOTES.get(shot.shot_id, "")])
    return _csv_text(REVIEW_COLUMNS, rows)


def _csv_text(header, rows) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buf.getvalue()


def write_inputs(out_dir: Path) -> list[Path]:
    """Write the shipped files (``shots.csv``, ``truth.csv``, ``analyst_marks.csv``) into ``out_dir``."""
    shots = demo_shots()
    truth = truth_text(shots)
    written = []
    for name, content in (("shots.csv", manifest_text(shots)), ("truth.csv", truth),
                          ("analyst_marks.csv", reviews_text(shots, truth))):
        path = out_dir / name
        path.write_text(content, encoding="utf-8", newline="")
        written.append(path)
    return written


def frame_names(shot_id: str) -> tuple[str, str]:
    return f"{shot_id}_a.tif", f"{shot_id}_b.tif"


def write_pair(out_dir: Path, shot_id: str) -> list[Path]:
    """Draw one shot's frames into ``out_dir``; return their paths.

    Each file is written under a temporary name and renamed, so a stopped run never leaves a
    partial frame.
    """
    shot = next(s for s in demo_shots() if s.shot_id == shot_id)
    frame_a, frame_b, _ = render(shot)
    written = []
    for name, frame in zip(frame_names(shot_id), (frame_a, frame_b)):
        path = Path(out_dir) / name
        part = path.with_name(path.name + ".part")
        part.write_bytes(tiff_bytes(frame))
        part.replace(path)
        written.append(path)
    return written


def write_frames(out_dir: Path, shot_ids=None) -> list[Path]:
    """Draw the frames of all shots (or ``shot_ids``) into ``out_dir``, one after the other
    (``wakeline demo`` draws them on all cores); return their paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    return [path for shot in demo_shots() if shot_ids is None or shot.shot_id in shot_ids
            for path in write_pair(out_dir, shot.shot_id)]


# --- the report: proposals against truth, in README.md --------------------------------------------


def report_rows(session_path: Path, truth_csv: Path) -> list[dict]:
    """Per shot of the processed demo session: truth, proposal, stated uncertainty, failure."""
    from core.store import ProcessState, Session

    with open(truth_csv, encoding="utf-8", newline="") as fh:
        truth = {row["shot"]: row for row in csv.DictReader(fh)}
    rows = []
    with Session.open(session_path, writable=False) as session:
        for shot_id in session:
            record = session[shot_id]
            row = {"shot": shot_id, "seam_deg": record.metadata.get("seam_deg"),
                   "look": _look(truth.get(shot_id, {})),
                   "failure": record.failure if record.state == ProcessState.FAILED else ""}
            for side in ("upper", "lower"):
                row[f"{side}_true"] = float(truth[shot_id][f"{side}_true_deg"])
                row[f"{side}_proposed"] = record.proposed_deg(side)
                row[f"{side}_uncertainty"] = record.uncertainty_deg(side)
                row[f"{side}_reason"] = record.summary.side(side).reason if record.summary else ""
            row["wake_true"] = float(truth[shot_id]["wake_deflection_true_deg"])
            separation = record.summary.separation if record.summary else None  # as measured
            row["wake"] = separation and separation.wake_deflection_deg
            row["wake_uncertainty"] = separation and separation.wake_deflection_uncertainty_deg
            rows.append(row)
    return rows


def _look(truth_row: dict) -> str:
    look = truth_row.get("surface", "")
    if truth_row.get("glint"):
        look += ", glint"
    if truth_row.get("shadow_side"):
        look += f", {truth_row['shadow_side']} side shadowed"
    return look


def report_markdown(rows: list[dict], how: str) -> str:
    """The proposals-against-truth table and its tally, as Markdown."""
    lines = [README_START, "", how, "",
             ("| shot | seam | ball look | upper: truth | proposed | lower: truth | proposed "
              "| wake: truth | measured |"), "|---|---|---|---|---|---|---|---|---|"]
    sides = within = wakes = wakes_within = 0
    errors = []
    failed: dict[str, list[str]] = {}  # failure -> shots
    for row in rows:
        cells = [row["shot"], f"{float(row['seam_deg']):g}" if row["seam_deg"] is not None
                 else "", row["look"]]
        for side in ("upper", "lower"):
            cells.append(f"{row[f'{side}_true']:+.1f}")
            cells.append(_proposal_cell(row, side))
            if row[f"{side}_proposed"] is not None:
                sides += 1
                error = abs(row[f"{side}_proposed"] - row[f"{side}_true"])
                errors.append(error)
                within += error <= (row[f"{side}_uncertainty"] or 0.0)
        cells += [f"{row['wake_true']:+.1f}", _wake_cell(row)]
        if row["wake"] is not None and row["wake_uncertainty"] is not None:
            wakes += 1
            wakes_within += abs(row["wake"] - row["wake_true"]) <= row["wake_uncertainty"]
        if row["failure"]:
            failed.setdefault(row["failure"], []).append(row["shot"])
        lines.append("| " + " | ".join(cells) + " |")
    total = 2 * len(rows)
    lines += ["", f"Proposals on {sides} of {total} sides; {within} of them within their stated "
              "uncertainty of the truth" + (f"; median distance {np.median(errors):.1f} deg, "
                                            f"largest {max(errors):.1f} deg." if errors else "."),
              "", (f"Wake deflection (deg, + toward the upper side) measured on {wakes} shots, "
                   f"{wakes_within} of them within their stated uncertainty of the truth.")]
    if failed:
        count = sum(len(shots) for shots in failed.values())
        lines += ["", f"Not measured ({count} shots):", ""]
        lines += [f"- {', '.join(shots)}: {failure}" for failure, shots in failed.items()]
    lines += ["", README_END]
    return "\n".join(lines)


def _proposal_cell(row: dict, side: str) -> str:
    proposed = row[f"{side}_proposed"]
    if proposed is None:
        return "failed" if row["failure"] else f"none ({row[f'{side}_reason'] or 'no reason'})"
    mark = "" if abs(proposed - row[f"{side}_true"]) <= (row[f"{side}_uncertainty"] or 0) else " *"
    return f"{proposed:+.1f} ± {row[f'{side}_uncertainty'] or 0:.1f}{mark}"


def _wake_cell(row: dict) -> str:
    if row["wake"] is None:
        return "—"
    if row["wake_uncertainty"] is None:
        return f"{row['wake']:+.1f}"
    mark = "" if abs(row["wake"] - row["wake_true"]) <= row["wake_uncertainty"] else " *"
    return f"{row['wake']:+.1f} ± {row['wake_uncertainty']:.1f}{mark}"


def write_report(readme: Path, table: str) -> None:
    text = readme.read_text(encoding="utf-8")
    pattern = re.compile(re.escape(README_START) + ".*?" + re.escape(README_END), re.DOTALL)
    if not pattern.search(text):
        raise SystemExit(f"{readme}: no table markers ({README_START} ... {README_END})")
    readme.write_text(pattern.sub(lambda _: table, text), encoding="utf-8")


def _code_version() -> str:
    import subprocess

    try:
        commit = subprocess.run(["git", "-C", str(HERE), "log", "-1", "--format=%h %cs"],
                                capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(HERE.parent), "status", "--porcelain", "--",
                                "core", "app"], capture_output=True, text=True,
                               check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "an unknown version"
    return f"commit {commit}" + (" with local changes" if dirty else "")


def run_report(demo_dir: Path | None) -> int:
    """Process the demo (or read an already processed one) and rewrite README.md's table."""
    import tempfile

    from app.cli import main as wakeline
    from app.cli.demo import DEMO_SESSION

    with tempfile.TemporaryDirectory(prefix="wakeline-demo-report-") as tmp:
        folder = Path(demo_dir) if demo_dir is not None else Path(tmp)
        if demo_dir is None and wakeline(["demo", "--out", str(folder), "--no-window"]) != 0:
            return 1
        rows = report_rows(folder / DEMO_SESSION, HERE / "truth.csv")
    how = (f"Measured by `make_demo.py --report` with the code of {_code_version()}: each "
           "proposal (deg, + rearward) with its stated uncertainty; * marks one farther from "
           "the truth than that (judged, like the distances below, on the unrounded values). "
           "Another machine may give single values a few tenths of a degree apart: rounding in "
           "the compiled fit, which its search and refits amplify.")
    write_report(HERE / "README.md", report_markdown(rows, how))
    print(f"{HERE / 'README.md'}: table of {len(rows)} shots written")
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=Path, metavar="DIR", help="draw the frames into DIR")
    parser.add_argument("--shots", nargs="+", metavar="ID", help="only these shots' frames")
    parser.add_argument("--report", nargs="?", const="", default=None,
                        metavar="DEMO_DIR", help="process the demo (or read the one processed "
                        "in DEMO_DIR) and rewrite the table in README.md")
    args = parser.parse_args(argv)
    if args.report is not None:
        return run_report(Path(args.report) if args.report else None)
    if args.frames is not None:
        written = write_frames(args.frames, args.shots)
    else:
        written = write_inputs(HERE)
    total = sum(p.stat().st_size for p in written)
    print(f"wrote {len(written)} files, {total / 1e6:.1f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
