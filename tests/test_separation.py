"""Separation proposals on synthetic shots with known truth (core.synth_shot).

The sweep covers separation angles -15..+30 deg on each side, symmetric and asymmetric shots,
flight to the left and to the right with up to +-5 deg of tilt, and departure angles of the
shear layer of 5-15 deg from the tangent (separated layers leave the wall at a shallow angle:
common practice). Truth is the generator's prescribed separation point.

The sweep's ball is drawn at a realistic size. At the scale of the timing example in the check
values (0.078 mm/px: common practice) a 71.6 mm cricket ball has a radius of
71.6 / 2 / 0.078 = 459 px (derived); the sweep uses ``SWEEP_RADIUS_PX`` = 200 px in 768 x 1024
frames, i.e. 71.6 / 400 = 0.179 mm/px (derived), a coarser view than that example, so the
accuracy found here is not flattered by the scale.
"""

import math

import numpy as np
import pytest

from core.results import SideProposal
from core.separation import (
    layer_gap_px,
    model_floor_deg,
    wake_state,
)
from core.shot import ShotSettings, measure_shot
from core.synth_shot import BallWakeFlow, attached_shot, ball_shot, smooth_sphere_shot

SWEEP_RADIUS_PX = 200.0
SWEEP_SHAPE = (768, 1024)
#: Two sweeps of the same recipe with different random cases: the method must meet the target on
#: each, not on one lucky draw.
SWEEP_SEEDS = (7, 11)
SWEEP_SHOTS = 10


def _settings(truth):
    return ShotSettings(dt_s=truth.dt_s, ball_diameter_mm=truth.ball_diameter_mm)


def _sweep_cases(count=14, seed=7):
    """Sweep shots ``(flight, upper, lower, leave, deflection, shot seed)``, random from ``seed``.

    The particle images' seeds are ``300 + i`` whatever ``seed`` is (the flows differ).
    """
    rng = np.random.default_rng(seed)
    cases = []
    for i in range(count):
        flight = (180.0 if i % 2 == 0 else 0.0) + rng.uniform(-5.0, 5.0)
        upper = rng.uniform(-15.0, 30.0)
        lower = upper if i % 3 == 0 else rng.uniform(-15.0, 30.0)
        leave = (rng.uniform(5.0, 15.0), rng.uniform(5.0, 15.0))
        deflection = rng.uniform(-8.0, 8.0)
        cases.append((flight, upper, lower, leave, deflection, 300 + i))
    return cases


def _run_sweep(seed):
    """Errors (deg), reported uncertainties and (measured, true) wake deflections of one sweep."""
    errors, uncertainties, deflections = [], [], []
    for flight, upper, lower, leave, deflection, shot_seed in _sweep_cases(SWEEP_SHOTS, seed):
        frame_a, frame_b, truth = ball_shot(
            SWEEP_SHAPE, radius_px=SWEEP_RADIUS_PX, flight_deg=flight, upper_deg=upper,
            lower_deg=lower, leave_deg=leave, wake_deflection_deg=deflection, seed=shot_seed,
        )
        sep = measure_shot(frame_a, frame_b, _settings(truth)).separation
        for proposal, true in ((sep.upper, upper), (sep.lower, lower)):
            assert proposal.angle_deg is not None, proposal.reason
            errors.append(proposal.angle_deg - true)
            uncertainties.append(proposal.uncertainty_deg)
        deflections.append((sep.wake_deflection_deg, deflection))
    return np.array(errors), np.array(uncertainties), deflections


@pytest.fixture(scope="module")
def sweeps():
    """``{seed: (errors, uncertainties, deflections)}`` for every sweep seed."""
    return {seed: _run_sweep(seed) for seed in SWEEP_SEEDS}


@pytest.fixture(scope="module")
def sweep(sweeps):
    """All sweeps pooled: errors (deg), reported uncertainties, wake deflections."""
    parts = list(sweeps.values())
    return (np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]),
            [d for p in parts for d in p[2]])


@pytest.mark.slow
def test_sweep_errors_stay_within_the_reported_uncertainty(sweep):
    errors, uncertainties, _ = sweep
    coverage = np.mean(np.abs(errors) <= uncertainties)
    assert coverage >= 0.9, f"coverage {coverage:.2f}, errors {np.round(errors, 1)}"
    # not inflated either: for normal errors a 95 % bound is 1.96 / 0.674 = 2.9 times the median
    # |error| (derived); allow 5 times for the heavier tail of the sweep
    assert np.median(uncertainties) <= 5.0 * np.median(np.abs(errors)), "inflated uncertainty"
    # looser than the accuracy target below on purpose (ours): this test is about coverage
    assert np.median(np.abs(errors)) <= 1.5
    assert np.max(np.abs(errors)) <= 4.0


@pytest.mark.slow
@pytest.mark.parametrize("seed", SWEEP_SEEDS)
def test_sweep_meets_the_issue_accuracy_target(sweeps, seed):
    # the issue's target, on each sweep: median |error| <= 1 deg, max <= 2.5 deg. Full 14-shot
    # sweeps of this recipe (seeds 7, 11, 13, 17) give medians 0.52-0.62 deg and maxima
    # 1.7-2.2 deg; the fits are still ~0.5 deg late on average (the fitted circle is ~0.14 px
    # large, which alone makes a 5 deg layer 0.46 deg late: 0.14 / (200 tan 5 deg) rad, derived)
    errors, _, _ = sweeps[seed]
    assert np.median(np.abs(errors)) <= 1.0, np.round(errors, 2)
    assert np.max(np.abs(errors)) <= 2.5, np.round(errors, 2)


