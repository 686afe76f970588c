"""The correlation engine: every pass of a frame pair, from straight windows to deformed
ones, and the validated vector field of the last pass."""

from __future__ import annotations

import math
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
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
    masked: np.ndarray  # (M, N) bool: no pair took part in the window


@dataclass
class _PassInput:
    """One pair's frames of a pass (deformed after the first), their masks, the masked pixels
    per window and the windows this pair leaves out (mostly masked, or centre masked)."""

    pair: tuple[np.ndarray, np.ndarray]
    masks: tuple[np.ndarray | None, np.ndarray | None]
    counts: list[np.ndarray | None]
    excluded: np.ndarray  # (M, N) bool


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


def _pair_planes(sources, item: _PassInput, grid: Grid, rows: slice, settings):
    """Correlation planes of one pair's windows in grid rows ``rows``, ``(K, D, D)``, zero in
    the windows the pair leaves out, and which windows it took part in, ``(K,)``."""
    windows = slice(rows.start * grid.cols, rows.stop * grid.cols)
    spec, frac_a = _window_spectra(
        sources[0], item.masks[0], _band(item.counts[0], windows), grid, rows
    )
    spec_b, frac_b = _window_spectra(
        sources[1], item.masks[1], _band(item.counts[1], windows), grid, rows
    )
    np.conjugate(spec, out=spec)
    spec *= spec_b
    del spec_b
    planes = scipy.fft.irfft2(spec, s=(grid.window, grid.window), overwrite_x=True)
    del spec
    used = ~(item.excluded[rows].ravel() | (np.maximum(frac_a, frac_b)
                                            > settings.max_masked_fraction))
    planes[~used] = 0.0
    return planes, used


def _correlate(inputs: list[_PassInput], grid: Grid, settings, ensemble, owned) -> _PassResult:
    """Circular cross-correlation ``c[s] = sum_x a[x] b[x + s]`` of every window pair, summed
    over the pairs of an ensemble window by window (one pair: its own planes), and the peaks of
    the sums, in bands of grid rows on the worker threads (each band one batched FFT per frame
    and pair). ``owned``: the frames are scratch arrays that may be overwritten."""
    all_sources = []
    for item in inputs:
        sources = []
        for image, mask in zip(item.pair, item.masks, strict=True):
            if mask is not None:
                image = image if owned else image.copy()
                image[mask] = 0
            sources.append(image)
        all_sources.append(sources)
    # a flat window (no texture) gives a plane of round-off only
    floor = 1e-4 * grid.window**2 * sum(frames.power for frames in ensemble)
    first = ensemble[0]
    # bands of at most BAND_WINDOWS windows, and at least one per worker
    per_band = max(1, min(BAND_WINDOWS // grid.cols, math.ceil(grid.rows / first.workers)))
    bands = [slice(r, min(r + per_band, grid.rows)) for r in range(0, grid.rows, per_band)]

    def band_peaks(rows: slice):
        total, taking = None, None
        for sources, item in zip(all_sources, inputs, strict=True):
            planes, used = _pair_planes(sources, item, grid, rows, settings)
            if total is None:
                total, taking = planes, used
            else:
                total += planes
                taking |= used
        return (*correlation_peaks(total, floor), taking)

    results = first.run(band_peaks, bands)
    dx, dy, ratio, taking = (np.concatenate(parts) for parts in zip(*results, strict=True))
    shape = (grid.rows, grid.cols)
    return _PassResult(
        dx.reshape(shape), dy.reshape(shape), ratio.reshape(shape), ~taking.reshape(shape)
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
        return _all_passes([frames], settings, progress)
    finally:
        frames.close()


def correlate_ensemble(
    pairs,
    settings: PivSettings | None = None,
    progress: Progress | None = None,
) -> VectorField:
    """Mean displacement field of several frame pairs of one flow by ensemble correlation.

    Every pass sums the correlation planes of all pairs window by window before the peak is
    sought (ensemble correlation: Meinhart, Wereley & Santiago 2000), so a window that holds
    too few particle images in one pair for a clear peak has a clear one in the sum; later
    passes deform every pair by the ensemble's own predictor. The pairs must show the same flow
    in the same place (e.g. repeat shots resampled into a common frame). One pair gives what
    :func:`correlate_pair` gives.

    Parameters
    ----------
    pairs : sequence of (frame_a, frame_b, mask_a, mask_b)
        Same-shaped frames; masks as in :func:`correlate_pair` (None: nothing masked). A pair
        takes no part in a window it masks beyond ``max_masked_fraction`` or at its centre.
    settings, progress
        As in :func:`correlate_pair`; the flat-window floor adds up over the pairs.

    Returns
    -------
    VectorField
        As from :func:`correlate_pair`; ``masked`` where no pair took part.

    Raises
    ------
    core.WakelineError
        No pairs, frames of different shapes, or as in :func:`correlate_pair`.
    """
    settings = settings or PivSettings()
    if not pairs:
        raise WakelineError("ensemble correlation: no frame pairs")
    ensemble = [_checked_frames(*pair, settings) for pair in pairs]
    shapes = {frames.a.shape for frames in ensemble}
    if len(shapes) > 1:
        raise WakelineError(f"ensemble correlation: frames of different shapes {sorted(shapes)}")
    if ensemble[0].workers > 1:  # one set of worker threads for all pairs
        pool = ThreadPoolExecutor(ensemble[0].workers)
        for frames in ensemble:
            frames.pool = pool
    try:
        return _all_passes(ensemble, settings, progress)
    finally:
        for frames in ensemble:
            frames.close()


def _all_passes(ensemble: list[Frames], settings: PivSettings, progress) -> VectorField:
    total = len(settings.passes)
    _report(progress, 0, total, "correlating")
    warnings: list[str] = []
    predictor: Predictor | None = None
    for number, p in enumerate(settings.passes, start=1):
        grid = grid_for(ensemble[0].a.shape, p)
        dx, dy, ratio, masked = _run_pass(ensemble, grid, predictor, settings)
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


def _run_pass(ensemble: list[Frames], grid: Grid, predictor: Predictor | None, settings):
    """Correlate one pass; returns total displacement, peak ratio and masked cells."""
    inputs = []
    for frames in ensemble:
        if predictor is None:
            pair, masks = (frames.a, frames.b), (frames.mask_a, frames.mask_b)
        else:
            a, b, mask = frames.deformed(predictor, grid, settings.deform_min_change_px)
            pair, masks = (a, b), (mask, mask)
        counts = [_counts_or_none(masks[0], grid)]
        counts.append(counts[0] if masks[1] is masks[0] else _counts_or_none(masks[1], grid))
        inputs.append(_PassInput(pair, masks, counts, _centre_masked(frames, grid)))
    res = _correlate(inputs, grid, settings, ensemble, predictor is not None)
    if predictor is None:
        px = py = 0.0
    else:
        # the pairs of an ensemble share their mask (the ball in a common frame): the first
        # one's centroids stand for all
        first = inputs[0]
        px, py = _predictor_at_windows(predictor, grid, first.masks[0], first.counts[0])
    masked = res.masked
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
    """Windows whose centre lies on a masked pixel in either frame of a pair (the central 1 or
    2x2 px)."""
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
    workers = settings.threads()
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
