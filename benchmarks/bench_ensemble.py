"""The ensemble's gain over single shots on synthetic repeat launches (``tests/data/
repeat_shots.py``: a known mean layer, scatter between launches).

For each condition (a seed), the condition's separation (one layer fitted to all its launches
aligned on the ball, ``core.ensemble.condition_sides``) is compared with the truth (the mean of
the launches' prescribed angles), and each launch's own proposal (``core.shot.measure_shot``)
with that launch's truth. Prints per condition and side the errors, the interval and whether
it covers the truth, then the medians, the gain (median single-shot error over median ensemble
error) and the coverage. ``--radius`` sets the ball's size in the picture: the ensemble helps
where single shots see too few particle images beside the wall.

    .venv/bin/python benchmarks/bench_ensemble.py [--conditions 6] [--shots 6] [--radius 48]
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from data.repeat_shots import repeat_launches

from core.ensemble import (
    ENSEMBLE_PASSES,
    FIELD_MARGIN_PX,
    SIDES,
    common_frame,
    condition_sides,
    to_common_frame,
)
from core.piv import correlate_ensemble
from core.separation import COVERAGE_K
from core.settings import PivSettings
from core.shot import ShotSettings, measure_shot


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--conditions", type=int, default=6)
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--first-seed", type=int, default=0)
    parser.add_argument("--radius", type=float, default=48.0, help="ball radius, px")
    args = parser.parse_args()
    shape = (288, 416) if args.radius <= 48 else (round(6 * args.radius), round(8.5 * args.radius))
    ens_err, single_err, covered, widths = [], [], [], []
    started = time.perf_counter()
    for seed in range(args.first_seed, args.first_seed + args.conditions):
        launches = repeat_launches(args.shots, seed=seed, radius_px=args.radius, shape=shape)
        common = common_frame([x.pose for x in launches])
        pairs = [to_common_frame(x.frame_a, x.frame_b, x.pose, common) for x in launches]
        mask = ~common.outside_ball(FIELD_MARGIN_PX)
        field = correlate_ensemble([(a, b, u | mask, u | mask) for a, b, u in pairs],
                                   replace(PivSettings(), passes=ENSEMBLE_PASSES))
        results = [measure_shot(x.frame_a, x.frame_b, ShotSettings(
            dt_s=x.pose.dt_s, ball_diameter_mm=71.6)) for x in launches]
        singles = {side: [getattr(r.separation, side).angle_deg for r in results]
                   for side in SIDES}
        sides = condition_sides(pairs, common, field, singles)
        line = [f"seed {seed:3d}"]
        for side in SIDES:
            truth = float(np.mean([x.true_deg(side) for x in launches]))
            proposal = sides[side]
            error = proposal.angle_deg - truth if proposal.angle_deg is not None else np.nan
            alone = [np.nan if a is None else a - x.true_deg(side)
                     for a, x in zip(singles[side], launches, strict=True)]
            ens_err.append(abs(error))
            single_err += [abs(s) for s in alone]
            covered.append(bool(abs(error) <= (proposal.uncertainty_deg or 0.0)))
            widths.append(proposal.uncertainty_deg or np.nan)
            line.append(f"{side} ensemble {error:+5.2f} ± {proposal.uncertainty_deg or 0:4.1f} "
                        f"{'covers' if covered[-1] else 'MISSES'}, single shots median "
                        f"|error| {np.nanmedian(np.abs(alone)):4.1f}")
        print(" | ".join(line), flush=True)
    ens, single = np.nanmedian(ens_err), np.nanmedian(single_err)
    print(f"\n{args.conditions} conditions x {args.shots} launches, radius {args.radius:g} px, "
          f"both sides ({time.perf_counter() - started:.0f} s)")
    print(f"median |error|: ensemble {ens:.2f} deg, single-shot proposals {single:.2f} deg"
          f"  -> gain x{single / ens:.1f}")
    print(f"largest ensemble |error| {np.nanmax(ens_err):.2f} deg; interval (k = {COVERAGE_K:g}) "
          "median "
          f"half-width {np.nanmedian(widths):.1f} deg covers the truth on "
          f"{sum(covered)} of {len(covered)} sides")


if __name__ == "__main__":
    main()
