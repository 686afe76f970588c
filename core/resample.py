"""Cubic B-spline resampling of pictures, scipy's numbers compiled.

:func:`scipy.ndimage.map_coordinates` (order 3) is general: any mode, any dimension. Where every
point's 4 x 4 taps lie inside the coefficients, the B-spline's weights can be worked out once
per point and axis and the sums compiled, a few times quicker: a large shot's band pictures
(half a million points each, :mod:`core.near_wall`), the ball finder's rays
(:mod:`core.ball.outline`) and the PIV's deformed windows (:mod:`core.piv.deform`) are
resampled that way. Elsewhere scipy's own function is called.
The results equal scipy's to rounding (tests/test_separation_batched.py).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from core.compiled import compiled

#: scipy pads a picture by this many samples (its edge repeated, for mode "nearest") before
#: the spline filter.
SPLINE_PAD = 12


def cubic_resampled(picture: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """``scipy.ndimage.map_coordinates(picture, [rows, cols], order=3, mode="nearest")`` in
    double precision (``rows``, ``cols``: 1-D or 2-D, not empty)."""
    picture = np.asarray(picture, dtype=np.float64)
    rows, cols = np.asarray(rows, dtype=np.float64), np.asarray(cols, dtype=np.float64)
    if not _within(rows, cols, picture.shape, 0):  # e.g. the frame's edge cuts the crop
        return ndimage.map_coordinates(picture, [rows, cols], order=3, mode="nearest")
    coefficients = ndimage.spline_filter(np.pad(picture, SPLINE_PAD, mode="edge"), order=3,
                                         mode="nearest")
    return _samples(coefficients, rows + SPLINE_PAD, cols + SPLINE_PAD)


def spline_values(coefficients: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """``scipy.ndimage.map_coordinates(coefficients, [rows, cols], order=3, mode="nearest",
    prefilter=False)``: a cubic spline's values from its coefficients, in their dtype."""
    rows, cols = np.asarray(rows, dtype=np.float64), np.asarray(cols, dtype=np.float64)
    if not _within(rows, cols, coefficients.shape, 1):
        return ndimage.map_coordinates(coefficients, [rows, cols], order=3, mode="nearest",
                                       prefilter=False)
    values = _samples(np.asarray(coefficients, dtype=np.float64), rows, cols)
    return values.astype(coefficients.dtype, copy=False)


def _within(rows, cols, shape, margin: int) -> bool:
    """Every point's taps (one sample before it to two after) inside ``shape`` once it is
    padded by ``SPLINE_PAD`` (``margin`` 0) or as it is (``margin`` 1: a sample before the
    first and two after the last row and column left free)."""
    low, high = float(margin), (2.0 * margin)
    return bool(rows.min() >= low and cols.min() >= low and rows.max() <= shape[0] - 1 - high
                and cols.max() <= shape[1] - 1 - high)


def _samples(coefficients: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    out = np.empty(rows.shape)
    flat = out.reshape(np.atleast_2d(rows).shape)
    _cubic_samples(coefficients, np.atleast_2d(rows), np.atleast_2d(cols), flat)
    return out


@compiled
def _cubic_samples(coefficients, rows, cols, out):
    """:func:`cubic_spline_at` at each ``(rows[i, j], cols[i, j])`` (2-D) into ``out``."""
    for i in range(rows.shape[0]):
        for j in range(rows.shape[1]):
            out[i, j] = cubic_spline_at(coefficients, rows[i, j], cols[i, j])


@compiled
def cubic_spline_at(coefficients, r, c):
    """Cubic B-spline interpolation of ``coefficients`` at ``(r, c)``, at least one sample
    inside the first and two inside the last row and column, summed in double precision."""
    r0, c0 = math.floor(r), math.floor(c)
    wr = _cubic_weights(r - r0)
    wc = _cubic_weights(c - c0)
    total = 0.0
    for a in range(4):
        line = 0.0
        for b in range(4):
            line += wc[b] * coefficients[r0 - 1 + a, c0 - 1 + b]
        total += wr[a] * line
    return total


@compiled
def _cubic_weights(t):
    """The cubic B-spline's weights of the four taps around a point ``t`` past the second."""
    s = 1.0 - t
    return (s * s * s / 6.0, (3.0 * t * t * t - 6.0 * t * t + 4.0) / 6.0,
            (-3.0 * t * t * t + 3.0 * t * t + 3.0 * t + 1.0) / 6.0, t * t * t / 6.0)
