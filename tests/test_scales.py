"""The round numbers of the drawn scales: colour-bar ends close to the fields' own."""

from __future__ import annotations

import numpy as np
import pytest

from app.review import colours
from app.review.scales import round_length, round_limit, shared_limit, shot_limit


@pytest.mark.parametrize(("value", "rounded"), [
    (2049.6, 2100.0), (2100.0, 2100.0), (2117.6, 2200.0), (1888.7, 1900.0), (9.95, 10.0),
    (0.0123, 0.013), (123456.0, 130000.0), (0.0, 1.0), (float("nan"), 1.0),
])
def test_a_colour_bar_end_is_rounded_up_to_two_figures(value, rounded):
    assert round_limit(value) == rounded


def test_a_colour_bar_end_stays_within_a_tenth_of_the_field():
    for value in np.geomspace(1e-3, 1e6, 997):
        assert value <= round_limit(value) <= 1.1 * value


def _field(limit: float, seed: int) -> np.ndarray:
    """A field whose 98th percentile of |w| is ``limit``."""
    w = np.random.default_rng(seed).normal(size=(40, 50))
    return w * limit / colours.symmetric_limit(w)


def test_the_session_range_stays_close_to_the_shots_own():
    """Shots of 2086 to 2322 1/s each (the demo's) share a range near them, not one of 5000."""
    fields = [_field(limit, seed) for seed, limit in enumerate((2086, 2150, 2200, 2322))]
    shared = shared_limit(fields)
    assert shared == 2200.0
    for w in fields:
        assert 0.9 <= shared / shot_limit(w) <= 1.1


def test_a_shot_limit_is_its_own_range_rounded():
    w = _field(2049.6, 7)
    assert shot_limit(w) == 2100.0
    assert shot_limit(np.array([np.nan])) == 1.0


def test_a_scale_bar_never_outgrows_its_room():
    assert round_length(73.0) == 50.0 and round_length(0.0) == 10.0
