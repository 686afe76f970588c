"""The predictor between passes: the last pass's field, outliers replaced and lightly
smoothed, interpolated where the next pass needs it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from core.piv.grid import Grid, grid_spline, interpolate_grid, spline_slopes
from core.piv.validate import replace_outliers

#: Gaussian smoothing of the predictor between passes, in grid spacings.
PREDICTOR_SMOOTHING = 0.5


@dataclass
class Predictor:
    grid: Grid
    dx: np.ndarray  # (M, N), finite everywhere
    dy: np.ndarray

    def at(self, grid: Grid) -> tuple[np.ndarray, np.ndarray]:
        return (
            interpolate_grid(self.grid, self.dx, grid.y_px, grid.x_px),
            interpolate_grid(self.grid, self.dy, grid.y_px, grid.x_px),
        )

    def at_centroids(self, x_px, y_px, off_x, off_y) -> tuple[np.ndarray, np.ndarray]:
        """Predictor carried from window centroids ``(x + off_x, y + off_y)`` back to the
        centres ``(x, y)`` along its own gradient: ``p(g) - J(g) (g - c)``, each ``(K,)``."""
        gx = np.clip(x_px + off_x, self.grid.x_px[0], self.grid.x_px[-1])
        gy = np.clip(y_px + off_y, self.grid.y_px[0], self.grid.y_px[-1])
        out = []
        for values in (self.dx, self.dy):
            spline = grid_spline(self.grid, values)
            slope_y, slope_x = spline_slopes(spline, gy, gx)
            out.append(spline.ev(gy, gx) - slope_y * off_y - slope_x * off_x)
        return out[0], out[1]

    def dense_half(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """Half the predictor at the pixels of ``rows`` x ``cols``, ``(len(rows), len(cols))``
        float64 each (the symmetric shift)."""
        return (
            interpolate_grid(self.grid, 0.5 * self.dx, rows, cols),
            interpolate_grid(self.grid, 0.5 * self.dy, rows, cols),
        )

    def change_across(self, grid: Grid) -> np.ndarray:
        """Largest change of the predictor from the centre of each window of ``grid`` to its
        corners and edge midpoints, px, ``(M, N)``."""
        half = (grid.window - 1) / 2.0
        steps = np.array([-half, 0.0, half])
        ys = (grid.y_px[:, None] + steps).ravel()
        xs = (grid.x_px[:, None] + steps).ravel()
        change = np.zeros((grid.rows, grid.cols))
        for values in (self.dx, self.dy):
            v = interpolate_grid(self.grid, values, ys, xs).reshape(grid.rows, 3, grid.cols, 3)
            np.maximum(change, np.abs(v - v[:, 1:2, :, 1:2]).max(axis=(1, 3)), out=change)
        return change


def make_predictor(grid: Grid, dx, dy, outliers, masked) -> Predictor:
    """Next predictor: outliers replaced, masked and empty cells filled from neighbours, then
    smoothed lightly to steady the iteration (Scarano 2002). Smoothing the whole field did
    better on a resolved vortex than smoothing only the correction to the previous predictor.
    The smoothing weighs only unmasked cells, so values filled into a mask do not leak into
    the measured vectors beside it."""
    fx, fy = replace_outliers(dx, dy, outliers | ~np.isfinite(dx), masked)
    fx, fy = replace_outliers(fx, fy, ~np.isfinite(fx), None, relax=False)
    weight = (~masked).astype(np.float64)
    return Predictor(grid, _smooth(np.nan_to_num(fx), weight), _smooth(np.nan_to_num(fy), weight))


def _smooth(values: np.ndarray, weight: np.ndarray) -> np.ndarray:
    """Gaussian smoothing normalised by the smoothed ``weight`` (normalised convolution);
    cells with no weight nearby get the plain smoothed value."""
    if PREDICTOR_SMOOTHING <= 0:
        return values

    def blur(v):
        return ndimage.gaussian_filter(v, PREDICTOR_SMOOTHING, mode="nearest", truncate=2.0)

    norm = blur(weight)
    plain = blur(values)
    ok = norm > 1e-3
    return np.where(ok, blur(values * weight) / np.where(ok, norm, 1.0), plain)
