"""The ball's outline circle in one frame, from the best cue the frame offers."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares
from skimage.measure import CircleModel

from core import WakelineError
from core.ball.coarse import coarse_circle, ransac_circle
from core.ball.constants import (
    FINE_BANDS_PX,
    GLARE_LIFT,
    MIN_RIM_SHARE,
    OUTLINE_FLOOR_PX,
    PARTIAL_STEP_SHARE,
    POOR_ARC_SHARE,
    STEP_SNR,
)
from core.ball.disc import FittedCircle, arc_share, particle_free_disc
from core.conditioning import glare_mask
from core.resample import spline_values
from core.results import BallFit


def find_ball(
    frame: np.ndarray,
    *,
    radius_hint_px: float | None = None,
    name: str = "frame",
    saturation: float | None = None,
    near: BallFit | None = None,
) -> BallFit:
    """Fit the ball's outline circle in one frame.

    Parameters
    ----------
    frame : (H, W) ndarray
        One PIV frame (counts), as recorded (not normalised).
    radius_hint_px : float, optional
        Expected radius (from the ball diameter and a known scale); only circles within 25 %
        of it are considered.
    name : str
        Frame name used in error messages.
    saturation : float, optional
        The camera's saturation level (counts); default the frame's maximum. Glare (saturated
        regions larger than a particle image) is left out of the outline.
    near : BallFit, optional
        The ball in the other frame of the pair: the search starts from it (and falls back on
        the whole frame when the ball is not found within the first band around it).

    Returns
    -------
    BallFit
        Centre (x, y) and radius in px with their standard uncertainties and covariance, the
        RMS edge residual, the share of the outline that carried the fit, which cue gave the
        outline, and whether the image edge cuts the ball.

    Raises
    ------
    core.WakelineError
        When no round particle-free region of plausible size exists ("no ball found"), or too
        little of its outline is visible.
    """
    image, level = _frame(frame, name, saturation)
    if near is not None:
        # the other frame's circle: the ball moved a few pixels, well within the first band;
        # a fit that misses (a faster ball) falls back on the search
        try:
            fit = _fine_circle(image, *near.center_px, near.radius_px, 4, level, name)
            if _kept(fit, near.center_px, near.radius_px, 4, near.radius_px):
                return fit
        except WakelineError:
            pass
    return _fine_circle(image, *_coarse_start(image, radius_hint_px, name), level, name)


def find_balls(frame_a: np.ndarray, frame_b: np.ndarray, *, radius_hint_px: float | None = None,
               threads: int = 1) -> tuple[BallFit, BallFit]:
    """The ball in both frames of a pair (:func:`find_ball`; errors name "frame A" / "frame B").

    Both outlines are fitted from frame A's coarse circle (the ball moves a few pixels between
    the frames, well within the first band), with two threads at once (the fits' interpolation
    and filters release the GIL, so the pair then takes little more than one frame's fit on a
    large frame); the circles are the same whichever the thread count. Frame B's fit must stay
    within the first band around that start, see enough of its outline and keep frame A's
    radius within 3 %; else (a fast ball) it is fitted again from frame A's circle, as
    :func:`find_ball` with ``near`` does, at the cost of one fit more.
    """
    image_a, level_a = _frame(frame_a, "frame A")
    image_b, level_b = _frame(frame_b, "frame B")
    start = _coarse_start(image_a, radius_hint_px, "frame A")

    def fit_b():
        try:
            return _fine_circle(image_b, *start, level_b, "frame B")
        except WakelineError:
            return None

    if threads >= 2:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(1) as pool:
            future = pool.submit(fit_b)
            ball_a = _fine_circle(image_a, *start, level_a, "frame A")
            ball_b = future.result()
    else:
        ball_a = _fine_circle(image_a, *start, level_a, "frame A")
        ball_b = fit_b()
    if ball_b is None or not _kept(ball_b, start[:2], start[2], start[3], ball_a.radius_px):
        ball_b = find_ball(image_b, radius_hint_px=radius_hint_px, name="frame B", near=ball_a,
                           saturation=level_b)
    return ball_a, ball_b


def _frame(frame, name: str, saturation: float | None = None) -> tuple[np.ndarray, float]:
    """The frame as float32 and its saturation level (default its maximum)."""
    image = np.asarray(frame, dtype=np.float32)
    if image.ndim != 2 or min(image.shape) < 16:
        raise WakelineError(f"{name}: not a 2-D frame large enough to hold a ball")
    return image, float(image.max()) if saturation is None else float(saturation)


def _coarse_start(image: np.ndarray, radius_hint_px: float | None, name: str):
    """The fine fit's start: the coarse circle (its radius replaced by the hint when more than
    25 % off it) and its block size."""
    cx, cy, r, block = coarse_circle(image, radius_hint_px, name)
    if radius_hint_px is not None:
        r = radius_hint_px if abs(r - radius_hint_px) > 0.25 * radius_hint_px else r
    return cx, cy, r, block


def _kept(fit: BallFit, center_px, radius_px: float, block: int, other_radius_px: float) -> bool:
    """``fit``, started from the circle ``(center_px, radius_px)`` on a first band for
    ``block``, stayed within that band, saw enough of its outline and kept the other frame's
    radius ``other_radius_px`` within 3 %."""
    moved = math.hypot(fit.center_px[0] - center_px[0], fit.center_px[1] - center_px[1])
    return (moved < _first_band(radius_px, block) and fit.arc_share >= POOR_ARC_SHARE
            and abs(fit.radius_px - other_radius_px) < 0.03 * other_radius_px)


# --- fine: the outline from the best cue the frame offers ----------------------------------


@dataclass
class _Rays:
    """Samples along rays from a centre: raw (cubic) and smoothed (linear) intensity."""

    theta: np.ndarray  # (K,)
    radii: np.ndarray  # (S,) px from the centre
    raw: np.ndarray  # (K, S)
    smooth: np.ndarray  # (K, S)
    usable: np.ndarray  # (K,) bool: inside the picture, clear of glare


def _sample_rays(crop, coeff, glare, cx, cy, r, half_width) -> _Rays:
    """Rays of the crop around the ball: ``coeff`` the cubic B-spline coefficients around it
    (:func:`_spline_around`), as a cubic spline keeps the rim's flank sharper than bilinear
    interpolation (whose slope is constant between pixel centres); the wide first band does
    not use them. The smoothed samples are the raw ones smoothed by a 1 px Gaussian along and
    across the rays (as a 1 px Gaussian of the picture would, for a fraction of its cost). A
    wide first band (more than 6 px each side) only has to bring the circle within a pixel or
    two: it is sampled bilinearly, on rays twice as far apart and at 1 px along them (four
    times as coarsely: its samples took a third of the fit on a large ball)."""
    wide = half_width > 6.0
    spacing, step = (3.0, 1.0) if wide else (1.5, 0.25)
    n_rays = int(np.clip(2.0 * math.pi * r / spacing, 90, 1080))
    theta = np.linspace(0.0, 2.0 * math.pi, n_rays, endpoint=False)
    radii = np.arange(r - half_width - 6.0, r + half_width + 8.0 + step / 2, step)
    xs = cx + np.cos(theta)[:, None] * radii
    ys = cy + np.sin(theta)[:, None] * radii
    height, width = crop.shape
    inside = (xs >= 0) & (ys >= 0) & (xs <= width - 1) & (ys <= height - 1)
    # rays whose band (or the 3 neighbours each side) leaves the picture or touches glare
    usable = inside.all(axis=1)
    if glare.any():
        hit = ndimage.map_coordinates(glare.astype(np.float32), [ys, xs], order=0, mode="nearest")
        usable &= ~(hit > 0).any(axis=1)
    usable = ndimage.minimum_filter1d(usable.astype(np.uint8), 7, mode="wrap") > 0
    if wide:
        raw = ndimage.map_coordinates(crop, [ys, xs], order=1, mode="nearest")
    else:
        x0, y0 = coeff.origin
        raw = spline_values(coeff.coeff, ys - y0, xs - x0)
    smoothed = ndimage.gaussian_filter1d(raw, 1.0 / step, axis=1, mode="nearest")
    smoothed = ndimage.gaussian_filter1d(smoothed, 1.0 / (r * (theta[1] - theta[0])), axis=0,
                                         mode="wrap")
    return _Rays(theta, radii, raw, smoothed, usable)


@dataclass
class _Spline:
    """Cubic B-spline coefficients of a window of the crop, and the window's origin (x, y)."""

    coeff: np.ndarray
    origin: tuple[int, int]


