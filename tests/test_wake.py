"""The wake's direction behind the ball and its uncertainty (core.wake.wake_direction).

Outside reference: a wake's mean velocity deficit across it is close to a Gaussian (the
far wake's self-similar profile, e.g. Pope, Turbulent Flows, ch. 5; from memory), symmetric
about the centreline, so the weighted centreline of a tilted Gaussian wake is that line.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from core.geometry import flight_unit, side_normal
from core.results import VectorField
from core.separation import BallFrame
from core.wake import wake_direction

RADIUS = 60.0
CENTRE = (400.0, 300.0)
STREAM = 8.0  # px per pair


def gaussian_wake(flight_deg: float, deflection_deg: float, *, lab_frame: bool,
                  noise: float = 0.0, seed: int = 0):
    """A field on 8 px spacing with a Gaussian deficit (half of the stream on its line, 1/e
    half-width 0.4 R) along the line from the ball's centre turned ``deflection_deg`` from the
    rearward axis toward the upper side; ``noise`` px of random error on every vector."""
    y, x = np.mgrid[4:600:8, 4:800:8].astype(float)
    fx, fy = flight_unit(flight_deg)
    nx, ny = side_normal(flight_deg, "upper")
    rx, ry = x - CENTRE[0], y - CENTRE[1]
    along = -(rx * fx + ry * fy)  # rearward
    across = rx * nx + ry * ny  # toward the upper side
    t = math.radians(deflection_deg)
    off_line = across * math.cos(t) - along * math.sin(t)
    keep_up = 0.5 * np.exp(-(off_line / (0.4 * RADIUS)) ** 2) * (along > 0)  # share of the ball's
    if lab_frame:  # far air at rest; the wake is dragged along the flight
        dx, dy = STREAM * keep_up * fx, STREAM * keep_up * fy
    else:  # the ball at rest; the air streams rearward, slower in the wake
        dx, dy = -STREAM * (1 - keep_up) * fx, -STREAM * (1 - keep_up) * fy
    rng = np.random.default_rng(seed)
    dx = dx + noise * rng.standard_normal(dx.shape)
    dy = dy + noise * rng.standard_normal(dy.shape)
    ones = np.ones(x.shape, bool)
    field = VectorField(x, y, dx, dy, ones, ~ones, ~ones, np.full(x.shape, 3.0))
    motion = (STREAM * fx, STREAM * fy) if lab_frame else (0.0, 0.0)
    return field, BallFrame(CENTRE, RADIUS, motion, flight_deg, STREAM)


@pytest.mark.parametrize("flight_deg", [180.0, 3.0])
@pytest.mark.parametrize("lab_frame", [False, True])
@pytest.mark.parametrize("deflection_deg", [-6.0, 0.0, 4.0])
def test_tilted_gaussian_wake_is_found_with_a_small_uncertainty(flight_deg, lab_frame,
                                                                 deflection_deg):
    field, ball = gaussian_wake(flight_deg, deflection_deg, lab_frame=lab_frame)
    wake = wake_direction(field, (0.0, 0.0), ball, lab_frame=lab_frame)
    # the window of 1.2-4 radii and 1.5 radii either side cuts the tilted Gaussian a little
    assert wake.deflection_deg == pytest.approx(deflection_deg, abs=0.3)
    # a straight symmetric wake: only the bilinear lookup of the mirror images moves it
    assert 0.0 <= wake.uncertainty_deg < 0.5


def test_uncertainty_grows_with_scatter_and_covers_the_truth():
    """Noisy vectors (a quarter of the stream, an unusually bad field) scatter the weights: the
    uncertainty grows and covers the truth as stated (95 %: 19 or more of 20 fields).

    It grows far more than the error does (median 28 deg against errors of sd 2.4 deg, at most
    7.3, on 60 such fields): uncorrelated noise is counted as if it were the wake's own
    asymmetry, correlated over a radius (docs/separation_accuracy.md, The wake's direction). The
    bounds below hold that where it stands: a noise-aware ± would move them."""
    field, ball = gaussian_wake(180.0, 5.0, lab_frame=False)
    clean = wake_direction(field, (0.0, 0.0), ball)
    covered, widths, errors = [], [], []
    for seed in range(20):
        field, ball = gaussian_wake(180.0, 5.0, lab_frame=False, noise=0.25 * STREAM, seed=seed)
        wake = wake_direction(field, (0.0, 0.0), ball)
        errors.append(abs(wake.deflection_deg - 5.0))
        covered.append(errors[-1] <= wake.uncertainty_deg)
        widths.append(wake.uncertainty_deg)
    assert np.median(widths) > 2.0 * clean.uncertainty_deg
    assert np.mean(covered) >= 0.95
    assert max(errors) < 10.0 and np.median(widths) < 40.0


def test_slope_moves_as_its_first_order_influence():
    """The uncertainty's building block: a small change ``dw`` of the weights moves the fitted
    slope by ``sum dw along residual / sum w along^2`` (the derivative of the weighted
    least-squares slope; the terms of the weighted means vanish at the fit), checked against
    refitting."""
    from core.wake import _Centreline

    rng = np.random.default_rng(1)
    along = rng.uniform(0.0, 200.0, 400)
    across = 0.1 * along + rng.normal(0.0, 20.0, along.size)
    weight = rng.uniform(0.1, 1.0, along.size)
    line = _Centreline.fit(along, across, weight)
    change = np.zeros_like(weight)
    change[7] = 1e-4
    refit = _Centreline.fit(along, across, weight + change)
    everywhere = np.ones(along.size, bool)
    assert refit.slope - line.slope == pytest.approx(
        change[7] * line.along[7] * line.residual[7] / line.spread, rel=1e-3)
    assert line.moved_by(change, everywhere) == pytest.approx(abs(refit.slope - line.slope),
                                                              rel=1e-3)


def test_no_wake_without_enough_slow_air():
    field, ball = gaussian_wake(180.0, 0.0, lab_frame=False)
    field.dx_px[:] = -STREAM  # the air streams past everywhere at full speed: no wake
    field.dy_px[:] = 0.0
    assert wake_direction(field, (0.0, 0.0), ball) is None
