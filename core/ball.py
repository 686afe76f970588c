"""The ball in each frame: outline circle, masks, flight direction and speed, scale from its size.

The ball in a PIV frame is a dark disc (no particles inside; the surface is not lit except where
the light sheet cuts it) with a bright rim along part of its outline. It moves several pixels
between the frames, so each frame is fitted on its own:

1. coarse: on a block-averaged, smoothed copy the ball is the darkest round region; its circle
   comes from the region's boundary with the image border left out (a ball cut by the edge still
   fits);
2. fine: along rays from that centre, each edge point is the steepest point of the lit rim's
   outer flank (cubic-spline samples), or, where too little of the rim is lit, where the
   particle speckle begins (the ball's surface and rim are smooth along the outline, the seeded
   air is not); a robust circle fit (RANSAC with :class:`skimage.measure.CircleModel`) drops
   rays spoilt by particles or reflections, and a least-squares fit on the kept points gives the
   sub-pixel circle.

Conventions: image coordinates (x = column right, y = row down, origin at the top-left pixel
centre); flight direction 0 deg = toward +x, 90 deg = toward the top of the picture.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares
from skimage.measure import CircleModel, ransac

from core import WakelineError
from core.results import BallFit, Flight

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
#: Share of the outline's rays with a lit rim above which only the rim gives the outline.
MIN_RIM_SHARE = 0.3
#: Half-width (px) of the search band up to which the lit rim alone may give the outline: in the
#: wider first bands of a large ball, bright particles far from the outline pass for a rim.
RIM_ONLY_BAND_PX = 4.0


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
) -> BallFit:
    """Fit the ball's outline circle in one frame.

    Parameters
    ----------
    frame : (H, W) ndarray
        One PIV frame (counts).
    radius_hint_px : float, optional
        Expected radius (from the ball diameter and a known scale); only regions within 25 %
        of it are considered.
    name : str
        Frame name used in error messages.

    Returns
    -------
    BallFit
        Centre (x, y) and radius in px, RMS edge residual, and whether the image edge cuts it.

    Raises
    ------
    core.WakelineError
        When no dark round region of plausible size exists ("no ball found"), or too little
        of its outline lies inside the image.
    """
    image = np.asarray(frame, dtype=np.float64)
    if image.ndim != 2 or min(image.shape) < 16:
        raise WakelineError(f"{name}: not a 2-D frame large enough to hold a ball")
    cx, cy, r = _coarse_circle(image, radius_hint_px, name)
    smooth = ndimage.gaussian_filter(image, 1.0)
    residual = float("nan")
    for half_width in (max(6.0, 0.12 * r), 4.0, 3.0):
        points = _edge_points(image, smooth, cx, cy, r, half_width)
        if len(points) < 12:
            raise WakelineError(f"{name}: no ball found (too little of an outline is visible)")
        cx, cy, r, residual = _robust_circle(points, name)
    height, width = image.shape
    cut = cx - r < -0.5 or cy - r < -0.5 or cx + r > width - 0.5 or cy + r > height - 0.5
    return BallFit(center_px=(cx, cy), radius_px=r, residual_px=residual, cut_by_edge=bool(cut))


def _coarse_circle(
    image: np.ndarray, radius_hint_px: float | None, name: str
) -> tuple[float, float, float]:
    """Centre and radius (px, full resolution) of the darkest round region."""
    factor = max(1, min(image.shape) // 192)
    small = _block_mean(image, factor)
    small = ndimage.gaussian_filter(small, 2.5)
    low = np.percentile(small, 0.5)
    air = np.median(small)
    # the ball's surface is much darker than the seeded air (assumes a camera background well
    # below the mean particle light, as PIV exposures are set)
    if not low < 0.6 * air:
        raise WakelineError(f"{name}: no ball found (no region much darker than the seeded air)")
    dark = ndimage.binary_opening(small < low + 0.5 * (air - low), iterations=2)
    labels, _ = ndimage.label(dark)
    best = None
    for index, region in enumerate(ndimage.find_objects(labels), start=1):
        candidate = _score_region(labels[region] == index, region, small.shape, factor)
        if candidate is None:
            continue
        r, score = candidate[2], candidate[3]
        if radius_hint_px is not None and abs(r - radius_hint_px) > 0.25 * radius_hint_px:
            continue
        if best is None or score > best[3]:
            best = candidate
    if best is None:
        hint = "" if radius_hint_px is None else f" near radius {radius_hint_px:.0f} px"
        raise WakelineError(f"{name}: no ball found (no dark round region{hint})")
    return best[0], best[1], best[2]


def _block_mean(image: np.ndarray, factor: int) -> np.ndarray:
    if factor == 1:
        return image
    h, w = (s // factor * factor for s in image.shape)
    return image[:h, :w].reshape(h // factor, factor, w // factor, factor).mean(axis=(1, 3))


def _score_region(
    blob: np.ndarray, region: tuple[slice, slice], shape: tuple[int, int], factor: int
) -> tuple[float, float, float, float] | None:
    """Circle of a dark region from its boundary (image border excluded) and a roundness score."""
    area = int(blob.sum())
    if area < 30:
        return None
    interior = ndimage.binary_erosion(np.pad(blob, 1), border_value=0)[1:-1, 1:-1]
    by, bx = np.nonzero(blob & ~interior)
    by = by + region[0].start
    bx = bx + region[1].start
    away = (bx > 0) & (by > 0) & (bx < shape[1] - 1) & (by < shape[0] - 1)
    if away.sum() < 12:
        return None
    model = CircleModel.from_estimate(np.column_stack([bx[away], by[away]]).astype(float))
    if not model:
        return None
    (xc, yc), r = model.center, model.radius
    if not 4.0 <= r <= 0.75 * max(shape):
        return None
    expected = _disc_area_inside(xc, yc, r, shape)
    if expected < 0.3 * math.pi * r * r:
        return None
    fill = area / expected
    spread = np.std(np.hypot(bx[away] - xc, by[away] - yc)) / r
    if not 0.7 < fill < 1.3 or spread > 0.15:
        return None
    score = area * (1.0 - abs(1.0 - fill)) * (1.0 - spread)
    # block centre -> pixel coordinate
    return (xc + 0.5) * factor - 0.5, (yc + 0.5) * factor - 0.5, r * factor, score


def _disc_area_inside(xc: float, yc: float, r: float, shape: tuple[int, int]) -> float:
    """Pixel count of the disc (xc, yc, r) that falls inside an image of ``shape``."""
    y0, y1 = max(0, int(yc - r) - 1), min(shape[0], int(yc + r) + 2)
    x0, x1 = max(0, int(xc - r) - 1), min(shape[1], int(xc + r) + 2)
    yy, xx = np.mgrid[y0:y1, x0:x1]
    return float(np.count_nonzero((xx - xc) ** 2 + (yy - yc) ** 2 <= r * r))


def _edge_points(
    image: np.ndarray, smooth: np.ndarray, cx: float, cy: float, r: float, half_width: float
) -> np.ndarray:
    """Sub-pixel outline points, one per ray, ``(K, 2)`` (x, y); rays leaving the image dropped.

    The ball's surface and rim are smooth along the outline while the seeded air is speckled, so
    along each circle of radius ``rho`` the mean absolute difference between neighbouring rays
    ("texture") is low on the ball and high in the air, whatever the rim's brightness. On each
    ray the edge is where the texture, walking outward, first crosses half-way between its
    level well inside and its level well outside.
    """
    n_rays = int(np.clip(2.0 * math.pi * r / 1.5, 90, 2880))
    theta = np.linspace(0.0, 2.0 * math.pi, n_rays, endpoint=False)
    step = 0.25
    radii = np.arange(r - half_width - 4.0, r + half_width + 6.0 + step / 2, step)
    xs = cx + np.cos(theta)[:, None] * radii
    ys = cy + np.sin(theta)[:, None] * radii
    height, width = smooth.shape
    prof = ndimage.map_coordinates(smooth, [ys, xs], order=1, mode="nearest")
    texture = np.abs(np.roll(prof, -1, axis=0) - prof)
    texture = ndimage.uniform_filter1d(texture, 5, axis=0, mode="wrap")
    edges = _texture_crossings(texture, radii, r, half_width)
    raw = _sample_cubic(image, xs, ys)
    rim_edges = _rim_crossings(raw, radii, r, half_width)
    # a lit rim's outer flank is a far sharper outline than the start of the speckle: where the
    # sheet lights enough of the rim, its rays alone give the circle once the band is narrow
    # (the speckle's edge is spoilt by particle images touching the outline, up to a pixel)
    lit = np.count_nonzero(np.isfinite(rim_edges)) >= MIN_RIM_SHARE * len(rim_edges)
    if lit and half_width <= RIM_ONLY_BAND_PX:
        edges = rim_edges
    else:
        edges = np.where(np.isfinite(rim_edges), rim_edges, edges)
    inside = (xs >= 0) & (ys >= 0) & (xs <= width - 1) & (ys <= height - 1)
    # rays whose search band (or the 3 neighbours each side used for texture) leaves the image
    keep = ndimage.minimum_filter1d(inside.all(axis=1).astype(np.uint8), 9, mode="wrap") > 0
    ok = np.isfinite(edges) & keep
    th = theta[ok]
    return np.column_stack([cx + edges[ok] * np.cos(th), cy + edges[ok] * np.sin(th)])


def _sample_cubic(image: np.ndarray, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """Cubic-spline samples of ``image`` at ``(xs, ys)`` (px), splined on their bounding box only.

    A cubic spline keeps the rim's flank sharper than bilinear interpolation, whose slope is
    constant between pixel centres and so places the steepest point less precisely.
    """
    height, width = image.shape
    x0 = int(np.clip(np.floor(xs.min()) - 4, 0, width - 1))
    x1 = int(np.clip(np.ceil(xs.max()) + 5, x0 + 1, width))
    y0 = int(np.clip(np.floor(ys.min()) - 4, 0, height - 1))
    y1 = int(np.clip(np.ceil(ys.max()) + 5, y0 + 1, height))
    crop = image[y0:y1, x0:x1]
    return ndimage.map_coordinates(crop, [ys - y0, xs - x0], order=3, mode="nearest")


def _rim_crossings(prof: np.ndarray, radii: np.ndarray, r: float, half_width: float) -> np.ndarray:
    """Outer half-level radius of a bright lit rim on each ray (NaN where the rim is not lit).

    Where the sheet lights the rim it is far brighter than the seeded air (mean over the outer
    part of the ray), and its outer flank is the ball's outline.
    """
    outer = radii >= r + half_width + 1.0
    air = prof[:, outer].mean(axis=1)
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
    lit = crossed.any(axis=1) & (peak > 3.0 * np.maximum(air, 1e-9))
    # steepest descent of the outer flank near the half-level crossing: a blurred step keeps its
    # steepest point where the step is, whatever the rim's height
    slope = np.diff(prof, axis=1)  # slope[k] between samples k and k+1
    near = (cols[:, :-1] >= peak_idx[:, None]) & (np.abs(cols[:, :-1] - nxt[:, None]) <= 6)
    k = np.argmin(np.where(near, slope, np.inf), axis=1)
    k = np.clip(k, 1, slope.shape[1] - 2)
    s0, s1, s2 = slope[rows, k - 1], slope[rows, k], slope[rows, k + 1]
    denom = s0 - 2.0 * s1 + s2
    offset = np.clip(np.where(denom != 0, 0.5 * (s0 - s2) / np.where(denom != 0, denom, 1.0), 0.0),
                     -0.5, 0.5)
    step = radii[1] - radii[0]
    return np.where(lit, radii[k] + (0.5 + offset) * step, np.nan)


def _texture_crossings(
    texture: np.ndarray, radii: np.ndarray, r: float, half_width: float
) -> np.ndarray:
    """Radius where each row's texture first rises half-way to the air level (NaN: none)."""
    inner = radii <= r - half_width - 1.0
    outer = radii >= r + half_width + 1.0
    t_in = np.median(texture[:, inner], axis=1)
    t_out = np.median(texture[:, outer], axis=1)
    level = 0.5 * (t_in + t_out)
    band = (radii >= r - half_width - 1.0) & (radii <= r + half_width + 1.0)
    crossed = (texture >= level[:, None]) & band[None, :]
    found = crossed.any(axis=1) & (t_out > 3.0 * t_in)
    nxt = np.maximum(np.argmax(crossed, axis=1), 1)
    rows = np.arange(len(texture))
    p0, p1 = texture[rows, nxt - 1], texture[rows, nxt]
    frac = np.clip((level - p0) / np.where(p1 != p0, p1 - p0, 1.0), 0.0, 1.0)
    return np.where(found, radii[nxt - 1] + frac * (radii[1] - radii[0]), np.nan)


