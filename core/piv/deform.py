"""Symmetric window deformation of the frame pair by half the predictor (Scarano 2002):
pixel by pixel where the predictor changes across a window, block by block elsewhere.
"""

from __future__ import annotations

import itertools
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy import ndimage

from core.compiled import compiled
from core.piv.grid import Grid, interpolate_grid
from core.piv.predictor import Predictor
from core.resample import cubic_spline_at


@dataclass
class Frames:
    """The pair, its masks, the worker threads and (once computed) the frames' cubic B-spline
    coefficients."""

    a: np.ndarray
    b: np.ndarray
    mask_a: np.ndarray | None
    mask_b: np.ndarray | None
    workers: int
    power: float  # geometric mean of the frames' mean squares, counts^2
    pool: ThreadPoolExecutor | None = None
    spline: list | None = None  # cubic B-spline coefficients of a and b, once computed

    def run(self, fn, items) -> list:
        """``[fn(item) for item in items]`` on the worker threads (the heavy numpy and
        ndimage calls used here release the interpreter lock)."""
        if self.workers <= 1:
            return [fn(item) for item in items]
        if self.pool is None:
            self.pool = ThreadPoolExecutor(self.workers)
        return list(self.pool.map(fn, items))

    def close(self) -> None:
        if self.pool is not None:
            self.pool.shutdown()
            self.pool = None

    def coefficients(self) -> list[np.ndarray]:
        """Cubic B-spline coefficients of both frames (mirror boundary), computed once."""
        if self.spline is None:
            self.spline = self.run(
                lambda f: ndimage.spline_filter(f, order=3, output=np.float32, mode="mirror"),
                (self.a, self.b),
            )
        return self.spline

    def _region_shifts(self, predictor: Predictor, regions) -> list:
        """Half the predictor over each region's box: one interpolation over the box around
        all regions (per component, on the worker threads), sliced."""
        if not regions:
            return []
        whole = _Box(min(b.r0 for b, _ in regions), max(b.r1 for b, _ in regions),
                     min(b.c0 for b, _ in regions), max(b.c1 for b, _ in regions))
        half_x, half_y = self.run(
            lambda v: interpolate_grid(predictor.grid, 0.5 * v, whole.row_px, whole.col_px),
            (predictor.dx, predictor.dy),
        )
        cuts = [(slice(b.r0 - whole.r0, b.r1 - whole.r0), slice(b.c0 - whole.c0, b.c1 - whole.c0))
                for b, _ in regions]
        return [(half_x[cut], half_y[cut]) for cut in cuts]

    def deformed(self, predictor: Predictor, grid: Grid, min_change_px: float):
        """Both frames deformed symmetrically by half the predictor over the windows of
        ``grid``, and the mask of pixels excluded in the deformed pair: ``(a, b, mask)``.

        Windows over which the predictor changes by more than ``min_change_px`` (centre to
        corner) are resampled pixel by pixel, in regions (:func:`_deformation_regions`); the
        other blocks are moved as a whole by half the predictor at their centre
        (:class:`_Tiles`), which gives nearly the same windows (the same for a uniform
        predictor) at a fraction of the cost. Pixels outside every window are left 0.
        """
        shape = self.a.shape
        if min_change_px > 0 and grid.window % grid.step == 0:
            exact = predictor.change_across(grid) > min_change_px
        else:  # every pixel asked for, or windows not made of whole blocks
            exact = np.ones((grid.rows, grid.cols), bool)
        regions = _deformation_regions(grid, exact, shape) if exact.any() else []
        tiles = None if exact.all() else _tiles_for(grid, predictor, exact)
        out = [np.zeros(shape, np.float32), np.zeros(shape, np.float32)]
        halves = self._region_shifts(predictor, regions)
        shifts = halves + ([] if tiles is None else [(tiles.half_x, tiles.half_y)])
        pad = math.ceil(max(_largest_shift(hx, hy) for hx, hy in shifts)) + 2
        coeff = self.run(lambda c: np.pad(c, pad, mode="reflect"), self.coefficients())
        signs = (-1.0, 1.0)
        jobs = [("region", k, i) for k in range(len(regions)) for i in (0, 1)]
        if tiles is not None:
            jobs += [("tiles", rows, i) for rows in tiles.row_chunks() for i in (0, 1)]

        def warp(job):
            kind, k, i = job
            if kind == "region":
                _warp_region(coeff[i], pad, out[i], *regions[k], *halves[k], signs[i])
            else:
                _shift_tiles(coeff[i], pad, out[i], tiles, signs[i], k)

        self.run(warp, jobs)
        # after deformation a pixel shows the same fluid in both frames: a pixel excluded in
        # one frame leaves its partner unpaired in the other, so both exclude the union
        excluded = np.zeros(shape, bool)
        masks = (self.mask_a, self.mask_b)
        mask_boxes = [None if m is None else _Box.around(m) for m in masks]
        for (box, pick), (half_x, half_y) in zip(regions, halves, strict=True):
            for sign, mask, mask_box in zip(signs, masks, mask_boxes, strict=True):
                _mark_warped_mask(excluded, mask, mask_box, box, pick, half_x, half_y, sign)
                _mark_outside_frame(excluded, box, pick, half_x, half_y, sign)
        if tiles is not None:
            for sign, mask in zip(signs, masks, strict=True):
                tiles.mark_excluded(excluded, mask, sign)
        return out[0], out[1], excluded if excluded.any() else None


