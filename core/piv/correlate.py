"""The correlation engine: every pass of a frame pair, from straight windows to deformed
ones, and the validated vector field of the last pass."""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.fft

from core import WakelineError
from core.piv.deform import Frames
from core.piv.grid import Grid, centroid_offsets, grid_for, masked_counts, window_view
from core.piv.peaks import correlation_peaks
from core.piv.predictor import Predictor, make_predictor
from core.piv.validate import normalized_median_test, replace_outliers
from core.results import VectorField
from core.settings import PivSettings

Progress = Callable[[int, int, str], object]


class Cancelled(Exception):
    """Raised by :func:`correlate_pair` when its progress callback asks to stop."""


# --- correlation of one pass ------------------------------------------------------------------


@dataclass
class _PassResult:
    dx: np.ndarray  # (M, N) residual displacement, px (NaN: no correlation)
    dy: np.ndarray
    peak_ratio: np.ndarray
    masked: np.ndarray  # (M, N) bool


def _window_spectra(source, mask, counts, grid: Grid, rows: slice):
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
    view = window_view(source, grid)[rows]
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
        keep_windows = ~window_view(mask, grid)[rows][index]
        keep_spec = scipy.fft.rfft2(keep_windows.astype(np.float32))
        spec[partial] -= mean[:, None, None].astype(np.float32) * keep_spec
    return spec, 1.0 - kept / float(d * d)


#: Largest number of windows in a band of grid rows correlated together on one thread: it
#: bounds the memory of a pass, and batches of this size ran faster here than one batch of a
#: whole 2048 x 2048 frame.
BAND_WINDOWS = 2048


def _correlate(pair, masks, counts, grid: Grid, settings, frames, owned) -> _PassResult:
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
        return (*correlation_peaks(planes, floor), np.maximum(frac_a, frac_b))

    results = frames.run(band_peaks, bands)
    dx, dy, ratio, fraction = (np.concatenate(parts) for parts in zip(*results, strict=True))
    masked = fraction > settings.max_masked_fraction
    shape = (grid.rows, grid.cols)
    return _PassResult(
        dx.reshape(shape), dy.reshape(shape), ratio.reshape(shape), masked.reshape(shape)
    )


def _band(counts, windows: slice):
    return None if counts is None else counts[windows]


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


def _all_passes(frames: Frames, settings: PivSettings, progress) -> VectorField:
    total = len(settings.passes)
    _report(progress, 0, total, "correlating")
    warnings: list[str] = []
    predictor: Predictor | None = None
    for number, p in enumerate(settings.passes, start=1):
        grid = grid_for(frames.a.shape, p)
        dx, dy, ratio, masked = _run_pass(frames, grid, predictor, settings)
        outliers = _outliers(dx, dy, masked, settings)
        if number == 1:
            warnings += _quarter_rule(dx, dy, outliers, masked, p.window_px)
        message = f"pass {number} of {total} done ({p.window_px} px windows)"
        if number == total:
            _report(progress, number, total, message, can_stop=False)
            return _field(grid, dx, dy, ratio, masked, outliers, warnings)
        predictor = make_predictor(grid, dx, dy, outliers, masked)
        _report(progress, number, total, message)
    raise AssertionError("unreachable: the last pass returns")


def _run_pass(frames: Frames, grid: Grid, predictor: Predictor | None, settings):
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


def _counts_or_none(mask, grid: Grid):
    return None if mask is None else masked_counts(mask, grid)


def _predictor_at_windows(predictor: Predictor, grid: Grid, mask, counts):
    """The predictor each window's correction is added to, ``(M, N)`` each.

    A partly masked window measures the flow at the centroid ``g`` of its unmasked pixels,
    not at its centre ``c``; there the correction is added to ``p(g) - J(g) (g - c)``, the
    predictor carried to the centre along its gradient (first order). Without this, vectors
    beside a mask keep the value of the coarse first pass and converge only slowly.
    """
    px, py = predictor.at(grid)
    off_x, off_y = centroid_offsets(mask, grid, counts)
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


def _centre_masked(frames: Frames, grid: Grid) -> np.ndarray:
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


def _checked_frames(frame_a, frame_b, mask_a, mask_b, settings: PivSettings) -> Frames:
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
    return Frames(a, b, masks[0], masks[1], workers, power)


def _checked_mask(mask, shape, name) -> np.ndarray | None:
    if mask is None:
        return None
    m = np.asarray(mask, dtype=bool)
    if m.shape != shape:
        raise WakelineError(f"frame pair: mask of frame {name} is {m.shape}, frames are {shape}")
    return m if m.any() else None