def _robust_circle(points: np.ndarray, name: str) -> tuple[float, float, float, float]:
    """RANSAC circle through outline points, then least squares on its inliers."""
    rng = np.random.default_rng(12345)  # fixed: the same frame always gives the same fit
    model, inliers = ransac(
        points, CircleModel, min_samples=3, residual_threshold=1.0, max_trials=200, rng=rng
    )
    if model is None or inliers is None or inliers.sum() < 12:
        raise WakelineError(f"{name}: no ball found (the outline points do not form a circle)")
    final = CircleModel.from_estimate(points[inliers])
    if not final:
        raise WakelineError(f"{name}: no ball found (circle fit failed)")
    # the edge-point errors are skewed (a particle touching the outline pushes a point outward),
    # so the last step is a Cauchy-loss fit on all points: it follows the densest points
    start = np.array([final.center[0], final.center[1], final.radius])
    px, py = points[:, 0], points[:, 1]
    fit = least_squares(
        lambda p: np.hypot(px - p[0], py - p[1]) - p[2], start, loss="cauchy", f_scale=0.3
    )
    cx, cy, r = (float(v) for v in fit.x)
    dist = np.hypot(px - cx, py - cy) - r
    near = np.abs(dist) < 1.0
    residual = float(np.sqrt(np.mean(dist[near] ** 2))) if near.any() else float("nan")
    return cx, cy, r, residual