def _spline_around(crop: np.ndarray, cx: float, cy: float, r: float) -> _Spline:
    """Spline coefficients of the part of the crop the narrow bands sample, once the first band
    has put the circle (cx, cy, r) within a few pixels: the second band may move its centre and
    radius by its half-width and 2 px each, the last band samples 8 px beyond its own
    half-width around that, and the window reaches 12 px further, where a cubic spline's
    prefilter has forgotten the window's edge (its pole's 0.27^12 ~ 1e-7). The whole crop
    (48 px beyond the first band) cost a third more on a large ball."""
    near, last = FINE_BANDS_PX
    reach = r + 2.0 * (near + 2.0) + last + 8.0 + 12.0
    x0, y0 = max(0, int(cx - reach)), max(0, int(cy - reach))
    x1 = min(crop.shape[1], int(cx + reach) + 2)
    y1 = min(crop.shape[0], int(cy + reach) + 2)
    window = crop[y0:y1, x0:x1]
    return _Spline(ndimage.spline_filter(window, 3, output=np.float32, mode="nearest"), (x0, y0))


def _first_band(r: float, block: int) -> float:
    """Half-width (px) of the first fine band: the coarse circle's error is up to ~3 blocks."""
    return max(10.0, 0.15 * r, 3.0 * block)


