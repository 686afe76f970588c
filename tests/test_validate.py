"""Normalised median test and outlier replacement on displacement grids."""

import numpy as np
import pytest

from core import synth
from core.piv.validate import nanmedian_first_axis, normalized_median_test, replace_outliers


def _smooth_field(seed=0, noise_px=0.05):
    """A Lamb-Oseen vortex sampled on a 40 x 40 grid of 16 px spacing, with measurement noise."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:40, 0:40] * 16.0 + 15.5
    field = synth.lamb_oseen((320.0, 300.0), circulation_px2=2000.0, core_radius_px=60.0)
    tx, ty = field(x, y)
    return tx, ty, tx + rng.normal(0, noise_px, tx.shape), ty + rng.normal(0, noise_px, ty.shape)


def test_single_spike_on_a_uniform_field_against_the_hand_worked_residual():
    # r0 = |u0 - um| / (median|ui - um| + eps) (Westerweel & Scarano 2005, seen: abstract for
    # the form). All neighbours equal: the median residual is 0, so r0 = |u0 - um| / eps
    # (derived): a 0.5 px spike gives 5 > 2 (outlier), a 0.15 px one 1.5 < 2 (kept).
    dx = np.ones((5, 5))
    dy = np.zeros((5, 5))
    dx[2, 2] = 1.5
    dy[1, 3] = 0.15
    out = normalized_median_test(dx, dy, threshold=2.0, eps=0.1)
    assert out[2, 2]
    assert np.count_nonzero(out) == 1


def test_injected_outliers_are_caught_and_good_vectors_kept():
    # Catch rate: no published value (docs/references.md: Westerweel & Scarano 2005, memory for
    # the constants threshold 2, eps 0.1 px); we require near-total detection of injected random
    # vectors with few false rejections (common practice).
    tx, ty, dx, dy = _smooth_field()
    rng = np.random.default_rng(1)
    bad = rng.random(dx.shape) < 0.05
    dx[bad] = rng.uniform(-8, 8, np.count_nonzero(bad))
    dy[bad] = rng.uniform(-8, 8, np.count_nonzero(bad))
    # a random vector that happens to land within 1 px of the truth is not wrong
    wrong = bad & (np.hypot(dx - tx, dy - ty) > 1.0)
    out = normalized_median_test(dx, dy, threshold=2.0, eps=0.1)
    caught = np.count_nonzero(out & wrong) / np.count_nonzero(wrong)
    false_rejects = np.count_nonzero(out & ~bad) / np.count_nonzero(~bad)
    assert np.count_nonzero(wrong) > 50
    assert caught >= 0.95
    assert false_rejects <= 0.01


def test_masked_and_missing_neighbours_take_no_part():
    dx = np.ones((6, 6))
    dy = np.zeros((6, 6))
    masked = np.zeros((6, 6), bool)
    masked[:, :3] = True
    dx[masked] = 50.0  # garbage under the mask must not make the edge column look wrong
    dx[0, 5] = np.nan
    out = normalized_median_test(dx, dy, valid=~masked)
    assert not np.any(out)


def test_isolated_cell_is_not_judged():
    dx = np.full((3, 3), np.nan)
    dy = np.full((3, 3), np.nan)
    dx[1, 1], dy[1, 1] = 9.0, 9.0
    dx[0, 0], dy[0, 0] = 0.0, 0.0
    assert not np.any(normalized_median_test(dx, dy))


def test_nanmedian_matches_numpy_and_gives_nan_for_empty_cells():
    rng = np.random.default_rng(0)
    stack = rng.normal(size=(8, 20, 20))
    stack[rng.random(stack.shape) < 0.4] = np.nan
    stack[:, 0, 0] = np.nan
    median, count = nanmedian_first_axis(stack)
    assert np.isnan(median[0, 0]) and count[0, 0] == 0
    with np.errstate(all="ignore"):
        has = count > 0
        expected = np.array([np.median(col[np.isfinite(col)]) for col in stack[:, has].T])
    np.testing.assert_allclose(median[has], expected)


def test_replacement_follows_the_smooth_field_and_keeps_masked_cells_empty():
    tx, ty, dx, dy = _smooth_field(seed=2)
    rng = np.random.default_rng(3)
    outliers = rng.random(dx.shape) < 0.08
    dx[outliers] = 40.0
    masked = np.zeros(dx.shape, bool)
    masked[15:22, 15:22] = True
    fx, fy = replace_outliers(dx, dy, outliers, masked)
    assert np.all(np.isnan(fx[masked])) and np.all(np.isnan(fy[masked]))
    filled = outliers & ~masked
    assert np.all(np.isfinite(fx[filled]))
    err = np.hypot(fx[filled] - tx[filled], fy[filled] - ty[filled])
    assert np.sqrt(np.mean(err**2)) < 0.2
    keep = ~outliers & ~masked
    np.testing.assert_array_equal(fx[keep], dx[keep])


def test_replacement_fills_a_large_hole_from_the_outside_in():
    dx = np.tile(np.arange(12.0), (12, 1)) * 0.1  # linear ramp
    dy = np.zeros_like(dx)
    hole = np.zeros(dx.shape, bool)
    hole[3:9, 3:9] = True
    fx, _ = replace_outliers(np.where(hole, np.nan, dx), dy, hole)
    assert np.all(np.isfinite(fx))
    assert np.max(np.abs(fx - dx)) < 0.15


@pytest.mark.parametrize("eps", [0.1, 0.2])
def test_pure_noise_field_is_mostly_accepted(eps):
    # a field of pure measurement noise well below eps has hardly any outliers
    rng = np.random.default_rng(5)
    dx = 2.0 + rng.normal(0, 0.03, (30, 30))
    dy = -1.0 + rng.normal(0, 0.03, (30, 30))
    assert np.count_nonzero(normalized_median_test(dx, dy, eps=eps)) <= 9


def _sheared_grid(masked_corner=False):
    y, x = np.mgrid[0:20, 0:24].astype(float)
    dx = 0.8 * y - 0.3 * x + 2.0  # a strong uniform gradient, px per cell
    dy = 0.2 * x
    masked = np.zeros(dx.shape, bool)
    if masked_corner:
        masked[y > 14 - 0.5 * x] = True
    return dx, dy, masked


def test_plain_test_rejects_edges_of_a_uniform_gradient_and_the_extrapolating_one_does_not():
    # derived: at an edge all neighbours lie on one side, so their median is a whole gradient
    # step from the cell while their spread can be 0; 2 u(c+o) - u(c+2o) is exact on a linear
    # field
    for corner in (False, True):
        dx, dy, masked = _sheared_grid(corner)
        plain = normalized_median_test(dx, dy, valid=~masked)
        assert np.any(plain)
        assert not np.any(normalized_median_test(dx, dy, valid=~masked, extrapolate_edges=True))


def test_extrapolating_test_still_catches_injected_outliers_at_the_edges():
    # same protocol as the interior check (Westerweel & Scarano 2005 constants, memory)
    tx, ty, dx, dy = _smooth_field(seed=4)
    rng = np.random.default_rng(6)
    bad = rng.random(dx.shape) < 0.05
    bad[0, ::5] = bad[-1, ::7] = bad[:, 0][::6] = True  # some on the edges for sure
    dx[bad] = rng.uniform(-8, 8, np.count_nonzero(bad))
    dy[bad] = rng.uniform(-8, 8, np.count_nonzero(bad))
    wrong = bad & (np.hypot(dx - tx, dy - ty) > 1.0)
    out = normalized_median_test(dx, dy, extrapolate_edges=True)
    assert np.count_nonzero(out & wrong) / np.count_nonzero(wrong) >= 0.95
    assert np.count_nonzero(out & ~bad) / np.count_nonzero(~bad) <= 0.01
    edge = np.zeros(dx.shape, bool)
    edge[[0, -1], :] = edge[:, [0, -1]] = True
    assert np.all(out[wrong & edge])
