"""Regenerate the demo session inputs in this folder: frames, shots.csv, truth.csv, reviews.csv.

The scenario is invented (see README.md): a cricket ball launched at about 30 m/s through a
vertical light sheet, seam angle swept from 0 to 50 deg, two launches per angle. Every file is a
pure function of the constants below and the seeds, so running this script again rewrites the
same bytes (given the same numpy, tifffile and zlib):

    .venv/bin/python sample_runs/make_demo.py            # into sample_runs/
    .venv/bin/python sample_runs/make_demo.py OUT_DIR    # somewhere else
    .venv/bin/python sample_runs/make_demo.py OUT_DIR --shots sw01 sw07
"""

from __future__ import annotations

import argparse
import csv
import io
import math
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # run from a checkout without installing

from core.synth_shot import ball_shot

FRAME_SHAPE = (480, 640)  # (H, W) px
RADIUS_PX = 56.0
BALL_DIAMETER_MM = 71.6  # men's cricket ball: circumference 22.4-22.9 cm (Laws of Cricket, Law 4)
DT_S = 170e-6  # fixed laser pulse separation: ~8 px ball shift at 30 m/s on this scale
SPEED_NOMINAL_M_S = 30.0
SPIN_RPM = 600.0  # backspin about the seam axis, as set on the launcher
SEAM_ANGLES_DEG = (0.0, 10.0, 20.0, 30.0, 40.0, 50.0)
REPEATS = 2
SPARSE_SHOT = "sw12"  # the fog ran low on the last launch
SEED = 20261130

# Separation model of the invented scenario (the seam is turned toward the lower side):
# - the side without the seam stays laminar and leaves the ball about 81 deg from the front
#   stagnation point, i.e. -9 deg from the plane normal to the flight (Achenbach 1972,
#   J. Fluid Mech. 54:565, memory: 80-82 deg for a subcritical smooth sphere);
# - on the seam side the seam trips the boundary layer, which then separates later (Mehta 1985,
#   Annu. Rev. Fluid Mech. 17:151, memory); the delay is largest near 20-30 deg of seam angle,
#   where the swing side force of a new ball peaks around 30 m/s (same source, memory), and small
#   at 0 deg (seam straight up the flight) and 50 deg (seam too far round to trip in time);
# - the wake leans toward the side that separates first (the upper side here).
LAMINAR_DEG = -9.0
SEAM_DELAY_MAX_DEG = 24.0
SEAM_DELAY_PEAK_DEG = 25.0
SEAM_DELAY_WIDTH_DEG = 17.0
WAKE_LEAN = 0.3  # wake deflection per deg of separation asymmetry

MANIFEST_COLUMNS = ("shot", "dt_s", "scale_mm_per_px", "ball_diameter_mm", "ball_type",
                    "speed_nominal_m_s", "spin_rpm", "seam_deg", "notes")
TRUTH_COLUMNS = ("shot", "upper_true_deg", "lower_true_deg", "wake_deflection_true_deg",
                 "speed_true_m_s", "shift_px")


@dataclass(frozen=True)
class DemoShot:
    """One invented launch: its id, settings and the truth it is drawn with."""

    shot_id: str
    seam_deg: float
    speed_m_s: float
    upper_deg: float
    lower_deg: float
    wake_deflection_deg: float
    density_ppp: float
    seed: int
    notes: str

    @property
    def scale_mm_per_px(self) -> float:
        return BALL_DIAMETER_MM / (2.0 * RADIUS_PX)

    @property
    def shift_px(self) -> float:
        return self.speed_m_s * DT_S * 1e3 / self.scale_mm_per_px


def seam_side_deg(seam_deg: float) -> float:
    """Separation angle (deg from the plane, + rearward) on the seam side of the model."""
    delay = SEAM_DELAY_MAX_DEG * math.exp(-(((seam_deg - SEAM_DELAY_PEAK_DEG)
                                             / SEAM_DELAY_WIDTH_DEG) ** 2))
    return LAMINAR_DEG + delay


def demo_shots() -> list[DemoShot]:
    """The launches of the demo session, in order."""
    rng = np.random.default_rng(SEED)
    shots = []
    for repeat in range(REPEATS):
        for seam in SEAM_ANGLES_DEG:
            index = len(shots) + 1
            shot_id = f"sw{index:02d}"
            upper = LAMINAR_DEG + rng.normal(0.0, 1.2)
            lower = seam_side_deg(seam) + rng.normal(0.0, 1.5)
            speed = SPEED_NOMINAL_M_S + rng.normal(0.0, 0.6)
            lean = WAKE_LEAN * (lower - upper) + rng.normal(0.0, 0.8)
            sparse = shot_id == SPARSE_SHOT
            notes = "new ball, seam toward the lower side" + ("; second launch" if repeat else "")
            if sparse:
                notes = "fog ran low before this launch"
            shots.append(DemoShot(
                shot_id, seam, round(speed, 2), round(upper, 1), round(lower, 1), round(lean, 1),
                0.02 if sparse else 0.06, SEED + index, notes,
            ))
    return shots