@dataclass(frozen=True)
class _Tiles:
    """Blocks of one grid step, each moved as a whole by half the predictor at its centre.

    Where the predictor changes by less than the deformation threshold across a window, a
    pixel-by-pixel deformation differs from moving each block by its centre value by less
    than half that threshold, and a window made of whole blocks (window a multiple of the
    step) still sees its centre value on average for a linear predictor. A constant shift
    of a cubic B-spline is separable: four taps along each axis instead of sixteen per pixel
    (written here because ``ndimage`` has no batched per-block shift).
    """

    step: int
    use: np.ndarray  # (nr, nc) bool: blocks moved as a whole
    half_x: np.ndarray  # (nr, nc) half the predictor at the block centres, px
    half_y: np.ndarray

    def row_chunks(self, rows_per_chunk: int = 16) -> list[slice]:
        count = self.use.shape[0]
        return [slice(r, min(r + rows_per_chunk, count)) for r in range(0, count, rows_per_chunk)]

    def blocks_of(self, image: np.ndarray) -> np.ndarray:
        """``(nr, step, nc, step)`` view of the part of ``image`` the blocks cover."""
        nr, nc = self.use.shape
        s = self.step
        return image[: nr * s, : nc * s].reshape(nr, s, nc, s)

    def mark_excluded(self, out: np.ndarray, mask: np.ndarray | None, sign: float) -> None:
        """Mark in ``out`` the pixels of moved blocks that come from beyond the image or from
        ``mask`` (nearest pixel: a block moved by ``s`` takes the mask moved by ``rint(s)``)."""
        nr, nc = self.use.shape
        s = self.step
        height, width = out.shape
        view = self.blocks_of(out)
        inside = np.arange(s)
        # only blocks within the largest shift of the image's edge can reach beyond it
        reach = _largest_shift(self.half_x, self.half_y) + 1.0
        top = s * np.arange(nr)
        left = s * np.arange(nc)
        for r, c in (
            (np.flatnonzero((top < reach) | (top + s > height - reach)), np.arange(nc)),
            (np.arange(nr), np.flatnonzero((left < reach) | (left + s > width - reach))),
        ):
            if r.size == 0 or c.size == 0:
                continue
            cells = np.ix_(r, c)
            shift_y = sign * self.half_y[cells][:, None, :, None]
            shift_x = sign * self.half_x[cells][:, None, :, None]
            ys = (top[r, None] + inside)[:, :, None, None] + shift_y
            xs = (left[c, None] + inside)[None, None, :, :] + shift_x
            beyond = (ys < -0.5) | (ys > height - 0.5) | (xs < -0.5) | (xs > width - 0.5)
            view[np.ix_(r, inside, c, inside)] |= beyond & self.use[cells][:, None, :, None]
        if mask is None:
            return
        ry = np.rint(sign * self.half_y).astype(np.intp)
        rx = np.rint(sign * self.half_x).astype(np.intp)
        pad = int(max(np.abs(ry).max(), np.abs(rx).max()))
        near = _Box.around(mask).grown(pad + s, mask.shape)
        rows = (s * np.arange(nr) < near.r1) & (s * np.arange(nr) + s > near.r0)
        cols = (s * np.arange(nc) < near.c1) & (s * np.arange(nc) + s > near.c0)
        r, c = np.nonzero(self.use & rows[:, None] & cols[None, :])
        if r.size == 0:
            return
        padded = np.pad(mask, pad, mode="edge")
        moved = sliding_window_view(padded, (s, s))[s * r + ry[r, c] + pad, s * c + rx[r, c] + pad]
        view[r, :, c, :] |= moved


