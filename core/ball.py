"""The ball in each frame: outline circle, masks, flight direction and speed, scale from its size.

In a PIV frame the ball is a round region without particle images: the light sheet lights the
seeding around it but nothing lies inside it. Its surface may be darker than the seeded air,
about as bright, or brighter (a white ball in scattered light), with or without a lit rim where
the sheet grazes it, with a glint; it shadows the sheet on its far side, and the sheet may be
brighter in one part of the picture than another. So the ball is found by texture, not by
brightness, and each frame is fitted on its own (the ball moves several pixels between them):

1. coarse: the local variance over blocks of a few pixels is high in the seeded air and low on
   the ball (and in its shadow); the boundary of the low-variance region votes along its normal
   for circle centres (a Hough transform), and the best-supported circle whose inside is
   particle-free is kept. A shadow strip's straight edges support no circle;
2. fine: along rays from the centre, on narrowing bands, the outline comes from the best cue
   the frame offers: where the surface stands clear of the background between the particles,
   the steepest point of that step (and the lit rim's sharp outer flank where the rim is lit);
   else the lit rim alone; else the particle-free disc (the circle holding 2 % of the detected
   particle images, a quantile regression), which needs no contrast at all. A rim or step
   counts only where it runs smoothly along the outline. Rays through glare and glaring arcs
   are left out; a robust circle fit (RANSAC with :class:`skimage.measure.CircleModel`, then a
   Cauchy-loss least squares) drops rays spoilt by particles, the seam or a shadow, and its
   residuals, with a floor per cue, give the circle's covariance.

The flight comes from the ball's displacement between the frames: the difference of the two
circles, combined with a match of the ball's visible image (rim, seam, grain; the ball may
spin) by Gauss-Newton, each with its covariance. A held ball (tunnel) takes its direction from
the free stream.

Conventions: image coordinates (x = column right, y = row down, origin at the top-left pixel
centre); flight direction 0 deg = toward +x, 90 deg = toward the top of the picture.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, sparse
from scipy.optimize import least_squares, linprog
from skimage.filters import threshold_otsu
from skimage.measure import CircleModel, ransac

from core import WakelineError
from core.conditioning import glare_mask
from core.results import BallFit, Flight, VectorField

# Rulebook sizes: circumference range (mm); the nominal diameter is mid-range circumference / pi.
BALL_CIRCUMFERENCE_MM = {
    # Laws of Cricket, Law 4 (the ball), men's: circumference 22.4-22.9 cm.
    "cricket": (224.0, 229.0),
    # Official Baseball Rules 3.01: circumference 9-9.25 in.
    "baseball": (9.0 * 25.4, 9.25 * 25.4),
    # 12 in softball: circumference 11 7/8 - 12 1/8 in.
    "softball": (11.875 * 25.4, 12.125 * 25.4),
}

#: Nominal diameters (mm): mid-range rulebook circumference / pi.
NOMINAL_BALL_DIAMETER_MM = {
    name: 0.5 * (lo + hi) / math.pi for name, (lo, hi) in BALL_CIRCUMFERENCE_MM.items()
}

#: Extra ring (px) around the fitted circle excluded from correlation: rim glare, reflections
#: and the sub-pixel fit error.
DEFAULT_MASK_MARGIN_PX = 3.0
#: Share of the outline's rays with a lit rim (or a clear surface step) from which that cue
#: alone gives the outline.
MIN_RIM_SHARE = 0.2
#: A surface step counts where it exceeds this many times the surface's noise.
STEP_SNR = 6.0
#: Lift of the air beside the outline (share of the surface's step) that marks a glaring arc.
GLARE_LIFT = 0.2
#: Share of the particle images around the outline that the particle-free disc may hold (false
#: detections: stitches, noise); the fit is corrected for the share's own outward offset.
HOLE_SHARE = 0.02
#: Particle images (about) used to fit the particle-free disc; the band outside is widened on
#: sparse seeding to hold them.
HOLE_POINTS = 250
#: Refits on random halves of the particle images behind the particle-free disc's covariance.
HOLE_BOOTSTRAP = 10
#: Half-widths (px) of the fine search bands after the particle-free disc.
FINE_BANDS_PX = (5.0, 3.0)
#: Depth (px) of the lit rim inside the outline: it moves with the centre but does not turn.
RIM_DEPTH_PX = 5.0
#: How far (px) particle images centred outside the outline reach into it (the e^-2 radius
#: of a 4 px image, and the circle's error).
SPILL_PX = 2.5
#: Prior standard deviation of the ball's in-plane turn between the frames (rad).
TURN_PRIOR_RAD = math.radians(2.0)
#: Standard uncertainty (px) added to each axis of the image match's displacement: the
#: outline's own light (rim, spilling particle images) is not quite rigid. Without a lit rim
#: the match rests on the surface's pattern, whose motion mixes the ball's with its spin:
#: on the physically built synthetic family such matches erred by up to 0.3-0.5 px, hence
#: the larger floor (the circles then weigh about as much).
MATCH_FLOOR_PX = 0.04
PATTERN_FLOOR_PX = 0.25
#: Correlation of the ball's pixels between the frames below which they hold no pattern.
MIN_MATCH_NCC = 0.1
#: Scale (px) of the surface's shading, taken away before the image match.
SHADING_PX = 3.0
#: Ball pixels matched between the frames at most (those with the steepest gradients).
MATCH_PIXELS = 8000
#: Systematic standard uncertainty (px) of the centre (each axis) and the radius per cue.
OUTLINE_FLOOR_PX = {
    "lit rim": (0.1, 0.15), "surface edge": (0.1, 0.25), "particle images": (0.1, 0.35),
}
#: Fit-quality limits behind the "poor fit" warning.
POOR_ARC_SHARE = 0.35
POOR_CENTRE_SIGMA_PX = 0.5


def nominal_diameter_mm(ball_type: str) -> float:
    """Nominal diameter (mm) of a ball type from its rulebook circumference range.

    Parameters
    ----------
    ball_type : str
        "cricket", "baseball" or "softball" (case-insensitive).

    Returns
    -------
    float
        Mid-range circumference divided by pi, mm.
    """
    key = ball_type.strip().lower()
    if key not in BALL_CIRCUMFERENCE_MM:
        known = ", ".join(sorted(BALL_CIRCUMFERENCE_MM))
        raise WakelineError(f"ball type {ball_type!r}: unknown (known: {known})")
    return NOMINAL_BALL_DIAMETER_MM[key]


def scale_from_ball(radius_px: float, diameter_mm: float) -> float:
    """Image scale (mm/px) from the fitted radius (px) and the ball's true diameter (mm)."""
    if not radius_px > 0:
        raise WakelineError(f"ball radius {radius_px} px: cannot derive a scale from it")
    return diameter_mm / (2.0 * radius_px)


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
    image = np.asarray(frame, dtype=np.float32)
    if image.ndim != 2 or min(image.shape) < 16:
        raise WakelineError(f"{name}: not a 2-D frame large enough to hold a ball")
    level = float(image.max()) if saturation is None else float(saturation)
    if near is not None:
        # the other frame's circle: the ball moved a few pixels, well within the first band;
        # a fit that misses (a faster ball) falls back on the search
        try:
            fit = _fine_circle(image, *near.center_px, near.radius_px, 4, level, name)
            moved = math.hypot(fit.center_px[0] - near.center_px[0],
                               fit.center_px[1] - near.center_px[1])
            if (moved < _first_band(near.radius_px, 4) and fit.arc_share >= POOR_ARC_SHARE
                    and abs(fit.radius_px - near.radius_px) < 0.03 * near.radius_px):
                return fit
        except WakelineError:
            pass
    cx, cy, r, block = _coarse_circle(image, radius_hint_px, name)
    if radius_hint_px is not None:
        r = radius_hint_px if abs(r - radius_hint_px) > 0.25 * radius_hint_px else r
    return _fine_circle(image, cx, cy, r, block, level, name)