def render(shot: DemoShot) -> tuple[np.ndarray, np.ndarray]:
    """The frame pair of one launch as 12-bit counts in ``(H, W)`` uint16 arrays."""
    frame_a, frame_b, _ = ball_shot(
        FRAME_SHAPE, radius_px=RADIUS_PX, flight_deg=180.0, shift_px=shot.shift_px,
        upper_deg=shot.upper_deg, lower_deg=shot.lower_deg,
        wake_deflection_deg=shot.wake_deflection_deg, speed_m_s=shot.speed_m_s,
        ball_diameter_mm=BALL_DIAMETER_MM, density_ppp=shot.density_ppp, seed=shot.seed,
        reverse_fraction=0.0, spread_rate=0.0,
    )
    return _counts(frame_a), _counts(frame_b)


def _counts(frame: np.ndarray) -> np.ndarray:
    return np.clip(np.rint(frame), 0, 4095).astype(np.uint16)


def tiff_bytes(frame: np.ndarray) -> bytes:
    """A lossless deflate-compressed single-page TIFF, with no time stamp or description."""
    import tifffile

    buf = io.BytesIO()
    tifffile.imwrite(buf, frame, compression="zlib", metadata=None)
    return buf.getvalue()


def _number(value: float) -> str:
    return f"{value:.6g}"


def manifest_text(shots: list[DemoShot]) -> str:
    rows = [[s.shot_id, _number(DT_S), _number(s.scale_mm_per_px), _number(BALL_DIAMETER_MM),
             "cricket", _number(SPEED_NOMINAL_M_S), _number(SPIN_RPM), _number(s.seam_deg),
             s.notes] for s in shots]
    return _csv_text(MANIFEST_COLUMNS, rows)


def truth_text(shots: list[DemoShot]) -> str:
    rows = [[s.shot_id, _number(s.upper_deg), _number(s.lower_deg),
             _number(s.wake_deflection_deg), _number(s.speed_m_s), f"{s.shift_px:.4f}"]
            for s in shots]
    return _csv_text(TRUTH_COLUMNS, rows)


# The invented analyst's review, which ``wakeline demo`` replays after processing so the sheet and
# the overview show every review status. The analyst looks at each reviewed shot and sees where the
# flow leaves the ball (the drawn truth, to the analyst's half-degree); on replay a proposal within
# the tolerance on both sides is accepted, otherwise the marks are moved there (adjusted). Shots
# not listed are left to review.
REVIEWED = ("sw01", "sw02", "sw03", "sw04", "sw05", "sw07", "sw08", "sw10")
UNUSABLE = {SPARSE_SHOT: "too few particles behind the ball to follow the shear layers"}
NOTES = {
    "sw03": "shear layers clear on both sides; seam side leaves well behind the plane",
    "sw05": "wake leans upward as expected",
}
REVIEW_COLUMNS = ("shot", "upper_deg", "lower_deg", "unusable_reason", "note")


def _half_degree(value_deg: float) -> str:
    return _number(round(value_deg * 2.0) / 2.0)


def reviews_text(shots: list[DemoShot]) -> str:
    rows = []
    for shot in shots:
        if shot.shot_id in UNUSABLE:
            rows.append([shot.shot_id, "", "", UNUSABLE[shot.shot_id], ""])
        elif shot.shot_id in REVIEWED:
            rows.append([shot.shot_id, _half_degree(shot.upper_deg), _half_degree(shot.lower_deg),
                         "", NOTES.get(shot.shot_id, "")])
    return _csv_text(REVIEW_COLUMNS, rows)


def _csv_text(header, rows) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buf.getvalue()


def write_demo(out_dir: Path, shot_ids: list[str] | None = None) -> list[Path]:
    """Write the demo inputs (all shots, or only ``shot_ids``) into ``out_dir``; return the paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    shots = demo_shots()
    chosen = [s for s in shots if shot_ids is None or s.shot_id in shot_ids]
    written = []
    for name, content in (("shots.csv", manifest_text(chosen)), ("truth.csv", truth_text(chosen)),
                          ("reviews.csv", reviews_text(chosen))):
        path = out_dir / name
        path.write_text(content, encoding="utf-8", newline="")
        written.append(path)
    for shot in chosen:
        for suffix, frame in zip(("a", "b"), render(shot)):
            path = out_dir / f"{shot.shot_id}_{suffix}.tif"
            path.write_bytes(tiff_bytes(frame))
            written.append(path)
    return written


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out_dir", nargs="?", type=Path, default=HERE)
    parser.add_argument("--shots", nargs="+", metavar="ID", help="only these shots")
    args = parser.parse_args(argv)
    written = write_demo(args.out_dir, args.shots)
    total = sum(p.stat().st_size for p in written)
    print(f"{args.out_dir}: wrote {len(written)} files, {total / 1e6:.1f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