def _fine_circle(image, cx, cy, r, block, level, name) -> BallFit:
    """Particle-free disc, then the rim or surface step on narrower bands (see module doc)."""
    height, width = image.shape
    first = _first_band(r, block)
    reach = r + first + 48.0
    x0, y0 = max(0, int(cx - reach)), max(0, int(cy - reach))
    x1, y1 = min(width, int(cx + reach) + 2), min(height, int(cy + reach) + 2)
    if x1 - x0 < 8 or y1 - y0 < 8:
        raise WakelineError(f"{name}: no ball found (the circle lies outside the picture)")
    crop = np.asarray(image[y0:y1, x0:x1], dtype=np.float32)
    glare = glare_mask(crop, level=level)
    cx, cy = cx - x0, cy - y0
    coeff = None
    # 2. the outline on narrowing bands from the best cue: the lit rim, the surface's step, or
    # the particle-free disc (chosen again once the circle is close)
    cue = None
    for index, half_width in enumerate((first, *FINE_BANDS_PX)):
        if index == 1:
            coeff = _spline_around(crop, cx, cy, r)
        rays = _sample_rays(crop, coeff, glare, cx, cy, r, half_width)
        crossings = _Crossings(rays, r, half_width)
        if index < 2:
            cue = _choose_cue(crossings)
        if index == 0 and cue == "surface edge" and _partial_step(crossings):
            cue = "particle images"
        if cue == "particle images":
            last = index == len(FINE_BANDS_PX)
            fit = particle_free_disc(crop, glare, cx, cy, r, half_width + (index > 0), name, last)
        else:
            edges = crossings.rim
            if cue == "surface edge":  # the rim's flank where it is lit, else the step
                edges = np.where(crossings.coherent_rim, edges, crossings.step)
            fit = _edge_circle(rays, edges, cx, cy, r, half_width, name)
        cx, cy, r = fit.center[0], fit.center[1], fit.radius
    cx, cy = cx + x0, cy + y0
    cut = cx - r < -0.5 or cy - r < -0.5 or cx + r > width - 0.5 or cy + r > height - 0.5
    cov = fit.covariance + np.diag(_floor(cue)) ** 2
    return BallFit(
        center_px=(float(cx), float(cy)), radius_px=float(r), residual_px=fit.residual,
        cut_by_edge=bool(cut),
        center_sigma_px=(float(math.sqrt(cov[0, 0])), float(math.sqrt(cov[1, 1]))),
        radius_sigma_px=float(math.sqrt(cov[2, 2])),
        covariance_px2=tuple(tuple(float(v) for v in row) for row in cov),
        arc_share=float(fit.arc_share), outline=cue,
    )


