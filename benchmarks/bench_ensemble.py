"""The ensemble's gain over single shots on synthetic repeat launches (``tests/data/
repeat_shots.py``: a known mean layer, scatter between launches).

For each condition (a seed), the condition's separation from the ensemble of its launches
(``core.ensemble``) is compared with the truth (the mean of the launches' prescribed angles),
and each launch's own pick by the same near-wall method (an ensemble of one) with that launch's
truth. Prints per condition and side the errors, the interval and whether it covers the truth,
then the medians, the gain (median single-shot error over median ensemble error) and the
coverage. With ``--proposals`` it also measures every launch with ``core.shot.measure_shot``
and prints the shot-by-shot proposals' errors (slow).

    .venv/bin/python benchmarks/bench_ensemble.py [--conditions 8] [--shots 6] [--proposals]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from data.repeat_shots import repeat_launches

from core.ensemble import (
    SIDES,
    common_frame,
    condition_separation,
    near_wall_planes,
    side_separation,
    to_common_frame,
)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--conditions", type=int, default=8)
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--first-seed", type=int, default=0)
    parser.add_argument("--proposals", action="store_true")
    args = parser.parse_args()
    ens_err, single_err, covered, widths, proposal_err = [], [], [], [], []
    started = time.perf_counter()
    for seed in range(args.first_seed, args.first_seed + args.conditions):
        launches = repeat_launches(args.shots, seed=seed)
        common = common_frame([x.pose for x in launches])
        pairs = [to_common_frame(x.frame_a, x.frame_b, x.pose, common) for x in launches]
        line = [f"seed {seed:3d}"]
        for side in SIDES:
            planes = near_wall_planes(pairs, common, side)
            truth = float(np.mean([x.true_deg(side) for x in launches]))
            proposal = condition_separation(planes)
            error = proposal.angle_deg - truth if proposal.angle_deg is not None else np.nan
            singles = []
            for number, launch in enumerate(launches):
                alone = np.eye(len(launches))[number]
                angle = side_separation(planes, alone)
                singles.append(np.nan if angle is None else angle - launch.true_deg(side))
            ens_err.append(abs(error))
            single_err += [abs(s) for s in singles]
            covered.append(bool(abs(error) <= (proposal.uncertainty_deg or 0.0)))
            widths.append(proposal.uncertainty_deg or np.nan)
            line.append(f"{side} ensemble {error:+5.2f} ± {proposal.uncertainty_deg:4.1f} "
                        f"{'covers' if covered[-1] else 'MISSES'}, single shots median "
                        f"|error| {np.nanmedian(np.abs(singles)):4.1f}")
        if args.proposals:
            proposal_err += _proposal_errors(launches)
        print(" | ".join(line), flush=True)
    ens, single = np.nanmedian(ens_err), np.nanmedian(single_err)
    print(f"\n{args.conditions} conditions x {args.shots} launches, both sides "
          f"({time.perf_counter() - started:.0f} s)")
    print(f"median |error|: ensemble {ens:.2f} deg, single shots (same method) {single:.2f} deg"
          f"  -> gain x{single / ens:.1f}")
    print(f"largest ensemble |error| {np.nanmax(ens_err):.2f} deg; interval (k = 2) median "
          f"half-width {np.nanmedian(widths):.1f} deg covers the truth on "
          f"{sum(covered)} of {len(covered)} sides")
    if proposal_err:
        print(f"shot-by-shot proposals (core.shot.measure_shot): median |error| "
              f"{np.nanmedian(np.abs(proposal_err)):.2f} deg over {len(proposal_err)} sides")


def _proposal_errors(launches) -> list[float]:
    from core.shot import ShotSettings, measure_shot

    out = []
    for launch in launches:
        result = measure_shot(launch.frame_a, launch.frame_b, ShotSettings(
            dt_s=launch.pose.dt_s, ball_diameter_mm=71.6))
        for side in SIDES:
            angle = getattr(result.separation, side).angle_deg
            out.append(np.nan if angle is None else angle - launch.true_deg(side))
    return out


if __name__ == "__main__":
    main()
