"""The ball's motion between the frames: image match, displacement, flight and speed."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from core.ball.constants import (
    MATCH_FLOOR_PX,
    MATCH_PIXELS,
    MIN_MATCH_NCC,
    PATTERN_FLOOR_PX,
    RIM_DEPTH_PX,
    SHADING_PX,
    SPILL_PX,
    TURN_PRIOR_RAD,
)
from core.results import GIVEN_FLIGHT, BallFit, Flight, VectorField


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
    spread_a = _spread(crop_a[region])
    spread_b = _spread(crop_b[region_b]) if region_b.any() else 0.0
    gain = float(np.clip(spread_b / spread_a, 0.5, 2.0)) if spread_a > 0 and spread_b > 0 else 1.0
    crop_b = crop_b / gain
    ys, xs = np.divmod(np.flatnonzero(region), region.shape[1])  # np.nonzero is slow in 2-D
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
        # converged when the last step moved the ball by a thousandth of a pixel and the turns
        # its surface by a twentieth at most (r times the turn): the turns, which mostly the
        # prior holds, creep on for ten more steps that change the displacement by less than a
        # thousandth of a pixel (on the 2560 x 2160 benchmark shot)
        if math.hypot(step[0], step[1]) < 1e-3 and r * float(np.abs(step[2:5]).sum()) < 5e-2:
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


def _spread(values: np.ndarray) -> float:
    """99th - 50th percentile of the ball's pixels. Sorted first: numpy's vectorised sort and
    the percentiles of a sorted array cost less than the percentiles' selection (the same
    values)."""
    return float(np.subtract(*np.percentile(np.sort(values), [99, 50])))


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
        return Flight(float(flight_deg) % 360.0, speed, (dx, dy), source=GIVEN_FLIGHT,
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
