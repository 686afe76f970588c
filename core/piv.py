"""Correlation engine: multi-pass FFT cross-correlation with symmetric window deformation.

Method (each step a published one, named where it is used):

1. The first pass correlates straight windows of the two frames. The windows of a pass go
   through batched real FFTs (``scipy.fft.rfft2``/``irfft2``) read straight from strided views
   of the frames, one batch per band of grid rows (up to ``BAND_WINDOWS`` windows), the bands
   on the worker threads: no loop over windows, bounded memory, and (measured) faster than one
   batch of the whole frame. The window mean is removed in the spectrum; the
   displacement is the correlation peak (Willert & Gharib 1991).
2. Between passes the vectors are checked with the normalised median test (Westerweel &
   Scarano 2005; vectors at an edge or beside a mask against straight-line extrapolations from
   their side), outliers replaced, the field lightly smoothed (predictor). Later passes deform
   both frames symmetrically by half the predictor, ``A'(x) = A(x - d(x)/2)``,
   ``B'(x) = B(x + d(x)/2)``, with cubic B-spline interpolation, and correlate the deformed
   windows for the correction (Scarano 2002, predictor-corrector). Where the predictor
   changes by no more than ``deform_min_change_px`` across a window (most of a typical frame),
   each block of one grid step is moved as a whole by half the predictor at its centre (each
   frame its way): a constant
   shift of the spline is a separable 4-tap filter, several times cheaper than resampling
   pixel by pixel, and a window of whole blocks sees the same mean shift. Only the windows
   with real gradients are resampled pixel by pixel (``ndimage.map_coordinates``).
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
from dataclasses import dataclass

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
#: Change of the predictor across a window (px, centre to corner) up to which the blocks of
#: the window are moved as a whole instead of deformed pixel by pixel (see ``_Tiles``).
DEFORM_MIN_CHANGE_PX = 0.1

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
    #: windows whose predictor changes by at most this (px, centre to corner) are deformed
    #: block by block instead of pixel by pixel; 0: every pixel
    deform_min_change_px: float = DEFORM_MIN_CHANGE_PX
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
            "deform_min_change_px": self.deform_min_change_px,
            "workers": self.workers,
        }

    @classmethod
    def from_dict(cls, data: dict) -> PivSettings:
        known = {
            "passes", "median_threshold", "median_eps_px", "max_masked_fraction",
            "deform_min_change_px", "workers",
        }
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
    if not s.deform_min_change_px >= 0:
        raise WakelineError("PIV settings: the deformation threshold must be >= 0 px")
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


def _window_spectra(source, mask, counts, grid: _Grid, rows: slice):
    """Real FFT of the windows of grid rows ``rows`` with their mean removed and masked pixels
    at the window mean.

    The FFT reads the windows straight from the strided view (no window copies). Removing
    the mean is zeroing the zero-frequency term. With a mask, ``source`` has its masked
    pixels at 0; a window ``w = (a - m) keep`` then has spectrum ``F(a keep) - m F(keep)``,
    and only the partly masked windows need the second term. ``counts`` are the masked
    pixels per window of those rows.

    Returns
    -------
    spectra : (K, D, D//2 + 1) complex ndarray
    fraction : (K,) ndarray
        Masked fraction of each window.
    """
    d = grid.window
    view = _window_view(source, grid)[rows]
    count = view.shape[0] * view.shape[1]
    spec = scipy.fft.rfft2(view).reshape(count, d, d // 2 + 1)
    if mask is None:
        spec[:, 0, 0] = 0
        return spec, np.zeros(count)
    kept = d * d - counts
    partial = (kept > 0) & (kept < d * d)
    spec[~partial, 0, 0] = 0
    if np.any(partial):
        index = np.divmod(np.flatnonzero(partial), grid.cols)
        mean = view[index].sum(axis=(1, 2), dtype=np.float64) / kept[partial]
        keep_windows = ~_window_view(mask, grid)[rows][index]
        keep_spec = scipy.fft.rfft2(keep_windows.astype(np.float32))
        spec[partial] -= mean[:, None, None].astype(np.float32) * keep_spec
    return spec, 1.0 - kept / float(d * d)


#: Largest number of windows in a band of grid rows correlated together on one thread: it
#: bounds the memory of a pass, and batches of this size ran faster here than one batch of a
#: whole 2048 x 2048 frame.
BAND_WINDOWS = 2048


def _correlate(pair, masks, counts, grid: _Grid, settings, frames, owned) -> _PassResult:
    """Circular cross-correlation ``c[s] = sum_x a[x] b[x + s]`` of every window pair and its
    peaks, in bands of grid rows on the worker threads (each band one batched FFT per frame).
    ``pair``, ``masks``, ``counts``: frames, masks and masked pixels per window of A and B;
    ``owned``: the frames are scratch arrays that may be overwritten."""
    sources = []
    for image, mask in zip(pair, masks, strict=True):
        if mask is not None:
            image = image if owned else image.copy()
            image[mask] = 0
        sources.append(image)
    # a flat window (no texture) gives a plane of round-off only
    floor = 1e-4 * grid.window**2 * frames.power
    # bands of at most BAND_WINDOWS windows, and at least one per worker
    per_band = max(1, min(BAND_WINDOWS // grid.cols, math.ceil(grid.rows / frames.workers)))
    bands = [slice(r, min(r + per_band, grid.rows)) for r in range(0, grid.rows, per_band)]

    def band_peaks(rows: slice):
        windows = slice(rows.start * grid.cols, rows.stop * grid.cols)
        spec, frac_a = _window_spectra(
            sources[0], masks[0], _band(counts[0], windows), grid, rows
        )
        spec_b, frac_b = _window_spectra(
            sources[1], masks[1], _band(counts[1], windows), grid, rows
        )
        np.conjugate(spec, out=spec)
        spec *= spec_b
        del spec_b
        planes = scipy.fft.irfft2(spec, s=(grid.window, grid.window), overwrite_x=True)
        del spec
        return (*_peaks(planes, floor), np.maximum(frac_a, frac_b))

    results = frames.run(band_peaks, bands)
    dx, dy, ratio, fraction = (np.concatenate(parts) for parts in zip(*results, strict=True))
    masked = fraction > settings.max_masked_fraction
    shape = (grid.rows, grid.cols)
    return _PassResult(
        dx.reshape(shape), dy.reshape(shape), ratio.reshape(shape), masked.reshape(shape)
    )


def _band(counts, windows: slice):
    return None if counts is None else counts[windows]


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

    def dense_half(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """Half the predictor at the pixels of ``rows`` x ``cols``, ``(len(rows), len(cols))``
        float64 each (the symmetric shift)."""
        return (
            _interpolate_grid(self.grid, 0.5 * self.dx, rows, cols),
            _interpolate_grid(self.grid, 0.5 * self.dy, rows, cols),
        )

    def change_across(self, grid: _Grid) -> np.ndarray:
        """Largest change of the predictor from the centre of each window of ``grid`` to its
        corners and edge midpoints, px, ``(M, N)``."""
        half = (grid.window - 1) / 2.0
        steps = np.array([-half, 0.0, half])
        ys = (grid.y_px[:, None] + steps).ravel()
        xs = (grid.x_px[:, None] + steps).ravel()
        change = np.zeros((grid.rows, grid.cols))
        for values in (self.dx, self.dy):
            v = _interpolate_grid(self.grid, values, ys, xs).reshape(grid.rows, 3, grid.cols, 3)
            np.maximum(change, np.abs(v - v[:, 1:2, :, 1:2]).max(axis=(1, 3)), out=change)
        return change


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

    def _region_shifts(self, predictor: _Predictor, regions) -> list:
        """Half the predictor over each region's box: one interpolation over the box around
        all regions (per component, on the worker threads), sliced."""
        if not regions:
            return []
        whole = _Box(min(b.r0 for b, _ in regions), max(b.r1 for b, _ in regions),
                     min(b.c0 for b, _ in regions), max(b.c1 for b, _ in regions))
        half_x, half_y = self.run(
            lambda v: _interpolate_grid(predictor.grid, 0.5 * v, whole.row_px, whole.col_px),
            (predictor.dx, predictor.dy),
        )
        cuts = [(slice(b.r0 - whole.r0, b.r1 - whole.r0), slice(b.c0 - whole.c0, b.c1 - whole.c0))
                for b, _ in regions]
        return [(half_x[cut], half_y[cut]) for cut in cuts]

    def deformed(self, predictor: _Predictor, grid: _Grid, min_change_px: float):
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


def _tiles_for(grid: _Grid, predictor: _Predictor, exact: np.ndarray) -> _Tiles:
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


def _deformation_regions(grid: _Grid, cells: np.ndarray, shape) -> list[tuple[_Box, np.ndarray]]:
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
    (by ``pad`` px) sampled at ``x + sign * h(x)`` (``ndimage.map_coordinates``)."""
    y = np.arange(box.r0 + pad, box.r1 + pad, dtype=np.float64)
    x = np.arange(box.c0 + pad, box.c1 + pad, dtype=np.float64)
    target = out[box.slices]
    if pick.all():
        coords = np.empty((2,) + pick.shape)
        np.add(y[:, None], sign * half_y, out=coords[0])
        np.add(x[None, :], sign * half_x, out=coords[1])
        values = target
    else:
        r, c = np.nonzero(pick)
        coords = np.stack([y[r] + sign * half_y[r, c], x[c] + sign * half_x[r, c]])
        values = np.empty(r.size, np.float32)
    ndimage.map_coordinates(padded, coords, output=values, order=3, prefilter=False)
    if not pick.all():
        target[r, c] = values


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
        a, b, mask = frames.deformed(predictor, grid, settings.deform_min_change_px)
        pair, masks = (a, b), (mask, mask)
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
    # mean square (= mean^2 + variance); a float32 dot is plenty for a noise floor
    power = math.sqrt(float(np.vdot(a, a)) / a.size * float(np.vdot(b, b)) / b.size)
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
