"""Correlation engine: multi-pass FFT cross-correlation with symmetric window deformation.

Method (each step a published one, named where it is used):

1. The first pass correlates straight windows of the two frames. All windows of a pass go
   through one batched real FFT (``scipy.fft.rfft2``/``irfft2`` with ``workers``) read straight
   from strided views of the frames; the window mean is removed in the spectrum; the
   displacement is the correlation peak (Willert & Gharib 1991).
2. Between passes the vectors are checked with the normalised median test (Westerweel &
   Scarano 2005; vectors at an edge or beside a mask against straight-line extrapolations from
   their side), outliers replaced, the field lightly smoothed (predictor). Later passes deform
   both frames symmetrically by half the predictor, ``A'(x) = A(x - d(x)/2)``,
   ``B'(x) = B(x + d(x)/2)``, with cubic B-spline interpolation, and correlate the deformed
   windows for the correction (Scarano 2002, predictor-corrector).
3. The peak is refined by a three-point Gaussian fit per axis, after dividing the three samples
   by the overlap weight ``1 - |s|/D`` of a circular correlation of ``D``-wide windows (the
   bias of un-normalised FFT correlation, Westerweel 1997).

Masks: masked pixels are set to the window mean (they add nothing to the correlation). After
deformation a pixel excluded in either frame, or sampled from beyond the image, is excluded in
both. A partly masked window measures the flow at the centroid of its unmasked pixels; its
correction is added to the predictor carried from that centroid to the window centre.

Conventions: image coordinates (x = column right, y = row down, origin at the top-left pixel
centre); a window of ``D`` px starting at pixel ``j`` has its centre at ``j + (D - 1)/2``.

Known limit: cubic B-spline resampling of 2-3.5 px particle images shifts them slightly wrong
by an amount that depends on the fractional part of the half-displacement; on synthetic images
this leaves a periodic bias of up to about 0.015 px (zero at whole and half-pixel half-shifts).
Quintic resampling cuts it about threefold at twice the resampling cost.
"""

from __future__ import annotations

import itertools
import math
import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import scipy.fft
from numpy.lib.stride_tricks import sliding_window_view
from scipy import ndimage
from scipy.interpolate import RectBivariateSpline, make_interp_spline

from core import WakelineError
from core.results import VectorField
from core.validate import normalized_median_test, replace_outliers

#: Half-width (px) of the neighbourhood of the primary peak left out when finding the second.
SECOND_PEAK_EXCLUSION_PX = 3
#: Gaussian smoothing of the predictor between passes, in grid spacings.
PREDICTOR_SMOOTHING = 0.5

Progress = Callable[[int, int, str], object]


class Cancelled(Exception):
    """Raised by :func:`correlate_pair` when its progress callback asks to stop."""


@dataclass(frozen=True)
class PivPass:
    """One correlation pass: square windows of ``window_px`` with fractional ``overlap``."""

    window_px: int
    overlap: float = 0.5

    @property
    def spacing_px(self) -> int:
        """Distance between neighbouring window centres, px (at least 1)."""
        return max(1, round(self.window_px * (1.0 - self.overlap)))


@dataclass(frozen=True)
class PivSettings:
    """Settings of the correlation engine (JSON-able through ``to_dict``/``from_dict``)."""

    passes: tuple[PivPass, ...] = (PivPass(64, 0.5), PivPass(32, 0.5), PivPass(32, 0.5))
    median_threshold: float = 2.0
    median_eps_px: float = 0.1
    max_masked_fraction: float = 0.5
    workers: int | None = None  # None: all cores

    def __post_init__(self):
        passes = tuple(p if isinstance(p, PivPass) else PivPass(**dict(p)) for p in self.passes)
        object.__setattr__(self, "passes", passes)
        _check_settings(self)

    def to_dict(self) -> dict:
        return {
            "passes": [{"window_px": p.window_px, "overlap": p.overlap} for p in self.passes],
            "median_threshold": self.median_threshold,
            "median_eps_px": self.median_eps_px,
            "max_masked_fraction": self.max_masked_fraction,
            "workers": self.workers,
        }

    @classmethod
    def from_dict(cls, data: dict) -> PivSettings:
        known = {"passes", "median_threshold", "median_eps_px", "max_masked_fraction", "workers"}
        values = {k: v for k, v in dict(data).items() if k in known}
        if "passes" in values:
            values["passes"] = tuple(_pass_from(p) for p in values["passes"])
        return cls(**values)


