"""Synthetic repeat launches of one condition with a known mean layer, for the ensemble tests
and ``benchmarks/bench_ensemble.py`` (imported as ``data.repeat_shots``): of the kinematic family
(``core.synth_shot``, :func:`repeat_launches`) or of the physical one (``core.synth_physical``,
:func:`physical_repeat_launches`).

Each launch scatters about the condition: separation angles (the layer), ball position and size
in the picture, flight direction, speed and wake direction. The truth of the condition is the
mean of its launches' separation angles.
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


def true_pose(shot_id: str, truth) -> ShotPose:
    """The pose a launch's generator truth (``core.synth_shot.ShotTruth``) gives: ball centre
    at mid-exposure, its radius, displacement and flight."""
    (ax, ay), (bx, by) = truth.center_a_px, truth.center_b_px
    return ShotPose(shot_id, (0.5 * (ax + bx), 0.5 * (ay + by)), truth.radius_px,
                    (bx - ax, by - ay), truth.flight_deg, truth.scale_mm_per_px, truth.dt_s)


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
        launches.append(Launch(true_pose(f"R{number + 1}", truth), a, b, upper, lower))
    return launches


def physical_repeat_launches(count: int = 4, *, seed: int = 0, radius_px: float = 150.0,
                             shape: tuple[int, int] = (768, 1024),
                             scatter_deg: float = 1.2) -> list[Launch]:
    """``count`` launches of one condition of the physical family: the condition (its mean
    separation on each side, departures, ball surface, seeding, camera) drawn from ``seed``,
    each launch's separation ``scatter_deg`` about it (through the surface velocity Thwaites'
    method runs on), its departures within 3 deg of the condition's, its ball position, size
    (±3 %), flight (±1.5 deg) and speed (±3 %) its own. A dark, dim or bright ball, with a glint
    on some launches; no laser shadow (a shadowed side is refused, not picked)."""
    from core.synth_physical import physical_shot
    from core.synth_physical.boundary_layer import weight_for_separation

    rng = np.random.default_rng(7919 + seed)
    height, width = shape
    mean_deg = rng.uniform(-8.0, 8.0, size=2)  # (upper, lower): Thwaites' reach on this surface
    departure = rng.uniform(6.0, 16.0, size=2)
    surface = str(rng.choice(["dark", "dim", "bright"]))
    density = rng.uniform(0.04, 0.06)
    bit_depth = int(rng.choice([8, 12]))
    launches = []
    for number in range(count):
        angles = np.clip(mean_deg + rng.normal(0.0, scatter_deg, size=2), -8.8, 13.0)
        centre = (0.3 * width + rng.uniform(-10, 10), height / 2 + rng.uniform(-10, 10))
        a, b, truth = physical_shot(
            shape, radius_px=radius_px * (1.0 + rng.uniform(-0.03, 0.03)),
            flight_deg=180.0 + rng.uniform(-1.5, 1.5),
            speed_m_s=30.0 * (1.0 + rng.uniform(-0.03, 0.03)),
            center_px=centre, ball_diameter_mm=71.6,
            measured_share=tuple(weight_for_separation(float(x)) for x in angles),
            departure_deg=tuple(float(np.clip(d + rng.uniform(-3, 3), 0.0, 25.0))
                                for d in departure),
            surface=surface, glint=bool(rng.random() < 0.3), shadow=False,
            density_ppp=density, bit_depth=bit_depth, seed=100 * seed + number)
        launches.append(Launch(true_pose(f"P{number + 1}", truth), a, b, truth.upper_deg,
                               truth.lower_deg))
    return launches