@pytest.mark.slow
def test_wake_deflection_follows_the_wake(sweep):
    _, _, deflections = sweep
    measured = np.array([m for m, _ in deflections], dtype=float)
    true = np.array([t for _, t in deflections])
    # the wake 1.2-4 radii behind has not turned fully to its final direction yet: a clear
    # deflection keeps its sign, and the direction is within a few degrees
    clear = np.abs(true) > 4.0
    assert np.all(np.sign(measured[clear]) == np.sign(true[clear]))
    assert np.median(np.abs(measured - true)) <= 3.0


def test_smooth_sphere_separates_near_minus_9_deg():
    # laminar separation 80-82 deg from the front stagnation point, i.e. -8 to -10 deg from the
    # plane normal to the flight (Achenbach 1972, J. Fluid Mech. 54:565, memory)
    frame_a, frame_b, truth = smooth_sphere_shot(seed=21)
    sep = measure_shot(frame_a, frame_b, _settings(truth)).separation
    for proposal in (sep.upper, sep.lower):
        assert proposal.angle_deg is not None
        assert abs(proposal.angle_deg - (-9.0)) <= proposal.uncertainty_deg
    assert sep.wake_state == "symmetric"


@pytest.mark.parametrize("flight_deg", [180.0, 3.0])
def test_attached_flow_proposes_nothing(flight_deg):
    # potential flow past a sphere: no wake, no vorticity (Batchelor 1967, memory)
    frame_a, frame_b, truth = attached_shot(flight_deg=flight_deg, seed=22)
    sep = measure_shot(frame_a, frame_b, _settings(truth)).separation
    for proposal in (sep.upper, sep.lower):
        assert proposal.angle_deg is None
        assert "attached" in proposal.reason
    assert sep.wake_deflection_deg is None and sep.wake_state == "undetermined"


def test_asymmetric_shot_names_the_side_that_holds_on():
    frame_a, frame_b, truth = ball_shot(upper_deg=28.0, lower_deg=-10.0, seed=23)
    sep = measure_shot(frame_a, frame_b, _settings(truth)).separation
    assert sep.wake_state == "upper side holds on longer"


def test_wake_state_threshold():
    def side(angle, unc=1.0):
        return SideProposal(angle, unc)

    assert wake_state(side(10.0), side(6.0)) == "symmetric"  # 4 deg < 5 deg
    assert wake_state(side(10.0), side(2.0)) == "upper side holds on longer"
    assert wake_state(side(0.0, 9.0), side(10.0, 9.0)) == "symmetric"  # within hypot(9, 9)
    assert wake_state(side(None), side(3.0)) == "undetermined"


def test_layer_gap_model_leaves_the_outline_at_the_separation_angle():
    radius, phi_s, leave = 60.0, 12.0, 10.0
    slope = math.tan(math.radians(leave))
    phi = np.array([11.0, 12.0, 20.0, 35.0])
    # a layer that does not turn (its final heading is its first one) is a straight line
    gap = layer_gap_px(radius, phi_s, slope, 1e9, phi, final_deg=leave - phi_s)
    assert gap[0] < 0 and gap[1] == pytest.approx(0.0, abs=1e-9)
    # a line leaving a circle of radius R at angle b from the tangent at polar angle p_s lies at
    # R cos b from the centre, its foot at p_s - b: r(p) = R cos b / cos(p - p_s + b) (derived)
    b = math.radians(leave)
    expected = radius * math.cos(b) / np.cos(np.radians(phi[2:] - phi_s) + b) - radius
    assert gap[2:] == pytest.approx(expected, rel=1e-3)
    # ahead of the plane (heading outward, 22 deg from the axis) a layer turning to the axis
    # stays closer to the wall than the straight one
    ahead = np.array([-4.0, 10.0])
    straight = layer_gap_px(radius, -12.0, slope, 1e9, ahead, final_deg=leave + 12.0)
    turning = layer_gap_px(radius, -12.0, slope, radius, ahead, final_deg=0.0)
    assert np.all(turning < straight)


def test_generator_layer_leaves_the_wall_at_the_prescribed_angle():
    # the truth of the sweep: the synthetic wake's edge meets the outline at the prescribed angle
    flow = BallWakeFlow((200.0, 150.0), 60.0, (-8.0, 0.0), 180.0, 12.0, 12.0)
    from core.geometry import point_at_angle

    for angle, inside in ((6.0, False), (26.0, True)):
        x, y = point_at_angle((200.0, 150.0), 61.0, 180.0, "upper", angle)
        weight = flow.wake_weight(np.array([x]), np.array([y]))[0]
        assert (weight > 0.5) == inside


def test_floor_is_part_of_every_uncertainty():
    frame_a, frame_b, truth = ball_shot(upper_deg=5.0, lower_deg=15.0, seed=24)
    sep = measure_shot(frame_a, frame_b, _settings(truth)).separation
    # the fitted radius may exceed the drawn one by a fraction of a pixel
    assert sep.upper.uncertainty_deg >= model_floor_deg(1.01 * truth.radius_px)
    assert 0.0 <= sep.upper.quality <= 1.0