def _pass_from(p) -> PivPass:
    if isinstance(p, PivPass):
        return p
    if isinstance(p, dict):
        return PivPass(int(p["window_px"]), float(p.get("overlap", 0.5)))
    window, overlap = p
    return PivPass(int(window), float(overlap))


def _check_settings(s: PivSettings) -> None:
    if not s.passes:
        raise WakelineError("PIV settings: at least one pass is needed")
    for p in s.passes:
        if int(p.window_px) != p.window_px or p.window_px < 8:
            raise WakelineError(f"PIV settings: window {p.window_px} px (use a whole number >= 8)")
        if not 0.0 <= p.overlap < 1.0:
            raise WakelineError(f"PIV settings: overlap {p.overlap} (use 0 <= overlap < 1)")
    if s.median_threshold <= 0 or s.median_eps_px < 0:
        raise WakelineError("PIV settings: median threshold must be > 0 and eps >= 0")
    if not 0.0 <= s.max_masked_fraction <= 1.0:
        raise WakelineError("PIV settings: max masked fraction must lie in 0..1")
    if s.workers is not None and s.workers < 1:
        raise WakelineError("PIV settings: workers must be at least 1")


# --- sub-pixel peak ---------------------------------------------------------------------------


def gaussian_peak_offset(r_minus, r0, r_plus) -> np.ndarray:
    """Three-point Gaussian peak offset from the middle sample, in samples.

    ``e = (ln R- - ln R+) / (2 ln R- - 4 ln R0 + 2 ln R+)`` (Willert & Gharib 1991), exact
    for a sampled Gaussian. Where a sample is not positive (logarithm undefined) the
    parabolic estimate is used; where that is degenerate too, 0.

    Parameters
    ----------
    r_minus, r0, r_plus : array_like, same shape
        Correlation values at the peak and its two neighbours along one axis.

    Returns
    -------
    ndarray of float64
    """
    rm, rc, rp = (np.asarray(v, dtype=np.float64) for v in (r_minus, r0, r_plus))
    positive = (rm > 0) & (rc > 0) & (rp > 0)
    lm, lc, lp = (np.log(np.where(positive, v, 1.0)) for v in (rm, rc, rp))
    denom = 2.0 * lm - 4.0 * lc + 2.0 * lp
    ok = positive & (denom < 0)
    gauss = (lm - lp) / np.where(ok, denom, 1.0)
    return np.where(ok, gauss, parabolic_peak_offset(rm, rc, rp))


def parabolic_peak_offset(r_minus, r0, r_plus) -> np.ndarray:
    """Three-point parabolic peak offset ``(R- - R+) / (2 R- - 4 R0 + 2 R+)``; 0 if degenerate."""
    rm, rc, rp = (np.asarray(v, dtype=np.float64) for v in (r_minus, r0, r_plus))
    denom = 2.0 * rm - 4.0 * rc + 2.0 * rp
    ok = denom < 0
    return np.where(ok, (rm - rp) / np.where(ok, denom, 1.0), 0.0)


# --- grid ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Grid:
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


def _grid_for(shape: tuple[int, int], p: PivPass) -> _Grid:
    height, width = shape
    step = p.spacing_px
    return _Grid(
        p.window_px, step, (height - p.window_px) // step + 1, (width - p.window_px) // step + 1
    )


def _window_view(image: np.ndarray, grid: _Grid) -> np.ndarray:
    """``(M, N, D, D)`` strided view of the windows of ``image`` on ``grid`` (no copy)."""
    view = sliding_window_view(image, (grid.window, grid.window))
    return view[: grid.step * grid.rows : grid.step, : grid.step * grid.cols : grid.step]