def _tiles_for(grid: Grid, predictor: Predictor, exact: np.ndarray) -> _Tiles:
    """Blocks of the windows of ``grid`` (window a multiple of the step) to move as a whole:
    all blocks not covered by a window marked ``exact`` (``(M, N)`` bool)."""
    k = grid.window // grid.step
    s = grid.step
    nr, nc = grid.rows + k - 1, grid.cols + k - 1
    covered = np.zeros((nr, nc), bool)
    for dr, dc in itertools.product(range(k), range(k)):
        covered[dr : dr + grid.rows, dc : dc + grid.cols] |= exact
    centre_y = s * np.arange(nr) + (s - 1) / 2.0
    centre_x = s * np.arange(nc) + (s - 1) / 2.0
    half_x, half_y = predictor.dense_half(centre_y, centre_x)
    return _Tiles(s, ~covered, half_x, half_y)


def _bspline_weights(t: np.ndarray) -> list[np.ndarray]:
    """Cubic B-spline weights of the samples at offsets -1, 0, 1, 2 for a point ``t`` in
    [0, 1) past the sample at 0 (Unser 1999, memory), each ``(K, 1, 1)`` float32."""
    u = 1.0 - t
    weights = (u**3 / 6.0, (4.0 - 6.0 * t**2 + 3.0 * t**3) / 6.0,
               (4.0 - 6.0 * u**2 + 3.0 * u**3) / 6.0, t**3 / 6.0)
    return [w.astype(np.float32)[:, None, None] for w in weights]


def _shift_tiles(padded, pad: int, out, tiles: _Tiles, sign: float, rows: slice) -> None:
    """Blocks of block-rows ``rows`` that ``tiles.use``: the cubic spline with coefficients
    ``padded`` (by ``pad`` px) sampled at ``x + sign * h`` with ``h`` the block's shift, by a
    separable 4-tap filter along x, then y, written into ``out``."""
    r, c = np.nonzero(tiles.use[rows])
    if r.size == 0:
        return
    r += rows.start
    s = tiles.step
    shift_y, shift_x = sign * tiles.half_y[r, c], sign * tiles.half_x[r, c]
    whole_y, whole_x = np.floor(shift_y), np.floor(shift_x)
    first_r = s * r + whole_y.astype(np.intp) - 1 + pad
    first_c = s * c + whole_x.astype(np.intp) - 1 + pad
    block = sliding_window_view(padded, (s + 3, s + 3))[first_r, first_c]  # (K, s+3, s+3)
    wx, wy = _bspline_weights(shift_x - whole_x), _bspline_weights(shift_y - whole_y)
    along_x = wx[0] * block[:, :, 0:s]
    for tap in range(1, 4):
        along_x += wx[tap] * block[:, :, tap : tap + s]
    moved = wy[0] * along_x[:, 0:s, :]
    for tap in range(1, 4):
        moved += wy[tap] * along_x[:, tap : tap + s, :]
    tiles.blocks_of(out)[r, :, c, :] = moved


#: Rows of a region resampled in one job.
STRIP_ROWS = 64