# --- coarse: a round region without particle images -----------------------------------------


_DISC2 = np.hypot(*np.mgrid[-2:3, -2:3]) <= 2.0


def _bin2(image: np.ndarray) -> np.ndarray:
    """Means of 2 x 2 pixels, ``(H // 2, W // 2)``."""
    h, w = (s // 2 * 2 for s in image.shape)
    # strided sums: several times faster than a mean over the axes of a 4-D view
    return 0.25 * (image[0:h:2, 0:w:2] + image[1:h:2, 0:w:2] + image[0:h:2, 1:w:2]
                   + image[1:h:2, 1:w:2])


def _block_variance(image: np.ndarray, factor: int) -> np.ndarray:
    """Intensity variance within ``factor`` x ``factor`` blocks, ``(H // f, W // f)``."""
    h, w = (s // factor * factor for s in image.shape)
    blocks = image[:h, :w].reshape(h // factor, factor, w // factor, factor)
    mean = blocks.mean(axis=(1, 3), dtype=np.float64)
    square = np.square(blocks, dtype=np.float64).mean(axis=(1, 3))
    return np.clip(square - mean * mean, 0.0, None)


def _coarse_circle(
    image: np.ndarray, radius_hint_px: float | None, name: str
) -> tuple[float, float, float, int]:
    """Centre and radius (px) of the best-supported round particle-free region, and the block
    size (px) they were found on (their error is about a block)."""
    factor = 2 * max(2, int(round(min(image.shape) / 256)))
    # variance of 2 x 2 pixel means: averaging quarters the camera noise's variance but keeps
    # most of a particle image's (it spans 2-3 px), so dim particles stand out better; summed
    # over 5 x 5 blocks, so that sparse seeding still puts a few particles in each sum
    variance = ndimage.uniform_filter(_block_variance(_bin2(image), factor // 2), 5, mode="nearest")
    texture = np.log(variance + 1e-6 * float(np.median(variance)) + 1e-12)
    if np.ptp(texture) < 1.0:
        raise WakelineError(f"{name}: no ball found (the picture has no particle images)")
    # the air's texture relative to the brightest seeded air around it (an uneven sheet lights
    # one part of the picture several times more than another); then, for a ball too large for
    # that window, as it is
    window = max(5, int(0.6 * min(texture.shape)))
    reference = ndimage.gaussian_filter(ndimage.maximum_filter(texture, window), window / 4)
    radii, edges = None, None
    for level in (texture - reference, texture):
        quiet = level < threshold_otsu(level)
        # single quiet blocks between sparse particles are no ball; a seam's textured band
        # across the ball (its line and stitches) does not split it
        quiet = ndimage.binary_opening(quiet)
        quiet = ndimage.binary_closing(quiet, _DISC2, border_value=1)
        edges = _quiet_edges(quiet, level)
        if edges is None:
            continue
        radii = _radius_range(quiet.shape, radius_hint_px, factor)
        if radii.size == 0:
            raise WakelineError(f"{name}: no ball found (the hinted radius does not fit the frame)")
        best = _hough_best(*edges, radii, quiet)
        if best is not None:
            break
    else:
        hint = "" if radius_hint_px is None else f" near radius {radius_hint_px:.0f} px"
        raise WakelineError(
            f"{name}: no ball found (no round region without particle images{hint})"
        )
    xc, yc, rc = best
    # the variance summed over 5 x 5 blocks is high wherever the sum reaches the air, so the
    # quiet region's edge lies about two blocks inside the outline (2.4 blocks measured on
    # synthetic balls of 30-300 px)
    return (xc + 0.5) * factor - 0.5, (yc + 0.5) * factor - 0.5, (rc + 2.5) * factor, factor


def _quiet_edges(quiet: np.ndarray, level: np.ndarray):
    """Edge blocks of the quiet region (the picture's border left out) and their unit normals
    toward the textured side, or None when there are too few."""
    edge = quiet & ~ndimage.binary_erosion(quiet, border_value=1)
    edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = False
    ey, ex = np.nonzero(edge)
    gy, gx = np.gradient(ndimage.gaussian_filter(level, 1.0))
    norm = np.hypot(gx[ey, ex], gy[ey, ex])
    ok = norm > 0
    if np.count_nonzero(ok) < 12:
        return None
    return ex[ok], ey[ok], gx[ey, ex][ok] / norm[ok], gy[ey, ex][ok] / norm[ok]


def _radius_range(shape, radius_hint_px, factor) -> np.ndarray:
    """Radii (blocks) searched: 3 blocks up to 3/4 of the picture, or within 25 % of the hint."""
    r_lo, r_hi = 3.0, 0.75 * max(shape)
    if radius_hint_px is not None:
        r_lo = max(r_lo, 0.75 * radius_hint_px / factor)
        r_hi = min(r_hi, 1.25 * radius_hint_px / factor)
    return np.arange(math.floor(r_lo), math.ceil(r_hi) + 1, dtype=np.float64)


def _hough_best(ex, ey, nx, ny, radii, quiet):
    """Circle (blocks) best supported by quiet-region edge points voting along their normals.

    Two stages (a gradient Hough transform): every edge point votes, weighted by one over the
    circumference, for the centres one radius inward along its normal (the direction from
    quiet to textured) for every radius in range, so a whole circle of any size gives about 1
    at its centre; then, for the strongest centres, the edge points facing them vote for the
    radius. Written with ``np.bincount`` rather than :func:`skimage.transform.hough_circle`,
    which ignores the normals and costs a full circle of votes per point and radius.
    """
    shape = quiet.shape
    cx = np.rint(ex[None, :] - radii[:, None] * nx[None, :]).astype(np.int64)
    cy = np.rint(ey[None, :] - radii[:, None] * ny[None, :]).astype(np.int64)
    weight = np.broadcast_to(1.0 / (2.0 * math.pi * radii[:, None]), cx.shape)
    inside = (cx >= 0) & (cy >= 0) & (cx < shape[1]) & (cy < shape[0])
    votes = np.bincount(cy[inside] * shape[1] + cx[inside], weights=weight[inside],
                        minlength=shape[0] * shape[1]).reshape(shape)
    # the normals of a block map scatter by some degrees: sum the votes over a few blocks
    votes = ndimage.gaussian_filter(votes, 1.5) * (2.0 * math.pi * 1.5 * 1.5)
    peaks = (votes == ndimage.maximum_filter(votes, 5)) & (votes > 0.15)
    order = np.argsort(votes[peaks])[::-1][:8]
    best, best_score = None, 0.0
    for j, i in zip(*(a[order] for a in np.nonzero(peaks)), strict=True):
        rx, ry = ex - i, ey - j
        rho = np.hypot(rx, ry)
        facing = (rx * nx + ry * ny) > 0.8 * rho
        hist = np.bincount(np.rint(rho[facing]).astype(np.int64), minlength=int(radii[-1]) + 3)
        hist = ndimage.gaussian_filter1d(hist.astype(np.float64), 1.0)
        span = np.arange(hist.size, dtype=np.float64)
        inside = (span >= radii[0]) & (span <= radii[-1])
        r = float(np.argmax(np.where(inside, hist / np.maximum(span, 1.0), 0.0)))
        circle = _refined(ex, ey, nx, ny, float(i), float(j), r)
        if circle is None:
            continue
        support = circle[3]
        fill, air, seen = _disc_and_ring(quiet, *circle[:3])
        support /= max(seen, 0.25)
        # the air around a ball is textured on at least the lit part of its outline
        if fill < 0.7 or air < 0.25 or support < 0.2:
            continue
        # inside quiet, outside textured, a round edge between them; a larger circle's support
        # is the rarer by chance (more edge points agree)
        score = support * fill * fill * air * air * math.sqrt(circle[2])
        if score > best_score:
            best, best_score = circle[:3], score
    return best


def _refined(ex, ey, nx, ny, i, j, r):
    """Circle (blocks) through the edge points near ``(i, j, r)`` whose normals point away
    from its centre (least squares, then again on the points within a block), with the share
    of its outline they cover
    (64 sectors); None with fewer than 8 such points."""
    rx, ry = ex - i, ey - j
    rho = np.hypot(rx, ry)
    near = (np.abs(rho - r) < 3.0) & ((rx * nx + ry * ny) > 0.6 * rho)
    if near.sum() < 8:
        return None
    points = np.column_stack([ex[near], ey[near]]).astype(float)
    model = CircleModel.from_estimate(points)  # least squares, then once more on the closest
    if not model:
        return None
    inliers = np.abs(np.hypot(points[:, 0] - model.center[0], points[:, 1] - model.center[1])
                     - model.radius) < 1.0
    model = CircleModel.from_estimate(points[inliers]) if inliers.sum() >= 8 else None
    if not model:
        return None
    (ci, cj), cr = model.center, model.radius
    if abs(cr - r) > 3.0 or math.hypot(ci - i, cj - j) > 3.0 or cr <= 0:
        return None
    theta = np.arctan2(points[inliers, 1] - cj, points[inliers, 0] - ci)
    sectors = np.unique(np.floor((theta + math.pi) / (2 * math.pi) * 64).astype(int) % 64)
    return float(ci), float(cj), float(cr), sectors.size / 64.0


def _ransac_circle(points: np.ndarray, threshold: float, is_model_valid=None):
    """RANSAC circle (skimage) with a fixed seed: the same frame always gives the same fit.
    Returns ``(model, inliers)`` or ``(None, None)``."""
    import warnings

    with warnings.catch_warnings():
        # skimage warns when no sample passes ``is_model_valid``; that is a plain "no circle"
        warnings.simplefilter("ignore", UserWarning)
        model, inliers = ransac(
            points, CircleModel, min_samples=3, residual_threshold=threshold, max_trials=100,
            stop_probability=0.999, rng=np.random.default_rng(12345),
            is_model_valid=is_model_valid,
        )
    if model is None or inliers is None:
        return None, None
    return model, inliers


def _disc_and_ring(quiet: np.ndarray, i: float, j: float, r: float) -> tuple[float, float, float]:
    """Quiet share of the disc within 0.85 r, textured share of the ring 1.15-1.6 r (both
    inside the picture), and the share of the circle inside the picture."""
    reach = int(math.ceil(1.6 * r + 2))
    y0, y1 = max(0, int(j) - reach), min(quiet.shape[0], int(j) + reach + 1)
    x0, x1 = max(0, int(i) - reach), min(quiet.shape[1], int(i) + reach + 1)
    yy, xx = np.ogrid[y0:y1, x0:x1]
    rho = np.hypot(xx - i, yy - j)
    window = quiet[y0:y1, x0:x1]
    disc, ring = rho <= 0.85 * r, (rho > r + 1.5) & (rho <= 1.6 * r + 2)
    if disc.sum() < 4 or ring.sum() < 4:
        return 0.0, 0.0, 0.0
    theta = np.linspace(0, 2 * math.pi, 64, endpoint=False)
    px, py = i + r * np.cos(theta), j + r * np.sin(theta)
    seen = np.mean((px >= 0) & (py >= 0) & (px <= quiet.shape[1] - 1) & (py <= quiet.shape[0] - 1))
    return float(window[disc].mean()), float(1.0 - window[ring].mean()), float(seen)


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
    """Rays of the crop around the ball: ``coeff`` its cubic B-spline coefficients (a cubic
    spline keeps the rim's flank sharper than bilinear interpolation, whose slope is constant
    between pixel centres); the smoothed samples are the raw ones smoothed by a 1 px Gaussian
    along and across the rays (as a 1 px Gaussian of the picture would, for a fraction of its
    cost). A wide first band (more than 6 px each side) only has to bring the circle within a
    pixel or two: it is sampled twice as coarsely, bilinearly."""
    wide = half_width > 6.0
    spacing, step = (3.0, 0.5) if wide else (1.5, 0.25)
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
        raw = ndimage.map_coordinates(coeff, [ys, xs], order=3, mode="nearest", prefilter=False)
    smoothed = ndimage.gaussian_filter1d(raw, 1.0 / step, axis=1, mode="nearest")
    smoothed = ndimage.gaussian_filter1d(smoothed, 1.0 / (r * (theta[1] - theta[0])), axis=0,
                                         mode="wrap")
    return _Rays(theta, radii, raw, smoothed, usable)


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
    coeff = ndimage.spline_filter(crop, 3, output=np.float32, mode="nearest")
    # 2. the outline on narrowing bands from the best cue: the lit rim, the surface's step, or
    # the particle-free disc (chosen again once the circle is close)
    cue = None
    for index, half_width in enumerate((first, *FINE_BANDS_PX)):
        rays = _sample_rays(crop, coeff, glare, cx, cy, r, half_width)
        if index < 2:
            cue = _choose_cue(rays, r, half_width)
        if cue == "particle images":
            last = index == len(FINE_BANDS_PX)
            fit = _hole_circle(crop, glare, cx, cy, r, half_width + (index > 0), name, last)
        else:
            edges = _rim_crossings(rays.raw, rays.radii, r, half_width)
            if cue == "surface edge":  # the rim's flank where it is lit, else the step
                lit = _coherent(edges)
                step = _step_crossings(rays.smooth, rays.raw, rays.radii, r, half_width)
                edges = np.where(lit, edges, step)
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
                 half_width: float, name: str) -> _Circle:
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


def _choose_cue(rays: _Rays, r: float, half_width: float) -> str:
    """A surface standing clear of the background (its step, with the rim's flank where the rim
    is lit), else the lit rim alone, else the particle images."""
    step = _step_crossings(rays.smooth, rays.raw, rays.radii, r, half_width)
    if _share(_coherent(step), rays.usable) >= MIN_RIM_SHARE:
        return "surface edge"
    rim = _coherent(_rim_crossings(rays.raw, rays.radii, r, half_width))
    if _share(rim, rays.usable) >= MIN_RIM_SHARE:
        return "lit rim"
    return "particle images"


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
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN windows: not coherent
            middle = np.nanmedian(window, axis=1)
    return most & found & (np.abs(edges - middle) < 1.0)


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
    the ball, the ray is left out. A particle image touching the outline delays the crossing
    (the robust fit drops such rays).
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
    level = 0.5 * (surface + background)
    cols = np.arange(len(radii))[None, :]
    start = np.argmax(radii >= r - half_width)
    crossed = (prof <= level[:, None]) & (cols >= start)
    crossed &= (radii <= r + half_width + 1.0)[None, :]
    found = crossed.any(axis=1) & clear
    nxt = np.argmax(crossed, axis=1)
    slope = np.diff(prof, axis=1)  # slope[k] between samples k and k+1
    reach = int(round(2.0 / (radii[1] - radii[0])))
    near = np.abs(cols[:, :-1] - nxt[:, None]) <= reach
    k = np.argmin(np.where(near, slope, np.inf), axis=1)
    return np.where(found, _vertex(slope, k, radii), np.nan)


@dataclass
class _Circle:
    center: tuple[float, float]
    radius: float
    covariance: np.ndarray  # (3, 3): x, y, r (px^2)
    residual: float
    arc_share: float


def _robust_circle(points: np.ndarray, theta: np.ndarray, seen: float, name: str,
                   start: tuple[float, float, float], reach: float) -> _Circle:
    """RANSAC circle through outline points, then a Cauchy-loss fit, with its covariance.

    ``theta`` are the points' ray angles (for the residuals' correlation along the outline),
    ``seen`` the share of rays that could give a point (inside the picture, clear of glare).
    Only circles within ``reach`` px of ``start`` (x, y, r) are considered: the points were
    searched there, and a seam's arc inside the ball must not pass for the outline.
    """
    def near_start(model, *_):
        return (abs(model.radius - start[2]) <= reach
                and math.hypot(model.center[0] - start[0], model.center[1] - start[1]) <= reach)

    model, inliers = _ransac_circle(points, 0.5, near_start)
    if model is None or inliers.sum() < 12:
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
    fit = least_squares(
        lambda p: np.hypot(px - p[0], py - p[1]) - p[2], guess, loss="cauchy", f_scale=0.3
    )
    cx, cy, r = (float(v) for v in fit.x)
    dist = np.hypot(px - cx, py - cy) - r
    near = np.abs(dist) < 1.0
    residual = float(np.sqrt(np.mean(dist[near] ** 2))) if near.any() else float("nan")
    keep = np.abs(dist) < max(3.0 * 1.4826 * float(np.median(np.abs(dist))), 0.3)
    cov = _circle_covariance(px[keep], py[keep], cx, cy, dist[keep], theta[keep])
    arc = _arc_share(theta[keep], seen)
    return _Circle((cx, cy), r, cov, residual, arc)


def _arc_share(theta: np.ndarray, seen: float) -> float:
    """Share of the whole outline covered by points (5 deg sectors holding one), at most
    ``seen``."""
    sectors = np.unique(np.floor(np.mod(theta, 2 * math.pi) / math.radians(5.0)).astype(int))
    return float(min(seen, sectors.size / 72.0))


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


# --- the particle-free disc ------------------------------------------------------------------


def _particle_centres(crop: np.ndarray, quiet: np.ndarray, glare: np.ndarray):
    """Sub-pixel centres (x, y) of particle images: local maxima standing clear above their
    surroundings on all sides but one (an edge or a rim line does not), by more than six times
    the smoothed noise inside the ball (``quiet``: pixels known to hold no particle; its median
    absolute deviation, which a seam or a shaded surface hardly moves)."""
    smooth = ndimage.gaussian_filter(crop, 0.6)
    quiet = quiet & ~glare
    sample = smooth[quiet] if np.count_nonzero(quiet) > 50 else smooth.ravel()
    noise = 1.4826 * float(np.median(np.abs(sample - np.median(sample))))
    peak = smooth == ndimage.maximum_filter(smooth, 3)
    peak[:3] = peak[-3:] = False
    peak[:, :3] = peak[:, -3:] = False
    peak &= ~glare
    ys, xs = np.nonzero(peak)
    offsets = ((3, 0), (-3, 0), (0, 3), (0, -3), (2, 2), (2, -2), (-2, 2), (-2, -2))
    ring = np.stack([smooth[ys + dy, xs + dx] for dy, dx in offsets], axis=1)
    ring.sort(axis=1)
    keep = smooth[ys, xs] - ring[:, -2] > 6.0 * max(noise, 1e-6)
    ys, xs = ys[keep], xs[keep]
    c = smooth[ys, xs]
    ox = _parabola(smooth[ys, xs - 1], c, smooth[ys, xs + 1])
    oy = _parabola(smooth[ys - 1, xs], c, smooth[ys + 1, xs])
    return xs + ox, ys + oy


def _parabola(left, centre, right):
    denom = left + right - 2.0 * centre
    offset = np.where(denom < 0, 0.5 * (left - right) / np.where(denom < 0, denom, -1.0), 0.0)
    return np.clip(offset, -0.5, 0.5)


def _quantile_circle(ux, uy, rho, tau):
    """``(dx, dy, q)`` minimising the quantile loss of ``rho_i - (q + ux_i dx + uy_i dy)``
    (a linear programme), or None when it fails."""
    n = rho.size
    eye = sparse.identity(n, format="csr")
    a_eq = sparse.hstack([sparse.csr_matrix(np.column_stack([ux, uy, np.ones(n)])), eye, -eye])
    cost = np.concatenate([[0.0, 0.0, 0.0], np.full(n, tau), np.full(n, 1.0 - tau)])
    bounds = [(None, None)] * 3 + [(0, None)] * (2 * n)
    res = linprog(cost, A_eq=a_eq, b_eq=rho, bounds=bounds, method="highs")
    return tuple(float(v) for v in res.x[:3]) if res.success else None


def _hole_circle(crop, glare, cx, cy, r, inner_px, name, bootstrap=False) -> _Circle:
    """The circle holding ``HOLE_SHARE`` of the particle images near it (quantile regression).

    Particle centres are spread evenly outside the ball and absent inside, so around the true
    circle their distance from the centre has its ``HOLE_SHARE`` quantile ``q`` at
    ``R + HOLE_SHARE (R_out - R)`` over a band reaching ``R_out`` (derived): the fit solves for
    that quantile (a linear programme) and steps back by the offset.
    """
    yy, xx = np.ogrid[0 : crop.shape[0], 0 : crop.shape[1]]
    quiet = (xx - cx) ** 2 + (yy - cy) ** 2 < max(r - inner_px - 3.0, 0.3 * r) ** 2
    px, py = _particle_centres(crop, quiet, glare)
    rho = np.hypot(px - cx, py - cy)
    # the band outside holds about HOLE_POINTS particle images (wider on sparse seeding)
    probe = (rho > r + inner_px) & (rho < r + inner_px + 12.0)
    density = probe.sum() / (2.0 * math.pi * (r + inner_px + 6.0) * 12.0)
    outer = float(np.clip(HOLE_POINTS / max(density * 2.0 * math.pi * r, 1e-9), 6.0, 40.0))
    sel = (rho > r - inner_px) & (rho < r + inner_px + outer)
    if sel.sum() < 20:
        raise WakelineError(f"{name}: no ball found (too few particle images around the ball)")
    px, py = px[sel], py[sel]
    if px.size > 2 * HOLE_POINTS:  # an even thinning leaves the quantile where it is
        pick = np.random.default_rng(12345).choice(px.size, 2 * HOLE_POINTS, replace=False)
        px, py = px[pick], py[pick]
    rho = np.hypot(px - cx, py - cy)
    ux, uy = (px - cx) / rho, (py - cy) / rho
    tau = HOLE_SHARE
    reach = r + inner_px + outer
    fit = _quantile_circle(ux, uy, rho, tau)
    if fit is None:
        raise WakelineError(f"{name}: no ball found (the particle-free disc could not be fitted)")
    dx, dy, q = fit
    radius = (q - tau * reach) / (1.0 - tau)
    # covariance of a quantile regression: tau (1 - tau) / f^2 (X'X)^-1, f = 1 / (band beyond
    # the circle) the density of the even spread at the quantile (asymptotic; doubled for the
    # extreme quantile's skew); the intercept q carries to r scaled by 1 / (1 - tau)
    design = np.column_stack([ux, uy, np.ones(rho.size)])
    f = 1.0 / max(reach - radius, 1.0)
    try:
        cov = 2.0 * tau * (1.0 - tau) / (f * f) * np.linalg.inv(design.T @ design)
    except np.linalg.LinAlgError:
        cov = np.full((3, 3), np.inf)
    cov[2, :] /= 1.0 - tau
    cov[:, 2] /= 1.0 - tau
    if bootstrap:
        # a few particle images decide an extreme quantile, and with part of the outline
        # unseen (a shadow) the solution can jump: the spread of refits on random halves of
        # the particle images (halved, as the variance of a fit to half the data is about
        # twice the whole's) says how far, where the asymptotic formula does not
        rng = np.random.default_rng(12345)
        refits = []
        for _ in range(HOLE_BOOTSTRAP):
            pick = rng.choice(rho.size, rho.size // 2, replace=False)
            again = _quantile_circle(ux[pick], uy[pick], rho[pick], tau)
            if again is not None:
                refits.append((again[0], again[1], (again[2] - tau * reach) / (1.0 - tau)))
        if len(refits) >= HOLE_BOOTSTRAP // 2:
            spread = 0.5 * np.cov(np.array(refits).T)
            if np.trace(spread) > np.trace(cov):
                cov = spread
    theta = np.arctan2(py - cy, px - cx)
    near = np.abs(rho - ux * dx - uy * dy - radius) < 3.0
    return _Circle((cx + dx, cy + dy), float(radius), cov, float("nan"),
                   _arc_share(theta[near], 1.0))


@dataclass
class BallMatch:
    """The ball's own image matched between the frames (see :func:`match_ball_image`)."""

    displacement_px: tuple[float, float]  # A -> B
    covariance_px2: np.ndarray  # (2, 2) of the displacement
    rotation_deg: float  # turn A -> B about the line of sight (ccw on screen)
    pixels: int  # ball pixels matched


def match_ball_image(
    frame_a: np.ndarray, frame_b: np.ndarray, ball_a: BallFit, ball_b: BallFit, *,
    glare_a: np.ndarray | None = None, glare_b: np.ndarray | None = None,
) -> BallMatch | None:
    """Ball displacement A->B by matching the ball's whole visible image between the frames.

    Everything inside the outline moves with the ball: the lit rim, the seam and its stitches,
    the surface's shading. Frame A's ball pixels (inside the outline by a pixel, glare left
    out; without a lit rim also clear of the particle images spilling over the outline) are
    matched to frame B under a shift, a turn of the surface about any axis (the ball spins
    between the frames; the lit rim, fixed to the light, does not turn) and an offset, by
    Gauss-Newton least squares on a cubic-spline image of B started
    from the difference of the two circles. The two laser pulses differ in energy: B is first
    scaled by the ratio of the balls' own brightness spreads (99th - 50th percentile inside
    each circle), since a gain fitted with the shift trades against it (a brighter rim on the
    lit side looks like a shift toward it). The displacement's covariance is the Gauss-Newton
    one, ``s^2 (J'J)^-1`` from the residuals, scaled for their correlation between neighbours.

    Returns None when too few pixels are visible or the match does not converge.
    """
    cx, cy, r = ball_a.center_px[0], ball_a.center_px[1], ball_a.radius_px
    start = (ball_b.center_px[0] - cx, ball_b.center_px[1] - cy)
    crop_a, (x0, y0) = _ball_crop(frame_a, ball_a.center_px, r + 2)
    pad = 4 + int(abs(start[0]) + abs(start[1])) // 8  # room for the search in B
    crop_b, (bx0, by0) = _ball_crop(frame_b, (cx + start[0], cy + start[1]), r + pad)
    # the shading of the surface is the light's, fixed in the lab, and does not turn with the
    # ball: only the pattern finer than a few pixels (seam, stitches, grain, the rim) is matched
    crop_a = crop_a - _box2(crop_a)
    crop_b = crop_b - _box2(crop_b)
    # particle images just outside the outline spill over it and move with the air: a lit rim
    # outshines them, elsewhere the match keeps clear of them
    rim_lit = ball_a.outline == ball_b.outline == "lit rim"
    inset = 0.5 if rim_lit else SPILL_PX
    region = _disc(crop_a.shape, cx - x0, cy - y0, r - inset)
    if glare_a is not None:
        region &= ~glare_a[y0 : y0 + crop_a.shape[0], x0 : x0 + crop_a.shape[1]]
    if region.sum() < 50 or min(crop_b.shape) < 8:
        return None
    region_b = _disc(crop_b.shape, ball_b.center_px[0] - bx0, ball_b.center_px[1] - by0, r - inset)
    spread_a = np.subtract(*np.percentile(crop_a[region], [99, 50]))
    spread_b = np.subtract(*np.percentile(crop_b[region_b], [99, 50])) if region_b.any() else 0.0
    gain = float(np.clip(spread_b / spread_a, 0.5, 2.0)) if spread_a > 0 and spread_b > 0 else 1.0
    crop_b = crop_b / gain
    ys, xs = np.nonzero(region)
    if ys.size > MATCH_PIXELS:
        # a large ball: the pixels with the steepest gradients carry the match (the
        # Gauss-Newton information grows with the gradient squared); the rest is mostly noise
        gy_s, gx_s = np.gradient(ndimage.gaussian_filter(crop_a, 1.0))
        power = (gx_s * gx_s + gy_s * gy_s)[ys, xs]
        keep = np.sort(np.argpartition(power, -MATCH_PIXELS)[-MATCH_PIXELS:])
        ys, xs = ys[keep], xs[keep]
    template = crop_a[ys, xs]
    gy_a, gx_a = np.gradient(crop_a)
    grad_a = gx_a[ys, xs], gy_a[ys, xs]
    xs, ys = xs + x0 - cx, ys + y0 - cy  # about the centre in A
    # the surface turns with the ball's spin, about any axis: a point p = (x, y, z) of the
    # visible hemisphere (z toward the camera) moves by w x p, so a turn about the line of
    # sight moves it around the centre and one about an axis in the picture moves it by w z,
    # most at the middle of the disc and not at all at the limb (orthographic view, derived).
    # The lit rim is where the sheet grazes the ball, fixed to the light: it only moves with
    # the centre
    turns = np.hypot(xs, ys) < r - RIM_DEPTH_PX
    tx, ty = np.where(turns, xs, 0.0), np.where(turns, ys, 0.0)
    tz = np.where(turns, np.sqrt(np.clip(r * r - xs * xs - ys * ys, 0.0, None)), 0.0)
    coeff = ndimage.spline_filter(crop_b, 3, output=np.float32)
    slopes = np.gradient(crop_b)[::-1]  # d/dx, d/dy
    blocked = None if glare_b is None else glare_b[by0 : by0 + crop_b.shape[0],
                                                   bx0 : bx0 + crop_b.shape[1]]

    def columns(gx, gy):
        # d(position)/d(dx, dy, turn about the sight line, about x, about y), and the offset
        return np.column_stack([gx, gy, gx * ty - gy * tx, -gy * tz, gx * tz, np.ones_like(gx)])

    jac_a = columns(*grad_a)
    prior = np.zeros(6)
    prior[2:5] = 1.0 / TURN_PRIOR_RAD**2
    # dx, dy (px), turns about the sight line (ccw on screen), the x and the y axis (rad), offset
    p = np.array([start[0], start[1], 0.0, 0.0, 0.0, 0.0])
    for iteration in range(30):
        c, s_ = math.cos(p[2]) - 1.0, math.sin(p[2])
        qx = cx + p[0] + xs + c * tx + s_ * ty + p[4] * tz - bx0  # ccw on screen: y down
        qy = cy + p[1] + ys - s_ * tx + c * ty - p[3] * tz - by0
        use = (qx > 1) & (qy > 1) & (qx < crop_b.shape[1] - 2) & (qy < crop_b.shape[0] - 2)
        if use.mean() < 0.9:
            return None
        if blocked is not None:
            use &= ~blocked[np.clip(np.rint(qy).astype(int), 0, blocked.shape[0] - 1),
                            np.clip(np.rint(qx).astype(int), 0, blocked.shape[1] - 1)]
        value = ndimage.map_coordinates(coeff, [qy, qx], order=3, prefilter=False)
        gx, gy = (ndimage.map_coordinates(g, [qy, qx], order=1) for g in slopes)
        # the mean of the two frames' slopes (efficient second-order minimisation): the steps
        # converge in a few iterations even with noisy frames, where B's slopes alone crawl
        jac = columns(0.5 * (gx + grad_a[0]), 0.5 * (gy + grad_a[1]))[use]
        resid = (template - value - p[5])[use]
        # Cauchy weights: particle images spilling over the outline move with the air, not
        # with the ball, and leave large residuals (held after three steps, so that the
        # Gauss-Newton steps converge as fast as plain least squares)
        if iteration < 3:
            scale = 3.0 * 1.4826 * float(np.median(np.abs(resid))) + 1e-9
            weight_all = np.zeros(use.size)
            weight_all[use] = 1.0 / (1.0 + (resid / scale) ** 2)
        weight = weight_all[use]
        # a prior on the turns (a bare surface or a rim alone tells nothing of them): spin
        # rates and pulse separations put them within a degree or two (common practice)
        scale2 = float(np.sum(weight * resid * resid)) / max(1.0, float(weight.sum()))
        normal = jac.T @ (jac * weight[:, None]) + np.diag(scale2 * prior)
        gradient = jac.T @ (weight * resid) - scale2 * prior * p
        try:
            step = np.linalg.solve(normal, gradient)
        except np.linalg.LinAlgError:
            return None
        p += step
        if math.hypot(step[0], step[1]) + r * float(np.abs(step[2:5]).sum()) < 2e-3:
            break
    else:
        return None
    # the pattern must be one: the ball's pixels in A and B correlate (a bare surface's noise
    # does not, and its match is a fit to noise)
    shared_ncc = float(np.corrcoef(template[use], value[use])[0, 1])
    if not shared_ncc > MIN_MATCH_NCC:
        return None
    # covariance: a sandwich over blocks of 8 x 8 px, so that residuals correlated within a
    # block (a particle image spilling over the outline, a stitch) count once, not pixel by
    # pixel; its bread uses the product of A's and B's slopes, the information the two frames
    # share (B's slopes alone include its noise's, and a bare surface would look informative),
    # with the turns' prior; the displacement's block of it allows for the turns
    bread = jac_a[use].T @ (jac * weight[:, None]) + np.diag(scale2 * prior)
    bread = 0.5 * (bread + bread.T)
    if np.linalg.eigvalsh(bread)[0] <= 0:
        return None
    block = (np.floor(ys[use] / 8.0) * 4096 + np.floor(xs[use] / 8.0)).astype(np.int64)
    _, label = np.unique(block, return_inverse=True)
    score = jac * (weight * resid)[:, None]
    sums = np.column_stack([np.bincount(label, weights=score[:, k]) for k in range(6)])
    inverse = np.linalg.inv(bread)
    floor = MATCH_FLOOR_PX if rim_lit else PATTERN_FLOOR_PX
    cov = (inverse @ (sums.T @ sums) @ inverse)[:2, :2] + floor**2 * np.eye(2)
    return BallMatch((float(p[0]), float(p[1])), cov, math.degrees(p[2]), int(resid.size))


def _box2(image: np.ndarray) -> np.ndarray:
    """Two passes of a box of ``2 SHADING_PX + 1`` px: close to a Gaussian of about
    ``SHADING_PX`` (a box's deviation is ``(n^2 - 1) / 12`` per pass), at a box's cost."""
    size = 2 * int(SHADING_PX) + 1
    return ndimage.uniform_filter(ndimage.uniform_filter(image, size), size)


def _ball_crop(frame, center_px, reach):
    """``frame`` around a point out to ``reach`` px (float32) and the crop's origin (x0, y0)."""
    height, width = frame.shape
    x0, y0 = max(0, int(center_px[0] - reach)), max(0, int(center_px[1] - reach))
    x1 = min(width, int(center_px[0] + reach) + 2)
    y1 = min(height, int(center_px[1] + reach) + 2)
    return np.asarray(frame[y0:y1, x0:x1], dtype=np.float32), (x0, y0)


def _disc(shape, cx, cy, r) -> np.ndarray:
    yy, xx = np.ogrid[0 : shape[0], 0 : shape[1]]
    return (xx - cx) ** 2 + (yy - cy) ** 2 < r * r


def ball_displacement(
    ball_a: BallFit, ball_b: BallFit, match: BallMatch | None = None
) -> tuple[tuple[float, float], np.ndarray, str]:
    """Displacement A->B (px), its covariance (px^2) and a note when the two measures disagree.

    The difference of the two circles and the image match are weighed by their inverse
    covariances; where they disagree beyond their uncertainties (chi-square above 9.2, the 99 %
    point for two degrees of freedom), the covariance is scaled up to cover the difference.
    """
    circles = np.array([ball_b.center_px[0] - ball_a.center_px[0],
                        ball_b.center_px[1] - ball_a.center_px[1]])
    cov_c = _centre_covariance(ball_a) + _centre_covariance(ball_b)
    if match is None:
        return (float(circles[0]), float(circles[1])), cov_c, ""
    matched = np.asarray(match.displacement_px)
    if not np.all(np.isfinite(cov_c)):
        return (float(matched[0]), float(matched[1])), match.covariance_px2, ""
    info_c, info_m = np.linalg.inv(cov_c), np.linalg.inv(match.covariance_px2)
    cov = np.linalg.inv(info_c + info_m)
    mean = cov @ (info_c @ circles + info_m @ matched)
    diff = matched - circles
    chi2 = float(diff @ np.linalg.solve(cov_c + match.covariance_px2, diff))
    note = ""
    if chi2 > 9.2:
        cov = cov * chi2 / 2.0
        note = (f"the ball's image match and its two circles disagree on the displacement by "
                f"{math.hypot(*diff):.2f} px: its uncertainty is widened to cover it")
    return (float(mean[0]), float(mean[1])), cov, note


def _centre_covariance(ball: BallFit) -> np.ndarray:
    if ball.covariance_px2 is not None:
        return np.asarray(ball.covariance_px2, dtype=np.float64)[:2, :2]
    sx, sy = ball.center_sigma_px
    return np.diag([sx * sx, sy * sy]) if np.isfinite([sx, sy]).all() else np.full((2, 2), np.inf)


def ball_mask(
    shape: tuple[int, int], ball: BallFit, margin_px: float = DEFAULT_MASK_MARGIN_PX
) -> np.ndarray:
    """Pixels covered by the ball plus a margin, ``(H, W)`` bool (True = excluded)."""
    yy, xx = np.ogrid[: shape[0], : shape[1]]
    cx, cy = ball.center_px
    reach = ball.radius_px + margin_px
    return (xx - cx) ** 2 + (yy - cy) ** 2 <= reach * reach


def flight_from_balls(
    ball_a: BallFit,
    ball_b: BallFit,
    *,
    displacement_px: tuple[float, float] | None = None,
    displacement_cov_px2: np.ndarray | None = None,
    dt_s: float | None = None,
    scale_mm_per_px: float | None = None,
    scale_sigma_rel: float = 0.0,
    flight_deg: float | None = None,
) -> Flight:
    """Flight direction and speed from the ball's displacement between the frames.

    Parameters
    ----------
    ball_a, ball_b : BallFit
        The ball in frames A and B.
    displacement_px : (float, float), optional
        Ball displacement A->B (px) when measured more precisely (:func:`ball_displacement`);
        default: difference of the two circle centres.
    displacement_cov_px2 : (2, 2) array, optional
        Its covariance; default that of the two circles' centres.
    dt_s : float, optional
        Time between the frames (s); with ``scale_mm_per_px`` gives the speed.
    scale_mm_per_px : float, optional
    scale_sigma_rel : float
        Relative standard uncertainty of the scale (e.g. from the fitted radius when the scale
        comes from the ball's diameter).
    flight_deg : float, optional
        Override of the direction (deg), for a ball held still (tunnel) or barely moving.

    Returns
    -------
    Flight
        ``direction_deg`` in [0, 360): 0 = toward +x, 90 = toward the top of the picture.
        ``speed_m_s`` = |displacement| * scale / dt (mm/s -> m/s), None without dt or scale;
        standard uncertainties of both (direction: the displacement's covariance across it
        over its length; speed: along it, and the scale's).
    """
    if displacement_px is None:
        dx = ball_b.center_px[0] - ball_a.center_px[0]
        dy = ball_b.center_px[1] - ball_a.center_px[1]
    else:
        dx, dy = (float(v) for v in displacement_px)
    cov = (_centre_covariance(ball_a) + _centre_covariance(ball_b)
           if displacement_cov_px2 is None else np.asarray(displacement_cov_px2, dtype=np.float64))
    distance_px = math.hypot(dx, dy)
    along_var = across_var = float("nan")
    if distance_px > 0 and np.all(np.isfinite(cov)):
        ux, uy = dx / distance_px, dy / distance_px
        along_var = ux * ux * cov[0, 0] + 2 * ux * uy * cov[0, 1] + uy * uy * cov[1, 1]
        across_var = uy * uy * cov[0, 0] - 2 * ux * uy * cov[0, 1] + ux * ux * cov[1, 1]
    speed = speed_sigma = None
    if dt_s and scale_mm_per_px and dt_s > 0 and scale_mm_per_px > 0:
        speed = distance_px * scale_mm_per_px * 1e-3 / dt_s
        if math.isfinite(along_var) and distance_px > 0:
            speed_sigma = speed * math.hypot(math.sqrt(along_var) / distance_px, scale_sigma_rel)
    cov_out = None
    if np.all(np.isfinite(cov)):
        cov_out = tuple(tuple(float(v) for v in row) for row in cov)
    if flight_deg is not None:
        return Flight(float(flight_deg) % 360.0, speed, (dx, dy), source="override",
                      speed_sigma_m_s=speed_sigma, displacement_cov_px2=cov_out)
    direction = math.degrees(math.atan2(-dy, dx)) % 360.0
    sigma_deg = None
    if math.isfinite(across_var) and distance_px > 0:
        sigma_deg = math.degrees(min(math.sqrt(across_var) / distance_px, math.pi))
    return Flight(direction, speed, (dx, dy), source="ball displacement",
                  direction_sigma_deg=sigma_deg, speed_sigma_m_s=speed_sigma,
                  displacement_cov_px2=cov_out)


#: Model uncertainty (deg) of a held ball's free-stream direction: the ball still turns the
#: stream beyond 2.5 radii (its potential flow decays as (R/r)^3, up to 1.5 (R/r)^3 rad, i.e.
#: 5 deg at 2.5 R: derived) and its wake may be deflected; over the field that mostly averages.
STREAM_DIRECTION_FLOOR_DEG = 1.0
#: Model uncertainty (deg) of the air's direction as a stand-in for the flight: a wake that
#: leaves the ball asymmetrically (a swinging ball) is deflected by some degrees.
AIR_DIRECTION_FLOOR_DEG = 5.0


def air_direction(
    vf: VectorField, ball: BallFit, ball_shift_px: float
) -> tuple[float, float] | None:
    """Direction (deg) in which the air near the ball moves with it, and its uncertainty (deg).

    In the lab frame the air far away is at rest and the air the ball drags along (the wake
    behind it, the air pushed ahead of it) moves in the flight direction; the air beside it
    moves back slowly. The vector sum of the valid vectors between 1.2 and 4 radii from the
    centre that move faster than a third of the ball points along the flight. Its uncertainty
    is the spread across that direction over the sum's length (each vector counted as half
    an independent one: windows overlap by half), with ``AIR_DIRECTION_FLOOR_DEG`` added.
    None with fewer than 6 such vectors.
    """
    rho = np.hypot(vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1])
    speed = np.hypot(vf.dx_px, vf.dy_px)
    near = vf.valid & (rho > 1.2 * ball.radius_px) & (rho < 4.0 * ball.radius_px)
    moving = near & np.isfinite(speed) & (speed > ball_shift_px / 3.0)
    if np.count_nonzero(moving) < 6:
        return None
    dx, dy = vf.dx_px[moving], vf.dy_px[moving]
    sx, sy = float(dx.sum()), float(dy.sum())
    length = math.hypot(sx, sy)
    if length == 0:
        return None
    across = (-dx * sy + dy * sx) / length
    spread = math.sqrt(2.0 * float(np.sum(across * across))) / length
    sigma = math.hypot(math.degrees(spread), AIR_DIRECTION_FLOOR_DEG)
    return math.degrees(math.atan2(-sy, sx)) % 360.0, sigma


def flight_from_stream(vf: VectorField, ball: BallFit, *, dt_s=None, scale_mm_per_px=None,
                       displacement_px=(0.0, 0.0)) -> Flight | None:
    """Flight of a held ball (tunnel) from the free stream: opposite to the air's motion.

    The free stream is the median displacement of the valid vectors beyond 2.5 radii from the
    ball; the speed is the air's speed past the ball. Its uncertainty is the vectors' spread
    across the stream over its length, each vector counted as half an independent one, with
    ``STREAM_DIRECTION_FLOOR_DEG`` added. None with fewer than 6 such vectors.
    """
    rho = np.hypot(vf.x_px - ball.center_px[0], vf.y_px - ball.center_px[1])
    far = vf.valid & (rho > 2.5 * ball.radius_px) & np.isfinite(vf.dx_px)
    if np.count_nonzero(far) < 6:
        return None
    dx, dy = vf.dx_px[far], vf.dy_px[far]
    mx, my = float(np.median(dx)), float(np.median(dy))
    length = math.hypot(mx, my)
    if length == 0:
        return None
    across = (-dx * my + dy * mx) / length
    along = (dx * mx + dy * my) / length
    n_eff = max(1.0, 0.5 * dx.size)
    sigma_deg = math.hypot(math.degrees(float(np.std(across)) / math.sqrt(n_eff) / length),
                           STREAM_DIRECTION_FLOOR_DEG)
    speed = speed_sigma = None
    if dt_s and scale_mm_per_px:
        speed = length * scale_mm_per_px * 1e-3 / dt_s
        speed_sigma = float(np.std(along)) / math.sqrt(n_eff) * scale_mm_per_px * 1e-3 / dt_s
    return Flight(math.degrees(math.atan2(my, -mx)) % 360.0, speed,
                  tuple(float(v) for v in displacement_px), source="free stream (held ball)",
                  direction_sigma_deg=sigma_deg, speed_sigma_m_s=speed_sigma)