def _centroid_offsets(mask: np.ndarray | None, grid: _Grid, counts: np.ndarray | None):
    """Offset (px) of the centroid of each window's unmasked pixels from its centre, ``(M, N)``
    each; zero for windows with no masked pixel or no unmasked one. ``counts``: the masked
    pixels per window (:func:`_masked_counts`)."""
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
    keep = ~_window_view(mask, grid)[rows, cols]  # (K', D, D)
    n = keep.sum(axis=(1, 2))
    centre = np.arange(d) - (d - 1) / 2.0
    off_x[partial] = keep.sum(axis=1) @ centre / n
    off_y[partial] = keep.sum(axis=2) @ centre / n
    return off_x, off_y


def _masked_counts(mask: np.ndarray, grid: _Grid) -> np.ndarray:
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


# --- correlation of one pass ------------------------------------------------------------------


@dataclass
class _PassResult:
    dx: np.ndarray  # (M, N) residual displacement, px (NaN: no correlation)
    dy: np.ndarray
    peak_ratio: np.ndarray
    masked: np.ndarray  # (M, N) bool


def _window_spectra(image, mask, counts, grid: _Grid, workers: int, owned: bool):
    """Real FFT of every window with its mean removed and masked pixels at the window mean.

    The FFT reads the windows straight from the strided view (no window copies). Removing
    the mean is zeroing the zero-frequency term. With a mask, masked pixels are zeroed first;
    a window ``w = (a - m) keep`` then has spectrum ``F(a keep) - m F(keep)``, and only the
    partly masked windows need the second term. ``counts`` are the masked pixels per window;
    ``owned``: the image is a scratch array that may be overwritten.

    Returns
    -------
    spectra : (K, D, D//2 + 1) complex ndarray
    fraction : (K,) ndarray
        Masked fraction of each window.
    """
    d = grid.window
    count = grid.rows * grid.cols
    source = image
    if mask is not None:
        source = image if owned else image.copy()
        source[mask] = 0
    spec = scipy.fft.rfft2(_window_view(source, grid), workers=workers)
    spec = spec.reshape(count, d, d // 2 + 1)
    if mask is None:
        spec[:, 0, 0] = 0
        return spec, np.zeros(count)
    kept = d * d - counts
    partial = (kept > 0) & (kept < d * d)
    spec[~partial, 0, 0] = 0
    if np.any(partial):
        rows, cols = np.divmod(np.flatnonzero(partial), grid.cols)
        windows = _window_view(source, grid)[rows, cols]
        mean = windows.sum(axis=(1, 2), dtype=np.float64) / kept[partial]
        keep_windows = _window_view(~mask, grid)[rows, cols].astype(np.float32)
        keep_spec = scipy.fft.rfft2(keep_windows, workers=workers)
        spec[partial] -= mean[:, None, None].astype(np.float32) * keep_spec
    return spec, 1.0 - kept / float(d * d)


def _correlate(pair, masks, counts, grid: _Grid, settings, frames, owned) -> _PassResult:
    """Circular cross-correlation ``c[s] = sum_x a[x] b[x + s]`` of every window pair, batched,
    and its peaks. ``pair``, ``masks``, ``counts``: frames, masks and masked pixels per window
    of A and B."""
    workers = frames.workers
    spec, frac_a = _window_spectra(pair[0], masks[0], counts[0], grid, workers, owned)
    spec_b, frac_b = _window_spectra(pair[1], masks[1], counts[1], grid, workers, owned)
    np.conjugate(spec, out=spec)
    spec *= spec_b
    del spec_b
    planes = scipy.fft.irfft2(spec, s=(grid.window, grid.window), workers=workers, overwrite_x=True)
    del spec
    # a flat window (no texture) gives a plane of round-off only
    floor = 1e-4 * grid.window**2 * frames.power
    dx, dy, ratio = _peaks(planes, floor)
    masked = np.maximum(frac_a, frac_b) > settings.max_masked_fraction
    shape = (grid.rows, grid.cols)
    return _PassResult(
        dx.reshape(shape), dy.reshape(shape), ratio.reshape(shape), masked.reshape(shape)
    )


def _peaks(planes: np.ndarray, floor: float):
    """Sub-pixel peak of every plane: ``(dx (K,), dy (K,), primary/secondary peak ratio (K,))``;
    NaN where the primary peak does not exceed ``floor``."""
    k, size, _ = planes.shape
    flat = planes.reshape(k, size * size)
    index = np.argmax(flat, axis=1)
    row, col = np.divmod(index, size)
    kk = np.arange(k)
    primary = flat[kk, index]
    up, down = planes[kk, (row - 1) % size, col], planes[kk, (row + 1) % size, col]
    left, right = planes[kk, row, (col - 1) % size], planes[kk, row, (col + 1) % size]
    shift_y = (row + size // 2) % size - size // 2
    shift_x = (col + size // 2) % size - size // 2
    dy = shift_y + _unbiased_offset(up, primary, down, shift_y, size)
    dx = shift_x + _unbiased_offset(left, primary, right, shift_x, size)
    ratio = _peak_ratio(planes, row, col, primary)
    bad = ~(primary > floor)
    dx[bad] = np.nan
    dy[bad] = np.nan
    ratio[bad] = np.nan
    return dx, dy, ratio


def _unbiased_offset(r_minus, r0, r_plus, shift, size):
    """Gaussian offset after dividing each sample by its overlap weight ``1 - |s|/D``."""

    def weight(s):
        return np.maximum(1.0 - np.abs(s) / size, 1.0 / size)

    return gaussian_peak_offset(
        r_minus / weight(shift - 1), r0 / weight(shift), r_plus / weight(shift + 1)
    )


def _peak_ratio(planes, row, col, primary):
    """Primary over the highest value outside ``SECOND_PEAK_EXCLUSION_PX`` of the primary."""
    k, size, _ = planes.shape
    reach = min(SECOND_PEAK_EXCLUSION_PX, size // 4)
    offsets = np.arange(-reach, reach + 1)
    rr = (row[:, None] + offsets) % size
    cc = (col[:, None] + offsets) % size
    planes[np.arange(k)[:, None, None], rr[:, :, None], cc[:, None, :]] = -np.inf
    second = planes.reshape(k, -1).max(axis=1)
    floor = 1e-6 * np.abs(primary) + np.finfo(np.float32).tiny
    return primary / np.maximum(second, floor)


# --- predictor and deformation ------------------------------------------------------------------


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


def _interpolate_grid(grid: _Grid, values: np.ndarray, y_query, x_query) -> np.ndarray:
    """Tensor-product cubic spline interpolation of ``(M, N)`` grid values at rows ``y_query``
    and columns ``x_query``; returns ``(len(y_query), len(x_query))``."""
    by_rows = _spline_1d(grid.y_px, values, 0, np.asarray(y_query, dtype=np.float64))
    return _spline_1d(grid.x_px, by_rows, 1, np.asarray(x_query, dtype=np.float64))


def _grid_spline(grid: _Grid, values: np.ndarray) -> RectBivariateSpline:
    """Interpolating spline of grid values (cubic, lower degree for short axes)."""
    ky, kx = min(3, grid.rows - 1), min(3, grid.cols - 1)
    if ky == 0 or kx == 0:  # one row or column: repeat it to let the spline stand
        ys = grid.y_px if ky else np.array([grid.y_px[0] - 1.0, grid.y_px[0] + 1.0])
        xs = grid.x_px if kx else np.array([grid.x_px[0] - 1.0, grid.x_px[0] + 1.0])
        values = np.broadcast_to(values, (ys.size, xs.size))
        return RectBivariateSpline(ys, xs, values, kx=max(ky, 1), ky=max(kx, 1))
    return RectBivariateSpline(grid.y_px, grid.x_px, values, kx=ky, ky=kx)


def _spline_slopes(spline: RectBivariateSpline, y, x) -> tuple[np.ndarray, np.ndarray]:
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


@dataclass
class _Predictor:
    grid: _Grid
    dx: np.ndarray  # (M, N), finite everywhere
    dy: np.ndarray

    def at(self, grid: _Grid) -> tuple[np.ndarray, np.ndarray]:
        return (
            _interpolate_grid(self.grid, self.dx, grid.y_px, grid.x_px),
            _interpolate_grid(self.grid, self.dy, grid.y_px, grid.x_px),
        )

    def at_centroids(self, x_px, y_px, off_x, off_y) -> tuple[np.ndarray, np.ndarray]:
        """Predictor carried from window centroids ``(x + off_x, y + off_y)`` back to the
        centres ``(x, y)`` along its own gradient: ``p(g) - J(g) (g - c)``, each ``(K,)``."""
        gx = np.clip(x_px + off_x, self.grid.x_px[0], self.grid.x_px[-1])
        gy = np.clip(y_px + off_y, self.grid.y_px[0], self.grid.y_px[-1])
        out = []
        for values in (self.dx, self.dy):
            spline = _grid_spline(self.grid, values)
            slope_y, slope_x = _spline_slopes(spline, gy, gx)
            out.append(spline.ev(gy, gx) - slope_y * off_y - slope_x * off_x)
        return out[0], out[1]

    def dense_half(self, shape) -> tuple[np.ndarray, np.ndarray]:
        """Half the predictor at every pixel, ``(H, W)`` float64 each (the symmetric shift)."""
        rows, cols = np.arange(shape[0]), np.arange(shape[1])
        return (
            _interpolate_grid(self.grid, 0.5 * self.dx, rows, cols),
            _interpolate_grid(self.grid, 0.5 * self.dy, rows, cols),
        )


def _make_predictor(grid: _Grid, dx, dy, outliers, masked) -> _Predictor:
    """Next predictor: outliers replaced, masked and empty cells filled from neighbours, then
    smoothed lightly to steady the iteration (Scarano 2002). Smoothing the whole field did
    better on a resolved vortex than smoothing only the correction to the previous predictor.
    The smoothing weighs only unmasked cells, so values filled into a mask do not leak into
    the measured vectors beside it."""
    fx, fy = replace_outliers(dx, dy, outliers | ~np.isfinite(dx), masked)
    fx, fy = replace_outliers(fx, fy, ~np.isfinite(fx), None, relax=False)
    weight = (~masked).astype(np.float64)
    return _Predictor(grid, _smooth(np.nan_to_num(fx), weight), _smooth(np.nan_to_num(fy), weight))


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


@dataclass
class _Frames:
    """The pair, its spline coefficients (computed once), masks and the worker threads."""

    a: np.ndarray
    b: np.ndarray
    mask_a: np.ndarray | None
    mask_b: np.ndarray | None
    workers: int
    power: float  # geometric mean of the frames' mean squares, counts^2
    coeff: list = field(default_factory=list)
    pool: ThreadPoolExecutor | None = None

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

    def coefficients(self):
        if not self.coeff:
            self.coeff = self.run(
                lambda f: ndimage.spline_filter(f, order=3, output=np.float32, mode="mirror"),
                (self.a, self.b),
            )
        return self.coeff

    def deformed(self, predictor: _Predictor):
        """Both frames (and masks) deformed symmetrically by half the predictor."""
        half_x, half_y = predictor.dense_half(self.a.shape)
        ca, cb = self.coefficients()
        out_a = np.empty(self.a.shape, np.float32)
        out_b = np.empty(self.a.shape, np.float32)
        jobs = [
            (coeff, out, sign, rows)
            for rows in _row_chunks(self.a.shape[0], 2 * self.workers)
            for coeff, out, sign in ((ca, out_a, -1.0), (cb, out_b, 1.0))
        ]
        self.run(lambda job: _warp_rows(*job, half_x, half_y), jobs)
        masks = [
            _union(_warp_mask(mask, half_x, half_y, sign), _outside_frame(half_x, half_y, sign))
            for mask, sign in ((self.mask_a, -1.0), (self.mask_b, 1.0))
        ]
        # after deformation a pixel shows the same fluid in both frames: a pixel excluded in
        # one frame leaves its partner unpaired in the other, so both exclude the union
        both = _union(masks[0], masks[1])
        return out_a, out_b, both, both


def _warp_rows(coeff, out, sign, rows: slice, half_x, half_y) -> None:
    """Rows ``rows`` of the cubic spline with coefficients ``coeff`` sampled at
    ``(y + sign*hy, x + sign*hx)``, written into ``out``."""
    width = coeff.shape[1]
    coords = np.empty((2, rows.stop - rows.start, width))
    np.add(
        np.arange(rows.start, rows.stop, dtype=np.float64)[:, None],
        sign * half_y[rows],
        out=coords[0],
    )
    np.add(np.arange(width, dtype=np.float64), sign * half_x[rows], out=coords[1])
    ndimage.map_coordinates(
        coeff, coords, output=out[rows], order=3, mode="mirror", prefilter=False
    )


def _row_chunks(height: int, count: int) -> list[slice]:
    edges = np.linspace(0, height, min(count, height) + 1).astype(int)
    return [slice(int(a), int(b)) for a, b in itertools.pairwise(edges) if b > a]


def _union(a: np.ndarray | None, b: np.ndarray | None) -> np.ndarray | None:
    if a is None or b is None:
        return b if a is None else a
    return a | b


def _outside_frame(half_x, half_y, sign) -> np.ndarray | None:
    """Pixels of a deformed frame sampled from beyond the image (mirrored, not recorded),
    ``(H, W)`` bool, or None when there are none. They take no part in the correlation."""
    height, width = half_x.shape
    reach = math.ceil(max(float(np.abs(half_x).max()), float(np.abs(half_y).max())) + 0.5)
    if reach <= 0.5:
        return None
    out = np.zeros((height, width), bool)
    band = min(reach, height)
    for rows in (slice(0, band), slice(height - band, height)):
        y = np.arange(height)[rows, None] + sign * half_y[rows]
        out[rows] |= (y < -0.5) | (y > height - 0.5)
    band = min(reach, width)
    for cols in (slice(0, band), slice(width - band, width)):
        x = np.arange(width)[None, cols] + sign * half_x[:, cols]
        out[:, cols] |= (x < -0.5) | (x > width - 0.5)
    return out if out.any() else None


def _warp_mask(mask, half_x, half_y, sign):
    """Nearest-pixel deformation of a bool mask: ``mask(x + sign * h(x))``, the edge pixel
    repeated beyond the image. Only the mask's bounding box, grown by the largest shift, can
    come out masked, so only that part is computed."""
    if mask is None:
        return None
    rows = np.flatnonzero(mask.any(axis=1))
    cols = np.flatnonzero(mask.any(axis=0))
    out = np.zeros_like(mask)
    if rows.size == 0:
        return out
    reach = int(np.ceil(max(np.abs(half_x).max(), np.abs(half_y).max()))) + 1
    height, width = mask.shape
    r0, r1 = max(rows[0] - reach, 0), min(rows[-1] + reach + 1, height)
    c0, c1 = max(cols[0] - reach, 0), min(cols[-1] + reach + 1, width)
    box = (slice(r0, r1), slice(c0, c1))
    r = np.rint(np.arange(r0, r1)[:, None] + sign * half_y[box]).astype(np.intp)
    c = np.rint(np.arange(c0, c1)[None, :] + sign * half_x[box]).astype(np.intp)
    np.clip(r, 0, height - 1, out=r)
    np.clip(c, 0, width - 1, out=c)
    out[box] = mask[r, c]
    return out


# --- the engine -------------------------------------------------------------------------------


def correlate_pair(
    frame_a: np.ndarray,
    frame_b: np.ndarray,
    mask_a: np.ndarray | None = None,
    mask_b: np.ndarray | None = None,
    settings: PivSettings | None = None,
    progress: Progress | None = None,
) -> VectorField:
    """Displacement field of one frame pair by multi-pass FFT cross-correlation.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The two exposures, same shape, any real dtype (counts).
    mask_a, mask_b : (H, W) bool ndarray, optional
        True = pixel excluded (e.g. the ball, which moves between the frames).
    settings : PivSettings, optional
        Passes, validation and threading; default ``PivSettings()``.
    progress : callable, optional
        ``progress(done_passes, total_passes, message)``; returning True stops the work
        with :class:`Cancelled`.

    Returns
    -------
    VectorField
        On the last pass's grid. ``dx_px, dy_px`` A->B at each window centre; ``masked``
        windows (excluded fraction above ``max_masked_fraction``, counting in the deformed
        frames the pixels masked in either frame or sampled from beyond the image; or centre
        on a masked pixel of either frame) have NaN displacement and peak ratio; ``valid`` =
        measured and passed the normalised median test; ``replaced`` = rejected (or without a
        correlation peak) and replaced from neighbours. ``warnings`` holds the quarter-window
        rule and windows without a correlation peak.

    Raises
    ------
    core.WakelineError
        Frames of different shapes, not 2-D, not finite, or smaller than a window.
    Cancelled
        When ``progress`` returned True.
    """
    settings = settings or PivSettings()
    frames = _checked_frames(frame_a, frame_b, mask_a, mask_b, settings)
    try:
        return _all_passes(frames, settings, progress)
    finally:
        frames.close()


def _all_passes(frames: _Frames, settings: PivSettings, progress) -> VectorField:
    total = len(settings.passes)
    _report(progress, 0, total, "correlating")
    warnings: list[str] = []
    predictor: _Predictor | None = None
    for number, p in enumerate(settings.passes, start=1):
        grid = _grid_for(frames.a.shape, p)
        dx, dy, ratio, masked = _run_pass(frames, grid, predictor, settings)
        outliers = _outliers(dx, dy, masked, settings)
        if number == 1:
            warnings += _quarter_rule(dx, dy, outliers, masked, p.window_px)
        message = f"pass {number} of {total} done ({p.window_px} px windows)"
        if number == total:
            _report(progress, number, total, message, can_stop=False)
            return _field(grid, dx, dy, ratio, masked, outliers, warnings)
        predictor = _make_predictor(grid, dx, dy, outliers, masked)
        _report(progress, number, total, message)
    raise AssertionError("unreachable: the last pass returns")


def _run_pass(frames: _Frames, grid: _Grid, predictor: _Predictor | None, settings):
    """Correlate one pass; returns total displacement, peak ratio and masked cells."""
    if predictor is None:
        pair, masks = (frames.a, frames.b), (frames.mask_a, frames.mask_b)
    else:
        a, b, ma, mb = frames.deformed(predictor)
        pair, masks = (a, b), (ma, mb)
    counts = [_counts_or_none(masks[0], grid)]
    counts.append(counts[0] if masks[1] is masks[0] else _counts_or_none(masks[1], grid))
    res = _correlate(pair, masks, counts, grid, settings, frames, owned=predictor is not None)
    if predictor is None:
        px = py = 0.0
    else:
        px, py = _predictor_at_windows(predictor, grid, masks[0], counts[0])
    masked = res.masked | _centre_masked(frames, grid)
    dx = np.where(masked, np.nan, px + res.dx)
    dy = np.where(masked, np.nan, py + res.dy)
    ratio = np.where(masked, np.nan, res.peak_ratio)
    return dx, dy, ratio, masked


def _counts_or_none(mask, grid: _Grid):
    return None if mask is None else _masked_counts(mask, grid)


def _predictor_at_windows(predictor: _Predictor, grid: _Grid, mask, counts):
    """The predictor each window's correction is added to, ``(M, N)`` each.

    A partly masked window measures the flow at the centroid ``g`` of its unmasked pixels,
    not at its centre ``c``; there the correction is added to ``p(g) - J(g) (g - c)``, the
    predictor carried to the centre along its gradient (first order). Without this, vectors
    beside a mask keep the value of the coarse first pass and converge only slowly.
    """
    px, py = predictor.at(grid)
    off_x, off_y = _centroid_offsets(mask, grid, counts)
    shifted = (off_x != 0) | (off_y != 0)
    if np.any(shifted):
        x, y = np.meshgrid(grid.x_px, grid.y_px)
        px[shifted], py[shifted] = predictor.at_centroids(
            x[shifted], y[shifted], off_x[shifted], off_y[shifted]
        )
    return px, py


def _outliers(dx, dy, masked, settings: PivSettings) -> np.ndarray:
    """Normalised median test (Westerweel & Scarano 2005). Cells missing neighbours (image
    edge, mask) are tested against straight-line extrapolations from their side
    (``extrapolate_edges``): in a uniform gradient the plain test would reject whole edge
    rows, whose one-sided neighbours lie a gradient step away."""
    return normalized_median_test(
        dx,
        dy,
        settings.median_threshold,
        settings.median_eps_px,
        valid=~masked,
        extrapolate_edges=True,
    )


def _centre_masked(frames: _Frames, grid: _Grid) -> np.ndarray:
    """Windows whose centre lies on a masked pixel in either frame (the central 1 or 2x2 px)."""
    out = np.zeros((grid.rows, grid.cols), bool)
    lo = (grid.window - 1) // 2
    hi = grid.window // 2
    for mask in (frames.mask_a, frames.mask_b):
        if mask is None:
            continue
        for r0 in {lo, hi}:
            for c0 in {lo, hi}:
                out |= mask[
                    r0 : r0 + grid.step * grid.rows : grid.step,
                    c0 : c0 + grid.step * grid.cols : grid.step,
                ]
    return out


def _field(grid, dx, dy, ratio, masked, outliers, warnings) -> VectorField:
    measured = ~masked & np.isfinite(dx) & np.isfinite(dy)
    rejected = ~masked & (outliers | ~measured)
    fx, fy = replace_outliers(dx, dy, rejected, masked)
    replaced = rejected & np.isfinite(fx) & np.isfinite(fy)
    flat = np.count_nonzero(~masked & ~measured)
    if flat:
        warnings = [
            *warnings,
            f"{flat} of {masked.size} windows have no correlation peak (flat or blank image there)",
        ]
    x, y = np.meshgrid(grid.x_px, grid.y_px)
    return VectorField(
        x_px=x,
        y_px=y,
        dx_px=fx,
        dy_px=fy,
        valid=measured & ~outliers,
        replaced=replaced,
        masked=masked,
        peak_ratio=ratio,
        window_px=grid.window,
        spacing_px=float(grid.step),
        warnings=warnings,
    )


def _quarter_rule(dx, dy, outliers, masked, window_px) -> list[str]:
    """Warn when the first pass saw displacements beyond a quarter window (Keane & Adrian 1990)."""
    good = ~masked & ~outliers & np.isfinite(dx) & np.isfinite(dy)
    if not np.any(good):
        return []
    largest = float(np.max(np.hypot(dx[good], dy[good])))
    if largest <= window_px / 4.0:
        return []
    message = (
        f"largest first-pass displacement {largest:.1f} px exceeds a quarter of the "
        f"{window_px} px first window; use a larger first window or a shorter dt"
    )
    return [message]


def _report(progress, done: int, total: int, message: str, can_stop: bool = True) -> None:
    """Tell ``progress``; a True answer stops the work unless it is already done."""
    if progress is not None and progress(done, total, message) is True and can_stop:
        raise Cancelled(message)


def _checked_frames(frame_a, frame_b, mask_a, mask_b, settings: PivSettings) -> _Frames:
    a = np.asarray(frame_a)
    b = np.asarray(frame_b)
    if a.ndim != 2 or b.ndim != 2:
        raise WakelineError(f"frame pair: frames must be 2-D images, got {a.shape} and {b.shape}")
    if a.shape != b.shape:
        raise WakelineError(f"frame pair: frame shapes differ ({a.shape} and {b.shape})")
    largest = max(p.window_px for p in settings.passes)
    if min(a.shape) < largest:
        raise WakelineError(
            f"frame pair: image {a.shape[1]}x{a.shape[0]} px is smaller than the {largest} px window"
        )
    a = np.ascontiguousarray(a, dtype=np.float32)
    b = np.ascontiguousarray(b, dtype=np.float32)
    if not (np.isfinite(a).all() and np.isfinite(b).all()):
        raise WakelineError("frame pair: frames contain NaN or infinite values")
    masks = [_checked_mask(m, a.shape, name) for m, name in ((mask_a, "A"), (mask_b, "B"))]
    workers = settings.workers or os.cpu_count() or 1
    power = math.sqrt(
        float(np.mean(a, dtype=np.float64) ** 2 + np.var(a, dtype=np.float64))
        * float(np.mean(b, dtype=np.float64) ** 2 + np.var(b, dtype=np.float64))
    )
    return _Frames(a, b, masks[0], masks[1], workers, power)


def _checked_mask(mask, shape, name) -> np.ndarray | None:
    if mask is None:
        return None
    m = np.asarray(mask, dtype=bool)
    if m.shape != shape:
        raise WakelineError(f"frame pair: mask of frame {name} is {m.shape}, frames are {shape}")
    return m if m.any() else None


__all__ = [
    "Cancelled",
    "PivPass",
    "PivSettings",
    "correlate_pair",
    "gaussian_peak_offset",
    "parabolic_peak_offset",
]