def _deformation_regions(grid: Grid, cells: np.ndarray, shape) -> list[tuple[_Box, np.ndarray]]:
    """The pixels of the windows at ``cells`` (``(M, N)`` bool) in separate regions, one per
    8-connected group of cells: ``(box, pick)`` with ``pick`` the box's pixels to resample
    (each pixel in one region only). Resampling by group keeps the work near the windows
    that need it when they are scattered."""
    labels, _ = ndimage.label(cells, structure=np.ones((3, 3), bool))
    taken = np.zeros(shape, bool)
    step, d = grid.step, grid.window
    regions = []
    for number, (rs, cs) in enumerate(ndimage.find_objects(labels), start=1):
        box = _Box(rs.start * step, (rs.stop - 1) * step + d, cs.start * step,
                   (cs.stop - 1) * step + d)
        r, c = np.nonzero(labels[rs, cs] == number)
        pick = _covered(step * r, step * c, d, (box.r1 - box.r0, box.c1 - box.c0))
        pick &= ~taken[box.slices]
        taken[box.slices] |= pick
        # strips of rows: a job each, so a large region uses every worker and little memory
        for top in range(box.r0, box.r1, STRIP_ROWS):
            strip = _Box(top, min(top + STRIP_ROWS, box.r1), box.c0, box.c1)
            part = pick[top - box.r0 : strip.r1 - box.r0]
            if part.any():
                regions.append((strip, part))
    return regions


def _covered(rows, cols, size: int, shape) -> np.ndarray:
    """Pixels covered by the ``size`` x ``size`` squares starting at ``(rows, cols)``,
    ``shape`` bool (a summed-area table of the squares' corners)."""
    corners = np.zeros((shape[0] + 1, shape[1] + 1), np.int32)
    for dr, dc, sign in ((0, 0, 1), (size, 0, -1), (0, size, -1), (size, size, 1)):
        np.add.at(corners, (rows + dr, cols + dc), sign)
    return np.cumsum(np.cumsum(corners, axis=0), axis=1)[:-1, :-1] > 0


def _warp_region(padded, pad: int, out, box: _Box, pick, half_x, half_y, sign) -> None:
    """The picked pixels of ``box`` in ``out``: the cubic spline with coefficients ``padded``
    (by ``pad`` px) sampled at ``x + sign * h(x)``, the numbers of scipy's
    ``map_coordinates`` (order 3, no prefilter), which stands in should a point's taps reach
    beyond the padding."""
    target = out[box.slices]
    if _warped_samples(padded, box.r0 + pad, box.c0 + pad, half_x, half_y, sign, pick, target):
        return
    y = np.arange(box.r0 + pad, box.r1 + pad, dtype=np.float64)
    x = np.arange(box.c0 + pad, box.c1 + pad, dtype=np.float64)
    r, c = np.nonzero(pick)
    coords = np.stack([y[r] + sign * half_y[r, c], x[c] + sign * half_x[r, c]])
    target[r, c] = ndimage.map_coordinates(padded, coords, order=3, prefilter=False,
                                           output=np.float32)


# Compiled (numba) rather than map_coordinates on coordinate arrays: working the coordinates
# out with numpy cost as much as the sampling, and a large shot's fine correlation resamples
# a million pixels or more per frame and pass.
@compiled
def _warped_samples(padded, row0, col0, half_x, half_y, sign, pick, out) -> bool:
    """``out[i, j] = spline(row0 + i + sign * half_y[i, j], col0 + j + sign * half_x[i, j])``
    where ``pick``, or False (nothing written) when a point's taps reach beyond ``padded``."""
    rows, cols = pick.shape
    for i in range(rows):
        for j in range(cols):
            if pick[i, j]:
                r = (row0 + i) + sign * half_y[i, j]
                c = (col0 + j) + sign * half_x[i, j]
                if not (1.0 <= r <= padded.shape[0] - 3.0 and 1.0 <= c <= padded.shape[1] - 3.0):
                    return False
    for i in range(rows):
        for j in range(cols):
            if pick[i, j]:
                r = (row0 + i) + sign * half_y[i, j]
                c = (col0 + j) + sign * half_x[i, j]
                out[i, j] = cubic_spline_at(padded, r, c)
    return True


