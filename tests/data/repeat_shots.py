"""Synthetic repeat launches of one condition with a known mean layer (``core.synth_shot``),
for the ensemble tests and ``benchmarks/bench_ensemble.py`` (imported as ``data.repeat_shots``).

Each launch scatters about the condition: separation angles (the layer), ball position and size
in the picture (±4 %), flight direction (±3 deg), speed (±3 %) and wake direction. The truth of
the condition is the mean of its launches' separation angles.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from core.ensemble import ShotPose
from core.synth_shot import ball_shot


@dataclass
class Launch:
    pose: ShotPose  # from the generator's truth (a measured shot has its fitted ball instead)
    frame_a: np.ndarray
    frame_b: np.ndarray
    upper_deg: float
    lower_deg: float

    def true_deg(self, side: str) -> float:
        return self.upper_deg if side == "upper" else self.lower_deg


def repeat_launches(count: int = 6, *, seed: int = 0, radius_px: float = 48.0,
                    shape: tuple[int, int] = (288, 416), upper_deg: float = -5.0,
                    lower_deg: float = 10.0, scatter_deg: float = 1.5,
                    flight_deg: float = 180.0) -> list[Launch]:
    """``count`` launches of one condition (see the module docstring)."""
    rng = np.random.default_rng(seed)
    height, width = shape
    ahead = -1.0 if np.cos(np.radians(flight_deg)) < 0 else 1.0
    launches = []
    for number in range(count):
        upper = upper_deg + rng.normal(0.0, scatter_deg)
        lower = lower_deg + rng.normal(0.0, scatter_deg)
        radius = radius_px * (1.0 + rng.uniform(-0.04, 0.04))
        centre = (width * (0.5 + 0.15 * ahead) + rng.uniform(-10, 10),
                  height / 2 + rng.uniform(-10, 10))
        a, b, truth = ball_shot(
            shape, radius_px=radius, flight_deg=flight_deg + rng.uniform(-3.0, 3.0),
            shift_px=7.0 * (1.0 + rng.uniform(-0.03, 0.03)), center_px=centre,
            upper_deg=upper, lower_deg=lower,
            wake_deflection_deg=0.3 * (lower - upper) / 2 + rng.uniform(-3.0, 3.0),
            seed=1000 * seed + number)
        mid = tuple(0.5 * (p + q) for p, q in zip(truth.center_a_px, truth.center_b_px,
                                                   strict=True))
        moved = (truth.center_b_px[0] - truth.center_a_px[0],
                 truth.center_b_px[1] - truth.center_a_px[1])
        pose = ShotPose(f"R{number + 1}", mid, truth.radius_px, moved, truth.flight_deg,
                        truth.scale_mm_per_px, truth.dt_s)
        launches.append(Launch(pose, a, b, upper, lower))
    return launches