def _floor(cue: str) -> tuple[float, float, float]:
    """Systematic standard uncertainty (px) of x, y and r for an outline cue, added to the fit's
    own: where the outline lies on a blurred rim or step (a surface shaded toward its limb, a
    rim brighter on one side), or how particle images straddling it are imaged (their light
    added to the ball's, or cut by its silhouette), moves the fitted circle by a fraction of the
    blur. Set from the spread of these effects between the two synthetic families."""
    centre, radius = OUTLINE_FLOOR_PX[cue]
    return centre, centre, radius


def _edge_circle(rays: _Rays, edges: np.ndarray, cx: float, cy: float, r: float,
                 half_width: float, name: str) -> FittedCircle:
    """Robust circle through the outline points found on the usable rays."""
    ok = np.isfinite(edges) & rays.usable
    th = rays.theta[ok]
    points = np.column_stack([cx + edges[ok] * np.cos(th), cy + edges[ok] * np.sin(th)])
    if len(points) < 12:
        raise WakelineError(f"{name}: no ball found (too little of an outline is visible)")
    seen = np.count_nonzero(rays.usable) / rays.theta.size
    return _robust_circle(points, th, seen, name, (cx, cy, r), half_width + 2.0)


def _share(found: np.ndarray, usable: np.ndarray) -> float:
    return np.count_nonzero(found & usable) / max(1, np.count_nonzero(usable))


class _Crossings:
    """The outline's crossings on one band's rays, each found once when first asked for (the
    cue is chosen from the same crossings that then give the outline)."""

    def __init__(self, rays: _Rays, r: float, half_width: float):
        self.rays, self.r, self.half_width = rays, r, half_width

    @cached_property
    def step(self) -> np.ndarray:
        rays = self.rays
        return _step_crossings(rays.smooth, rays.raw, rays.radii, self.r, self.half_width)

    @cached_property
    def rim(self) -> np.ndarray:
        return _rim_crossings(self.rays.raw, self.rays.radii, self.r, self.half_width)

    @cached_property
    def coherent_step(self) -> np.ndarray:
        return _coherent(self.step)

    @cached_property
    def coherent_rim(self) -> np.ndarray:
        return _coherent(self.rim)


def _choose_cue(crossings: _Crossings) -> str:
    """A surface standing clear of the background (its step, with the rim's flank where the rim
    is lit), else the lit rim alone, else the particle images."""
    usable = crossings.rays.usable
    if _share(crossings.coherent_step, usable) >= MIN_RIM_SHARE:
        return "surface edge"
    if _share(crossings.coherent_rim, usable) >= MIN_RIM_SHARE:
        return "lit rim"
    return "particle images"


def _partial_step(crossings: _Crossings) -> bool:
    """The first, wide band's surface step is seen on under half of the usable outline: it
    may then be a step against the ball's laser shadow alone, where the band's surface sample
    (far inside the outline) says nothing of the limb: a shaded limb fades to the shadow's
    level inside the outline (a dim ball's limb was darker than the shadow beside it), and
    a dark seam near the limb crosses half-way to the shadow's level too; a large dim ball
    was fitted from such a step up to 26 px too small. The particle-free disc then brings the
    circle close instead, and the narrow bands choose their cue again around it, where the
    surface is sampled at the limb. (Not using the step at all then cost a dim ball seen
    against lit air on under half its outline 1.6 px on the first synthetic family, where the
    choice was made.)"""
    return _share(crossings.coherent_step, crossings.rays.usable) < PARTIAL_STEP_SHARE