@dataclass(frozen=True)
class _Box:
    """Pixels ``[r0, r1) x [c0, c1)`` of a frame."""

    r0: int
    r1: int
    c0: int
    c1: int

    @classmethod
    def around(cls, pick: np.ndarray) -> _Box:
        rows = np.flatnonzero(pick.any(axis=1))
        cols = np.flatnonzero(pick.any(axis=0))
        return cls(int(rows[0]), int(rows[-1]) + 1, int(cols[0]), int(cols[-1]) + 1)

    def grown(self, margin: int, shape) -> _Box:
        return _Box(
            max(self.r0 - margin, 0), min(self.r1 + margin, shape[0]),
            max(self.c0 - margin, 0), min(self.c1 + margin, shape[1]),
        )

    @property
    def slices(self) -> tuple[slice, slice]:
        return slice(self.r0, self.r1), slice(self.c0, self.c1)

    @property
    def row_px(self) -> np.ndarray:
        return np.arange(self.r0, self.r1)

    @property
    def col_px(self) -> np.ndarray:
        return np.arange(self.c0, self.c1)


def _mark_outside_frame(out, box: _Box, pick, half_x, half_y, sign) -> None:
    """Mark in ``out`` the ``pick``ed pixels of ``box`` in a deformed frame sampled from beyond
    the image (mirrored, not recorded): they take no part in the correlation. Only bands along
    the image edges as wide as the largest shift can be hit."""
    height, width = out.shape
    reach = math.ceil(_largest_shift(half_x, half_y) + 0.5)
    for lo, hi in ((0, reach), (height - reach, height)):
        lo, hi = max(lo, box.r0), min(hi, box.r1)
        if lo < hi:
            rows = slice(lo - box.r0, hi - box.r0)
            y = np.arange(lo, hi)[:, None] + sign * half_y[rows]
            out[lo:hi, box.c0 : box.c1] |= ((y < -0.5) | (y > height - 0.5)) & pick[rows]
    for lo, hi in ((0, reach), (width - reach, width)):
        lo, hi = max(lo, box.c0), min(hi, box.c1)
        if lo < hi:
            cols = slice(lo - box.c0, hi - box.c0)
            x = np.arange(lo, hi)[None, :] + sign * half_x[:, cols]
            out[box.r0 : box.r1, lo:hi] |= ((x < -0.5) | (x > width - 0.5)) & pick[:, cols]


def _largest_shift(half_x: np.ndarray, half_y: np.ndarray) -> float:
    """Largest |component| of the shift (px); max and min need no temporary array as abs does."""
    return max(float(half_x.max()), -float(half_x.min()), float(half_y.max()), -float(half_y.min()))


def _mark_warped_mask(out, mask, mask_box, box: _Box, pick, half_x, half_y, sign) -> None:
    """Mark in ``out`` the ``pick``ed pixels of ``box`` masked after nearest-pixel deformation
    of ``mask``: ``mask(x + sign * h(x))``, the edge pixel repeated beyond the image. Only the
    mask's bounding box ``mask_box``, grown by the largest shift, can come out masked."""
    if mask is None:
        return
    reach = math.ceil(_largest_shift(half_x, half_y)) + 1
    area = mask_box.grown(reach, mask.shape)
    r0, r1 = max(area.r0, box.r0), min(area.r1, box.r1)
    c0, c1 = max(area.c0, box.c0), min(area.c1, box.c1)
    if r0 >= r1 or c0 >= c1:
        return
    inner = (slice(r0 - box.r0, r1 - box.r0), slice(c0 - box.c0, c1 - box.c0))
    height, width = mask.shape
    r = np.rint(np.arange(r0, r1)[:, None] + sign * half_y[inner]).astype(np.intp)
    c = np.rint(np.arange(c0, c1)[None, :] + sign * half_x[inner]).astype(np.intp)
    np.clip(r, 0, height - 1, out=r)
    np.clip(c, 0, width - 1, out=c)
    out[r0:r1, c0:c1] |= mask[r, c] & pick[inner]