def refine_displacement(
    frame_a: np.ndarray, frame_b: np.ndarray, ball_a: BallFit, ball_b: BallFit
) -> tuple[float, float]:
    """Ball displacement A->B (px) by matching the ball's own image between the frames.

    The band just inside the outline (rim and surface, no particles) moves rigidly with the
    ball, so the shift that best maps frame A's band onto frame B (least squares, Gauss-Newton
    on a cubic-spline image of B) is far more precise than the difference of two circle fits,
    which start it. Falls back to that difference when the match does not converge.
    """
    cx, cy, r = ball_a.center_px[0], ball_a.center_px[1], ball_a.radius_px
    sx = ball_b.center_px[0] - cx
    sy = ball_b.center_px[1] - cy
    height, width = frame_a.shape
    yy, xx = np.mgrid[0:height, 0:width]
    rho = np.hypot(xx - cx, yy - cy)
    band = (rho > r - 8.0) & (rho < r - 0.5)
    band &= (xx + sx > 1) & (xx + sx < width - 2) & (yy + sy > 1) & (yy + sy < height - 2)
    if band.sum() < 50:
        return sx, sy
    ys, xs = np.nonzero(band)
    template = np.asarray(frame_a, dtype=np.float64)[ys, xs]
    coeff = ndimage.spline_filter(np.asarray(frame_b, dtype=np.float64), order=3)
    gy_b, gx_b = np.gradient(np.asarray(frame_b, dtype=np.float64))
    start = (sx, sy)
    for _ in range(8):
        pts = [ys + sy, xs + sx]
        value = ndimage.map_coordinates(coeff, pts, order=3, prefilter=False)
        gx = ndimage.map_coordinates(gx_b, pts, order=1)
        gy = ndimage.map_coordinates(gy_b, pts, order=1)
        jac = np.column_stack([gx, gy])
        step, *_ = np.linalg.lstsq(jac, template - value, rcond=None)
        sx, sy = sx + float(step[0]), sy + float(step[1])
        if math.hypot(*step) < 1e-3:
            break
    if math.hypot(sx - start[0], sy - start[1]) > 1.5:
        return start
    return sx, sy


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
    dt_s: float | None = None,
    scale_mm_per_px: float | None = None,
    flight_deg: float | None = None,
) -> Flight:
    """Flight direction and speed from the ball's displacement between the frames.

    Parameters
    ----------
    ball_a, ball_b : BallFit
        The ball in frames A and B.
    dt_s : float, optional
        Time between the frames (s); with ``scale_mm_per_px`` gives the speed.
    scale_mm_per_px : float, optional
    displacement_px : (float, float), optional
        Ball displacement A->B (px) when measured more precisely (:func:`refine_displacement`);
        default: difference of the two circle centres.
    flight_deg : float, optional
        Override of the direction (deg), for a ball held still (tunnel) or barely moving.

    Returns
    -------
    Flight
        ``direction_deg`` in [0, 360): 0 = toward +x, 90 = toward the top of the picture.
        ``speed_m_s`` = |displacement| * scale / dt (mm/s -> m/s), None without dt or scale.
    """
    if displacement_px is None:
        dx = ball_b.center_px[0] - ball_a.center_px[0]
        dy = ball_b.center_px[1] - ball_a.center_px[1]
    else:
        dx, dy = (float(v) for v in displacement_px)
    distance_px = math.hypot(dx, dy)
    speed = None
    if dt_s and scale_mm_per_px and dt_s > 0 and scale_mm_per_px > 0:
        speed = distance_px * scale_mm_per_px * 1e-3 / dt_s
    if flight_deg is not None:
        return Flight(float(flight_deg) % 360.0, speed, (dx, dy), source="override")
    direction = math.degrees(math.atan2(-dy, dx)) % 360.0
    return Flight(direction, speed, (dx, dy), source="ball displacement")