def _coherent(edges: np.ndarray) -> np.ndarray:
    """Rays whose edge is found on most of their 9 neighbours and lies within a pixel of those
    neighbours' median: a lit rim or a surface step runs smoothly along the outline, while
    particle images touching it span a ray or two, each at its own distance."""
    found = np.isfinite(edges)
    most = ndimage.uniform_filter1d(found.astype(np.float64), 9, mode="wrap") > 0.5
    if not found.any():
        return most
    window = np.lib.stride_tricks.sliding_window_view(np.concatenate([edges[-4:], edges,
                                                                      edges[:4]]), 9)
    return most & found & (np.abs(edges - _nan_median_rows(window)) < 1.0)


def _nan_median_rows(rows: np.ndarray) -> np.ndarray:
    """Median of each row's finite values (NaN where there is none): sorting puts the NaNs
    last, and the middle of the finite ones is read off (``np.nanmedian`` takes a slow path
    through masked arrays, several ms per band)."""
    ordered = np.sort(rows, axis=1)
    count = np.isfinite(ordered).sum(axis=1)
    index = np.arange(len(rows))
    low = ordered[index, np.maximum(count - 1, 0) // 2]
    high = ordered[index, count // 2 - (count == 0)]
    return np.where(count > 0, 0.5 * (low + high), np.nan)


def _rim_crossings(prof: np.ndarray, radii: np.ndarray, r: float, half_width: float) -> np.ndarray:
    """Steepest point of a bright lit rim's outer flank on each ray (NaN where it is not lit).

    Where the sheet lights the rim it is far brighter than the seeded air (mean over the outer
    part of the ray), and its outer flank is the ball's outline: a blurred step keeps its
    steepest point where the step is, whatever the rim's height.
    """
    outer = radii >= r + half_width + 1.0
    air = prof[:, outer].mean(axis=1)
    inner = (radii >= r - half_width - 6.0) & (radii <= r - half_width - 2.0)
    surface = np.median(prof[:, inner], axis=1)
    # the lit rim lies inside the outline: a bright peak well outside the current circle is a
    # particle image beside the ball, not the rim (it would push the outline outward)
    band = (radii >= r - half_width - 1.0) & (radii <= r + 0.25 * half_width)
    peak_idx = np.argmax(np.where(band, prof, -np.inf), axis=1)
    rows = np.arange(len(prof))
    peak = prof[rows, peak_idx]
    level = 0.5 * (peak + air)
    cols = np.arange(len(radii))[None, :]
    crossed = (prof <= level[:, None]) & (cols > peak_idx[:, None])
    nxt = np.argmax(crossed, axis=1)
    lit = crossed.any(axis=1) & (peak > 3.0 * np.maximum(air, 1e-9)) & (peak > 1.5 * surface)
    slope = np.diff(prof, axis=1)  # slope[k] between samples k and k+1
    near = (cols[:, :-1] >= peak_idx[:, None]) & (np.abs(cols[:, :-1] - nxt[:, None]) <= 6)
    k = np.argmin(np.where(near, slope, np.inf), axis=1)
    return np.where(lit, _vertex(slope, k, radii), np.nan)


def _vertex(slope: np.ndarray, k: np.ndarray, radii: np.ndarray) -> np.ndarray:
    """Radius of the parabolic vertex of ``slope`` around column ``k`` of each row."""
    rows = np.arange(len(slope))
    k = np.clip(k, 1, slope.shape[1] - 2)
    s0, s1, s2 = slope[rows, k - 1], slope[rows, k], slope[rows, k + 1]
    denom = s0 - 2.0 * s1 + s2
    offset = np.clip(np.where(denom != 0, 0.5 * (s0 - s2) / np.where(denom != 0, denom, 1.0), 0.0),
                     -0.5, 0.5)
    step = radii[1] - radii[0]
    return radii[k] + (0.5 + offset) * step


def _step_crossings(prof: np.ndarray, raw: np.ndarray, radii: np.ndarray, r: float,
                    half_width: float) -> np.ndarray:
    """Steepest point of the step from the ball's surface down to the background between the
    particles on each ray of the smoothed samples ``prof`` (NaN where that step is not clear).

    The step is clear where the surface (the median just inside the band) stands above the
    background (a low percentile of the air just outside the band, between particle images,
    pooled over neighbouring rays) by ``STEP_SNR`` times the noise of the smoothed surface (the
    raw samples' noise over ``2 sqrt(pi)`` for the 1 px Gaussian: derived for white noise).
    Walking outward, the profile first falls below half-way between the two; the edge is the
    steepest point within 2 px of that crossing: a blurred step keeps its steepest point where
    the step is, whatever the surface's grain or a partly lit rim. Where glare lifts the air
    beside the outline by ``GLARE_LIFT`` of the step above the background around the rest of
    the ball, the ray is left out, and so are rays with a halo or a faded limb once the circle
    is close (:func:`_step_at_outline`). A particle image touching the outline delays the
    crossing (the robust fit drops such rays).
    """
    inner = (radii >= r - half_width - 5.0) & (radii <= r - half_width)
    outer = radii >= r + half_width + 1.0
    surface = np.median(prof[:, inner], axis=1)
    background = ndimage.median_filter(np.percentile(prof[:, outer], 10, axis=1), 9, mode="wrap")
    spread = raw[:, inner] - np.median(raw[:, inner], axis=1)[:, None]
    noise = 1.4826 * float(np.median(np.abs(spread))) / (2.0 * math.sqrt(math.pi))
    clear = surface - background > STEP_SNR * max(noise, 1e-6)
    # glare: light spilling over the outline lifts the air beside it well above the background
    # elsewhere around the ball; that arc is left out
    typical = np.median(background)
    clear &= background - typical < GLARE_LIFT * np.median(surface - typical)
    if half_width <= FINE_BANDS_PX[0]:
        clear &= _step_at_outline(prof, radii, r, surface, background, noise)
    level = 0.5 * (surface + background)
    cols = np.arange(len(radii))[None, :]
    start = np.argmax(radii >= r - half_width)
    crossed = (prof <= level[:, None]) & (cols >= start)
    crossed &= (radii <= r + half_width + 1.0)[None, :]
    found = crossed.any(axis=1) & clear
    nxt = np.argmax(crossed, axis=1)
    slope = np.diff(prof, axis=1)  # slope[k] between samples k and k+1
    reach = round(2.0 / (radii[1] - radii[0]))
    near = np.abs(cols[:, :-1] - nxt[:, None]) <= reach
    k = np.argmin(np.where(near, slope, np.inf), axis=1)
    return np.where(found, _vertex(slope, k, radii), np.nan)


def _step_at_outline(prof, radii, r, surface, background, noise) -> np.ndarray:
    """Rays whose step lies at the outline, once the circle is within a pixel or so (the
    narrow bands): not where

    - a halo (a bright ball's scattered light, fading over a few pixels) lifts the air right
      beside the outline (clear of the step's own blur) above the air at the band's far end
      by ``GLARE_LIFT`` of the step and by more than the noise, over most of 25 neighbouring
      rays (a few particle images crowding one spot lift single rays): it has faded by the
      band's end, yet moves the step's steepest point out into its tail. An uneven sheet
      differs little over those few pixels;
    - a shaded limb fades to the air's level over several pixels: the surface 2-3 px inside
      the outline (as deep as the circle may still be off) is already below half-way, so
      there is no step at the outline, only a slope well inside it.

    The first narrow band chooses its cue again from what is left (:func:`_choose_cue`): a
    ball whose step is left out on most of its outline falls back on the lit rim or the
    particle images.
    """
    beside = _pooled_low(prof[:, (radii >= r + 2.5) & (radii <= r + 5.0)])
    far = _pooled_low(prof[:, radii >= radii[-1] - 2.5])
    lifted = beside - far
    halo = (lifted > GLARE_LIFT * (surface - far)) & (lifted > STEP_SNR * noise)
    no_halo = ndimage.uniform_filter1d(halo.astype(np.float64), 25, mode="wrap") <= 0.5
    limb = np.median(prof[:, (radii >= r - 3.0) & (radii <= r - 2.0)], axis=1)
    return no_halo & (limb > 0.5 * (surface + background))


def _pooled_low(samples: np.ndarray, rays: int = 25) -> np.ndarray:
    """10th percentile of each ray's samples pooled with its neighbours' (``rays`` in all, the
    outline wrapping round; at most every ray): the air between the particle images, where a
    single ray's few samples may all lie on one."""
    count = len(samples)
    half = min(rays, count) // 2
    wrapped = np.take(samples, np.arange(-half, count + half), axis=0, mode="wrap")
    window = np.lib.stride_tricks.sliding_window_view(wrapped, 2 * half + 1, axis=0)
    return np.percentile(window.reshape(count, -1), 10, axis=1)


def _robust_circle(points: np.ndarray, theta: np.ndarray, seen: float, name: str,
                   start: tuple[float, float, float], reach: float) -> FittedCircle:
    """RANSAC circle through outline points, then a Cauchy-loss fit, with its covariance.

    ``theta`` are the points' ray angles (for the residuals' correlation along the outline),
    ``seen`` the share of rays that could give a point (inside the picture, clear of glare).
    Only circles within ``reach`` px of ``start`` (x, y, r) are considered: the points were
    searched there, and a seam's arc inside the ball must not pass for the outline.
    """
    inliers = ransac_circle(points, 0.5, start, reach)
    if inliers is None or inliers.sum() < 12:
        raise WakelineError(f"{name}: no ball found (the outline points do not form a circle)")
    final = CircleModel.from_estimate(points[inliers])
    if not final:
        raise WakelineError(f"{name}: no ball found (circle fit failed)")
    # the edge-point errors are skewed (a particle touching the outline pushes a point outward),
    # so the last step is a Cauchy-loss fit on the points near that circle: it follows the
    # densest points
    guess = np.array([final.center[0], final.center[1], final.radius])
    near = np.abs(np.hypot(points[:, 0] - guess[0], points[:, 1] - guess[1]) - guess[2]) < 3.0
    points, theta = points[near], theta[near]
    px, py = points[:, 0], points[:, 1]

    def jacobian(p):  # of the distances to the circle: the finite-difference one costs 4 calls
        rho = np.maximum(np.hypot(px - p[0], py - p[1]), 1e-12)
        return np.column_stack([(p[0] - px) / rho, (p[1] - py) / rho, -np.ones_like(rho)])

    fit = least_squares(lambda p: np.hypot(px - p[0], py - p[1]) - p[2], guess, jac=jacobian,
                        loss="cauchy", f_scale=0.3)
    cx, cy, r = (float(v) for v in fit.x)
    dist = np.hypot(px - cx, py - cy) - r
    near = np.abs(dist) < 1.0
    residual = float(np.sqrt(np.mean(dist[near] ** 2))) if near.any() else float("nan")
    keep = np.abs(dist) < max(3.0 * 1.4826 * float(np.median(np.abs(dist))), 0.3)
    cov = _circle_covariance(px[keep], py[keep], cx, cy, dist[keep], theta[keep])
    arc = arc_share(theta[keep], seen)
    return FittedCircle((cx, cy), r, cov, residual, arc)


def _circle_covariance(px, py, cx, cy, dist, theta) -> np.ndarray:
    """Covariance (px^2) of (x, y, r) from the kept points' residuals.

    Neighbouring rays see overlapping pixels, so their errors are correlated: the variance is
    scaled by ``1 + 2 sum rho_k`` over the residuals' positive autocorrelations along the
    outline (the number of points per independent one).
    """
    rho = np.hypot(px - cx, py - cy)
    jac = np.column_stack([(cx - px) / rho, (cy - py) / rho, -np.ones_like(rho)])
    dof = max(1, len(dist) - 3)
    s2 = float(np.sum(dist * dist)) / dof
    order = np.argsort(theta)
    e = dist[order] - dist.mean()
    denom = float(np.dot(e, e))
    inflation = 1.0
    if denom > 0:
        for lag in range(1, min(20, len(e) // 4)):
            c = float(np.dot(e[:-lag], e[lag:])) / denom
            if c <= 0:
                break
            inflation += 2.0 * c
    try:
        return s2 * inflation * np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        return np.full((3, 3), np.inf)
