"""Interrogation-window grids of one pass and spline interpolation of values on them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy.interpolate import RectBivariateSpline, make_interp_spline

from core.settings import PivPass

# --- grid ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Grid:
    """Window layout of one pass: window ``(i, j)`` starts at pixel ``(i, j) * step``."""

    window: int
    step: int
    rows: int
    cols: int

    @property
    def x_px(self) -> np.ndarray:
        return (self.window - 1) / 2.0 + self.step * np.arange(self.cols)

    @property
    def y_px(self) -> np.ndarray:
        return (self.window - 1) / 2.0 + self.step * np.arange(self.rows)


def grid_for(shape: tuple[int, int], p: PivPass) -> Grid:
    height, width = shape
    step = p.spacing_px
    return Grid(
        p.window_px, step, (height - p.window_px) // step + 1, (width - p.window_px) // step + 1
    )


def window_view(image: np.ndarray, grid: Grid) -> np.ndarray:
    """``(M, N, D, D)`` strided view of the windows of ``image`` on ``grid`` (no copy)."""
    view = sliding_window_view(image, (grid.window, grid.window))
    return view[: grid.step * grid.rows : grid.step, : grid.step * grid.cols : grid.step]


def centroid_offsets(mask: np.ndarray | None, grid: Grid, counts: np.ndarray | None):
    """Offset (px) of the centroid of each window's unmasked pixels from its centre, ``(M, N)``
    each; zero for windows with no masked pixel or no unmasked one. ``counts``: the masked
    pixels per window (:func:`masked_counts`)."""
    shape = (grid.rows, grid.cols)
    off_x, off_y = np.zeros(shape), np.zeros(shape)
    if mask is None:
        return off_x, off_y
    d = grid.window
    count = counts.reshape(shape)
    partial = (count > 0) & (count < d * d)
    if not np.any(partial):
        return off_x, off_y
    rows, cols = np.nonzero(partial)
    keep = ~window_view(mask, grid)[rows, cols]  # (K', D, D)
    n = keep.sum(axis=(1, 2))
    centre = np.arange(d) - (d - 1) / 2.0
    off_x[partial] = keep.sum(axis=1) @ centre / n
    off_y[partial] = keep.sum(axis=2) @ centre / n
    return off_x, off_y


def masked_counts(mask: np.ndarray, grid: Grid) -> np.ndarray:
    """Number of masked pixels in every window of ``grid``, ``(K,)``.

    The image is cut into blocks of one grid step; when the window is a whole number of
    steps (any 0, 50 or 75 % overlap of a power-of-two window) a window sum is a sum of
    blocks, otherwise it comes from an integral image.
    """
    d, step = grid.window, grid.step
    if d % step == 0:
        k = d // step
        nr, nc = grid.rows + k - 1, grid.cols + k - 1
        cells = mask[: nr * step, : nc * step].reshape(nr, step, nc, step).sum(axis=(1, 3))
        starts_r, starts_c, size = np.arange(grid.rows), np.arange(grid.cols), k
    else:
        cells = mask
        starts_r, starts_c, size = step * np.arange(grid.rows), step * np.arange(grid.cols), d
    total = np.zeros((cells.shape[0] + 1, cells.shape[1] + 1), np.int64)
    np.cumsum(np.cumsum(cells, axis=0, dtype=np.int64), axis=1, out=total[1:, 1:])
    r0, c0 = starts_r[:, None], starts_c[None, :]
    box = total[r0 + size, c0 + size] - total[r0, c0 + size] - total[r0 + size, c0] + total[r0, c0]
    return box.ravel()


def _spline_1d(coords: np.ndarray, values: np.ndarray, axis: int, query: np.ndarray):
    """Interpolating cubic spline along ``axis`` (lower degree for few points), continued
    along its end slopes beyond the end points: a border window's outer half then follows the
    flow's gradient instead of a constant."""
    n = coords.size
    if n == 1:
        return np.repeat(values, query.size, axis=axis)
    spline = make_interp_spline(coords, values, k=min(3, n - 1), axis=axis)
    out = spline(np.clip(query, coords[0], coords[-1]))
    lines = np.moveaxis(out, axis, 0)  # a view: writing to it writes to out
    slope = spline.derivative()
    below = np.flatnonzero(query < coords[0])
    above = np.flatnonzero(query > coords[-1])
    for beyond, end in ((below, coords[0]), (above, coords[-1])):
        if beyond.size:
            step = (query[beyond] - end).reshape((-1,) + (1,) * (out.ndim - 1))
            lines[beyond] += step * np.moveaxis(np.expand_dims(slope(end), axis), axis, 0)
    return out


def interpolate_grid(grid: Grid, values: np.ndarray, y_query, x_query) -> np.ndarray:
    """Tensor-product cubic spline interpolation of ``(M, N)`` grid values at rows ``y_query``
    and columns ``x_query``; returns ``(len(y_query), len(x_query))``."""
    by_rows = _spline_1d(grid.y_px, values, 0, np.asarray(y_query, dtype=np.float64))
    return _spline_1d(grid.x_px, by_rows, 1, np.asarray(x_query, dtype=np.float64))


def grid_spline(grid: Grid, values: np.ndarray) -> RectBivariateSpline:
    """Interpolating spline of grid values (cubic, lower degree for short axes)."""
    ky, kx = min(3, grid.rows - 1), min(3, grid.cols - 1)
    if ky == 0 or kx == 0:  # one row or column: repeat it to let the spline stand
        ys = grid.y_px if ky else np.array([grid.y_px[0] - 1.0, grid.y_px[0] + 1.0])
        xs = grid.x_px if kx else np.array([grid.x_px[0] - 1.0, grid.x_px[0] + 1.0])
        values = np.broadcast_to(values, (ys.size, xs.size))
        return RectBivariateSpline(ys, xs, values, kx=max(ky, 1), ky=max(kx, 1))
    return RectBivariateSpline(grid.y_px, grid.x_px, values, kx=ky, ky=kx)


def spline_slopes(spline: RectBivariateSpline, y, x) -> tuple[np.ndarray, np.ndarray]:
    """d/dy and d/dx of ``spline`` at points. FITPACK differentiates only below the degree, so
    a straight (degree 1) axis takes the slope between its end knots."""
    ty, tx = spline.get_knots()
    ky, kx = spline.degrees
    if ky >= 2:
        slope_y = spline.ev(y, x, dx=1)
    else:
        ends = [spline.ev(np.full_like(y, t), x) for t in (ty[0], ty[-1])]
        slope_y = (ends[1] - ends[0]) / (ty[-1] - ty[0])
    if kx >= 2:
        slope_x = spline.ev(y, x, dy=1)
    else:
        ends = [spline.ev(y, np.full_like(x, t)) for t in (tx[0], tx[-1])]
        slope_x = (ends[1] - ends[0]) / (tx[-1] - tx[0])
    return slope_y, slope_x
