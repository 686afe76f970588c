"""The ensemble's gain over single shots, and how often its uncertainty covers the truth, on
synthetic repeat launches (``tests/data/repeat_shots.py``: a known mean layer, scatter between
launches) of either family.

For each condition (a seed) every launch is measured as a shot (``core.shot.measure_shot``),
the launches are aligned on their *measured* balls and flights as a session's are
(``core.ensemble.ensemble_view``; ``--true-poses``: on the generator's), and the condition's
separation (one layer fitted to all its launches) is compared with the truth (the mean of the
launches' angles); each launch's own proposal with that launch's truth, and the launches' mean
with the condition's. Prints per condition and side the errors, the interval and whether it
covers the truth, then the medians, the gain (median single-shot error over median ensemble
error) and the coverage. ``--radius`` sets the ball's size in the picture (default 48 px for
the kinematic family, 150 px for the physical one): small balls leave single shots few particle
images beside the wall. ``--out`` writes one JSON line per condition and side (the proposals,
their budgets and the truths). A condition none of whose launches gives a ball and a flight is
skipped and counted.

    .venv/bin/python benchmarks/bench_ensemble.py [--family kinematic|physical]
        [--conditions 6] [--shots 6] [--radius 48] [--true-poses] [--out records.jsonl]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

from data.repeat_shots import physical_repeat_launches, repeat_launches

from core.conditions import Spread
from core.ensemble import SIDES, ShotPose, ensemble_view
from core.separation import COVERAGE_K
from core.shot import ShotSettings, measure_shot
from core.summary import ShotSummary


def launches_of(family: str, shots: int, seed: int, radius: float):
    if family == "physical":
        shape = (768, 1024) if radius <= 160 else (round(5.2 * radius), round(7.0 * radius))
        return physical_repeat_launches(shots, seed=seed, radius_px=radius, shape=shape)
    shape = (288, 416) if radius <= 48 else (round(6 * radius), round(8.5 * radius))
    return repeat_launches(shots, seed=seed, radius_px=radius, shape=shape)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--family", choices=("kinematic", "physical"), default="kinematic")
    parser.add_argument("--conditions", type=int, default=6)
    parser.add_argument("--shots", type=int, default=6)
    parser.add_argument("--first-seed", type=int, default=0)
    parser.add_argument("--radius", type=float, help="ball radius, px (default: 48 kinematic, "
                        "150 physical)")
    parser.add_argument("--true-poses", action="store_true",
                        help="align on the generator's balls and flights, not the measured ones")
    parser.add_argument("--out", type=Path, help="JSON lines, one per condition and side")
    args = parser.parse_args()
    if args.radius is None:
        args.radius = 150.0 if args.family == "physical" else 48.0
    skipped = 0
    ens_err, single_err, covered, widths = [], [], [], []
    mean_err, mean_covered = [], []
    out = args.out.open("w") if args.out else None
    started = time.perf_counter()
    for seed in range(args.first_seed, args.first_seed + args.conditions):
        launches = launches_of(args.family, args.shots, seed, args.radius)
        shots, summaries = [], []
        for launch in launches:
            result = measure_shot(launch.frame_a, launch.frame_b, ShotSettings(
                dt_s=launch.pose.dt_s, ball_diameter_mm=71.6))
            summary = ShotSummary.from_dict(result.summary())
            pose = ShotPose.from_summary(launch.pose.shot_id, summary)
            if pose is not None and args.true_poses:
                pose = launch.pose
            if pose is not None:  # as a session leaves out a shot without ball and flight
                shots.append((pose, launch.frame_a, launch.frame_b))
                summaries.append((launch, summary))
        if not shots:
            skipped += 1
            print(f"seed {seed:3d}: no launch gave a ball and a flight: skipped", flush=True)
            continue
        singles = {side: [s.side(side) for _, s in summaries] for side in SIDES}
        view = ensemble_view(shots, singles=singles)
        line = [f"seed {seed:3d} ({len(shots)} aligned)"]
        for side in SIDES:
            truth = float(np.mean([x.true_deg(side) for x, _ in summaries]))
            proposal = getattr(view.separation, side)
            error = proposal.angle_deg - truth if proposal.angle_deg is not None else np.nan
            alone = [np.nan if s.proposed_deg(side) is None
                     else s.proposed_deg(side) - x.true_deg(side) for x, s in summaries]
            ens_err.append(abs(error))
            single_err += [abs(s) for s in alone]
            mean = Spread.of([s.proposed_deg(side) for _, s in summaries],  # the conditions table's
                             [s.uncertainty_deg(side) for _, s in summaries])
            if mean.low is not None:
                mean_err.append(abs(mean.mean - truth))
                mean_covered.append(bool(mean.low <= truth <= mean.high))
            covered.append(bool(abs(error) <= (proposal.uncertainty_deg or 0.0)))
            widths.append(proposal.uncertainty_deg or np.nan)
            line.append(f"{side} ensemble {error:+5.2f} ± {proposal.uncertainty_deg or 0:4.1f} "
                        f"{'covers' if covered[-1] else 'MISSES'}, single shots median "
                        f"|error| {np.nanmedian(np.abs(alone)):4.1f}, their mean "
                        f"{'-' if mean.mean is None else f'{mean.mean - truth:+5.2f}'}")
            if out:
                out.write(json.dumps({
                    "family": args.family, "seed": seed, "side": side, "radius_px": args.radius,
                    "true_poses": args.true_poses,
                    "truth_deg": truth, "angle_deg": proposal.angle_deg,
                    "uncertainty_deg": proposal.uncertainty_deg, "budget": proposal.budget,
                    "singles": [{"truth_deg": x.true_deg(side), "angle_deg": s.proposed_deg(side),
                                 "uncertainty_deg": s.uncertainty_deg(side),
                                 "budget": s.side(side).budget} for x, s in summaries],
                }) + "\n")
                out.flush()
        print(" | ".join(line), flush=True)
    ens, single = np.nanmedian(ens_err), np.nanmedian(single_err)
    print(f"\n{args.family} family: {args.conditions} conditions x {args.shots} launches, "
          f"radius {args.radius:g} px, both sides ({time.perf_counter() - started:.0f} s)"
          + (f"; {skipped} condition(s) skipped" if skipped else ""))
    print(f"median |error|: ensemble {ens:.2f} deg, single-shot proposals {single:.2f} deg"
          f"  -> gain x{single / ens:.1f}")
    print(f"largest ensemble |error| {np.nanmax(ens_err):.2f} deg; interval (k = {COVERAGE_K:g}) "
          f"median half-width {np.nanmedian(widths):.1f} deg covers the truth on "
          f"{sum(covered)} of {len(covered)} sides")
    if mean_err:
        print(f"the launches' mean (as the conditions table gives it): median |error| "
              f"{np.median(mean_err):.2f} deg, largest {max(mean_err):.2f} deg; its 95 % interval "
              f"(the wider of Student t and the shots' own) covers the truth on "
              f"{sum(mean_covered)} of {len(mean_covered)} sides")


if __name__ == "__main__":
    main()
