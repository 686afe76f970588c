"""Derivative stencil, vorticity convention and noise gain, frames of reference."""

import math

import numpy as np
import pytest

from core.fields import (
    ball_frame,
    least_squares_derivative,
    velocity_m_s,
    vorticity,
)
from core.synth import lamb_oseen, uniform_shear


def _grid(n=40, h=4.0):
    y, x = np.mgrid[0:n, 0:n].astype(float) * h
    return x, y, h


def test_least_squares_stencil_matches_the_closed_form():
    # (2 f2 + f1 - f-1 - 2 f-2) / (10 h) (docs/references.md, derived)
    # on samples no polynomial of low degree fits (a central difference gives 0.75 there)
    f = np.array([[3.0, -1.0, 7.0, 2.0, 5.0]])
    d = least_squares_derivative(f, 2.0, axis=1)
    assert d[0, 2] == pytest.approx((2 * 5.0 + 2.0 - (-1.0) - 2 * 3.0) / 20.0)


def test_uniform_shear_vorticity_counter_clockwise_on_screen():
    # u = S y (y downward) turns counter-clockwise on screen: omega = +S (derived)
    x, y, h = _grid()
    field = uniform_shear(0.05)
    dx, dy = field(x, y)
    omega = vorticity(dx, dy, h)
    assert np.allclose(omega, 0.05)


def test_solid_body_rotation_gives_twice_the_rate():
    # screen-counter-clockwise rotation Omega: omega = 2 Omega (derived)
    x, y, h = _grid()
    rate = 0.01
    cx = cy = x.max() / 2
    dx, dy = rate * (y - cy), -rate * (x - cx)
    assert np.allclose(vorticity(dx, dy, h), 2 * rate)


def test_lamb_oseen_peak_vorticity():
    # omega(0) = G / (pi rc^2) (seen: standard references); rc = 8 h keeps the stencil bias small
    x, y, h = _grid(60, 1.0)
    vortex = lamb_oseen((30.0, 30.0), 400.0, 8.0)
    dx, dy = vortex(x, y)
    omega = vorticity(dx, dy, h)
    assert omega[30, 30] == pytest.approx(400.0 / (math.pi * 64.0), rel=0.03)


def test_noise_gain_is_045_e_over_h():
    # least-squares stencil on vorticity: 0.45 e/h (docs/references.md, derived)
    rng = np.random.default_rng(1)
    e, h = 0.1, 4.0
    dx = rng.normal(0, e, (200, 200))
    dy = rng.normal(0, e, (200, 200))
    omega = vorticity(dx, dy, h)[5:-5, 5:-5]
    assert np.std(omega) == pytest.approx(0.45 * e / h, rel=0.05)


def test_holes_use_the_remaining_points():
    x, y, h = _grid()
    dx, dy = uniform_shear(0.02)(x, y)
    dx[10, 10] = np.nan
    omega = vorticity(dx, dy, h)
    assert omega[11, 10] == pytest.approx(0.02)
    assert np.isnan(omega[10, 10])


def test_velocity_and_ball_frame():
    u, v = velocity_m_s(np.array([8.0]), np.array([-2.0]), dt_s=20e-6, scale_mm_per_px=0.1)
    assert u[0] == pytest.approx(40.0) and v[0] == pytest.approx(-10.0)
    bx, by = ball_frame(np.array([8.0]), np.array([1.0]), (8.0, 0.0))
    assert bx[0] == 0.0 and by[0] == 1.0


def _grid_field(dx, dy, valid=None, step=8.0, n=41):
    """A vector field on an n x n grid ``step`` px apart about (160, 160)."""
    from core.results import VectorField

    y, x = np.mgrid[0:n, 0:n].astype(float) * step
    shape = x.shape
    ok = np.ones(shape, bool) if valid is None else valid
    return VectorField(x, y, np.broadcast_to(dx, shape).astype(float),
                       np.broadcast_to(dy, shape).astype(float), ok, np.zeros(shape, bool),
                       np.zeros(shape, bool), np.ones(shape))


def test_valid_vectors_near_the_ball_are_counted_outside_its_outline_within_the_reach():
    # counted by hand: the ring 20 < r <= 28 px about a grid node holds, in steps of 8 px, the
    # nodes at (+-3, 0) and (0, +-3) (r 24), (+-2, +-2) (r 22.6) and (+-3, +-1), (+-1, +-3)
    # (r 25.3): 16, less one made invalid
    from core.fields import valid_near_ball
    from core.results import BallFit

    valid = np.ones((41, 41), bool)
    valid[20, 23] = False  # (184, 160): r = 24
    vf = _grid_field(1.0, 0.0, valid)
    assert valid_near_ball(vf, BallFit((160.0, 160.0), 20.0), 8.0) == 15


@pytest.mark.parametrize("flight_deg", [0.0, 30.0, 200.0])
def test_the_air_near_the_ball_moves_along_its_flight(flight_deg):
    # lab frame: the air the ball drags moves with it (flight convention: 90 deg toward the
    # top, image y down, derived); a uniform drift at 5 px along the flight gives the flight
    # itself with only the floor of the uncertainty left
    from core.ball.flight import AIR_DIRECTION_FLOOR_DEG, air_direction
    from core.results import BallFit

    a = math.radians(flight_deg)
    vf = _grid_field(5.0 * math.cos(a), -5.0 * math.sin(a))
    found = air_direction(vf, BallFit((160.0, 160.0), 30.0), ball_shift_px=9.0)
    assert found is not None
    direction, sigma = found
    assert (direction - flight_deg + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-9)
    assert sigma == pytest.approx(AIR_DIRECTION_FLOOR_DEG)
    # air slower than a third of the ball's shift does not count: nothing to go by
    assert air_direction(vf, BallFit((160.0, 160.0), 30.0), ball_shift_px=16.0) is None
