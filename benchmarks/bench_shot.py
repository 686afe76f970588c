"""Seconds per shot (ball + PIV + fine PIV + separation + fields) and the share of each stage.

Synthetic ball shots (core.synth_shot) of 1024 x 768 and 2560 x 2160 px, default settings;
each timed ``--repeats`` times after one warm-up run, the median reported. Run:

    .venv/bin/python benchmarks/bench_shot.py [--repeats 3]
"""

from __future__ import annotations

import argparse
import statistics
import time

from core.shot import ShotSettings, measure_shot
from core.synth_shot import ball_shot

SHOTS = {
    "1024x768": {"shape": (768, 1024), "radius_px": 110.0, "shift_px": 9.0,
                 "density_ppp": 0.05},
    "2560x2160": {"shape": (2160, 2560), "radius_px": 300.0, "shift_px": 10.0,
                  "density_ppp": 0.04},
}


def bench(name: str, repeats: int) -> None:
    frame_a, frame_b, truth = ball_shot(upper_deg=12.0, lower_deg=4.0, seed=1, **SHOTS[name])
    settings = ShotSettings(dt_s=truth.dt_s, ball_diameter_mm=truth.ball_diameter_mm)
    measure_shot(frame_a, frame_b, settings)  # warm-up (imports, FFT plans)
    totals, stages = [], []
    for _ in range(repeats):
        start = time.perf_counter()
        result = measure_shot(frame_a, frame_b, settings)
        totals.append(time.perf_counter() - start)
        stages.append(result.stage_seconds)
    total = statistics.median(totals)
    print(f"{name}: {total:.2f} s per shot (median of {repeats})")
    for stage in stages[0]:
        seconds = statistics.median(s[stage] for s in stages)
        print(f"  {stage:<11s} {seconds:6.3f} s  {100.0 * seconds / total:5.1f} %")
    ball = statistics.median(s["ball"] for s in stages)
    print(f"  ball stage {ball:.3f} s (both circles, image match, flight; target <= 0.3 s); "
          f"conditioning is timed within piv")
    fit, flight = result.ball_a, result.flight
    print(f"  ball A: {fit.outline}, centre +- {max(fit.center_sigma_px):.3f} px, radius "
          f"{fit.radius_px:.2f} +- {fit.radius_sigma_px:.3f} px (true {truth.radius_px:.2f}); "
          f"flight {flight.direction_deg:.2f} +- {flight.direction_sigma_deg:.2f} deg "
          f"(true {truth.flight_deg:.2f})")
    sep = result.separation
    print(f"  proposal: upper {sep.upper.angle_deg} (true {truth.upper_deg}), "
          f"lower {sep.lower.angle_deg} (true {truth.lower_deg})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    for name in SHOTS:
        bench(name, args.repeats)


if __name__ == "__main__":
    main()
