"""Proposed separation angles: track each separated shear layer and carry it back to the ball.

PIV cannot resolve the boundary layer (sub-mm), so separation is located the way the trade
does it (common practice): find the separated shear layer - a ridge of vorticity of the sign
that side produces - in the band outside the masked ball, follow it along the ball, fit its
path and extrapolate the path to the ball's outline. Windows that touch the mask smear the
field, so ridge points closer to the outline than ``near_wall_px`` (about one final window) are
not used; the fitted path bridges that band.

Angles follow the shot convention: from the plane through the ball centre normal to the flight,
positive rearward; *upper* is the side toward the top of the picture (core.geometry).

Uncertainty of a proposal: the fit's standard error, propagated to the angle, combined with a
floor for the extrapolation across the near-wall band (``MODEL_FLOOR_DEG``), calibrated on
synthetic shots with known truth (core.synth_shot; tests/test_separation.py checks coverage).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.optimize import least_squares

from core.geometry import flight_unit, side_normal
from core.results import SeparationResult, SideProposal

#: Uncertainty floor (deg) for bridging the near-wall band by extrapolation (calibrated on
#: synthetic shots, see module docstring).
MODEL_FLOOR_DEG = 1.5
#: Wake state threshold (deg): sides differ when |upper - lower| exceeds the larger of this and
#: the combined uncertainty.
STATE_THRESHOLD_DEG = 5.0
#: Ridge points per side needed for a proposal.
MIN_RIDGE_POINTS = 8
#: A ridge must stand this many noise standard deviations above zero.
MIN_RIDGE_SNR = 6.0


@dataclass
class FieldOnGrid:
    """A scalar field on a regular grid of vector positions (image coordinates, px)."""

    values: np.ndarray  # (M, N), NaN where unknown
    x0_px: float
    y0_px: float
    spacing_px: float

    def sample(self, x_px: np.ndarray, y_px: np.ndarray) -> np.ndarray:
        """Bilinear samples; NaN outside the grid or next to unknown values."""
        gi = (np.asarray(y_px) - self.y0_px) / self.spacing_px
        gj = (np.asarray(x_px) - self.x0_px) / self.spacing_px
        return ndimage.map_coordinates(self.values, [gi, gj], order=1, cval=np.nan)


@dataclass
class Ridge:
    """Ridge points of one side's shear layer, in side coordinates (px from the ball centre)."""

    xi_px: np.ndarray  # rearward along the flight axis
    zeta_px: np.ndarray  # toward the side
    strength: np.ndarray  # signed vorticity at the ridge (side's sign made positive)
    noise: float


def propose_separation(
    vorticity: FieldOnGrid,
    center_px: tuple[float, float],
    radius_px: float,
    flight_deg: float,
    *,
    near_wall_px: float = 12.0,
) -> SeparationResult:
    """Separation proposal on both sides, wake deflection and wake state.

    Parameters
    ----------
    vorticity : FieldOnGrid
        Vorticity (counter-clockwise positive on screen; any consistent unit) on a fine grid
        around the ball; NaN in masked windows.
    center_px, radius_px : ball circle at mid-exposure (image coordinates, px).
    flight_deg : float
        Flight direction (0 = +x, 90 = toward the top of the picture).
    near_wall_px : float
        Ridge points closer than this to the outline are not trusted (windows touch the mask).

    Returns
    -------
    SeparationResult
    """
    noise = _noise_level(vorticity, center_px, radius_px)
    ridges, sides = {}, {}
    for side in ("upper", "lower"):
        ridge = trace_ridge(vorticity, center_px, radius_px, flight_deg, side, noise, near_wall_px)
        ridges[side] = ridge
        sides[side] = fit_separation(ridge, radius_px, near_wall_px)
    deflection = wake_deflection(ridges["upper"], ridges["lower"], radius_px)
    state = wake_state(sides["upper"], sides["lower"])
    return SeparationResult(sides["upper"], sides["lower"], deflection, state)


def side_sign(flight_deg: float, side: str) -> float:
    """Sign of the vorticity (counter-clockwise positive on screen) of ``side``'s shear layer.

    Relative to the ball the air streams rearward outside the layer and is nearly still in the
    wake; in (rearward, side-normal) axes that shear has vorticity of sign
    ``-det[rearward, normal]`` in screen (y-up) axes (derived).
    """
    fx, fy = flight_unit(flight_deg)
    nx, ny = side_normal(flight_deg, side)
    # screen axes: y_up = -y
    rx, ry = -fx, fy
    sx, sy = nx, -ny
    return -math.copysign(1.0, rx * sy - ry * sx)


def _noise_level(field: FieldOnGrid, center_px, radius_px) -> float:
    """Robust standard deviation of the vorticity away from the ball (median absolute value)."""
    m, n = field.values.shape
    yy = field.y0_px + field.spacing_px * np.arange(m)[:, None]
    xx = field.x0_px + field.spacing_px * np.arange(n)[None, :]
    far = np.hypot(xx - center_px[0], yy - center_px[1]) > 1.3 * radius_px
    vals = field.values[far & np.isfinite(field.values)]
    if vals.size < 10:
        vals = field.values[np.isfinite(field.values)]
    if vals.size == 0:
        return float("inf")
    return float(1.4826 * np.median(np.abs(vals - np.median(vals)))) + 1e-12


def trace_ridge(
    field: FieldOnGrid,
    center_px: tuple[float, float],
    radius_px: float,
    flight_deg: float,
    side: str,
    noise: float,
    near_wall_px: float,
) -> Ridge:
    """Ridge of the side's shear-layer vorticity along rays from the ball centre.

    Rays fan out every 1 deg from -30 to +85 deg (separation convention); on each the ridge is
    the first local maximum (walking outward from the near-wall band) of the side-signed
    vorticity above ``MIN_RIDGE_SNR`` noise levels and half the side's strongest value, refined
    to sub-sample position by a parabola through the three samples around it.
    """
    fx, fy = flight_unit(flight_deg)
    nx, ny = side_normal(flight_deg, side)
    sign = side_sign(flight_deg, side)
    angles = np.radians(np.arange(-30.0, 85.5, 1.0))
    step = 0.5
    radii = radius_px + np.arange(near_wall_px - 4.0, 0.9 * radius_px, step)
    ex = np.cos(angles)[:, None] * nx - np.sin(angles)[:, None] * fx
    ey = np.cos(angles)[:, None] * ny - np.sin(angles)[:, None] * fy
    xs = center_px[0] + ex * radii[None, :]
    ys = center_px[1] + ey * radii[None, :]
    prof = sign * field.sample(xs, ys)
    strongest = np.nanmax(prof) if np.isfinite(prof).any() else np.nan
    level = max(MIN_RIDGE_SNR * noise, 0.5 * strongest) if np.isfinite(strongest) else np.inf
    xi, zeta, strength = [], [], []
    for k in range(len(angles)):
        hit = _first_peak(prof[k], level)
        if hit is None:
            continue
        j, offset = hit
        rho = radii[j] + offset * step
        if rho - radius_px < near_wall_px:
            continue
        a = angles[k]
        xi.append(rho * math.sin(a))
        zeta.append(rho * math.cos(a))
        strength.append(prof[k, j])
    return Ridge(np.array(xi), np.array(zeta), np.array(strength), noise)


def _first_peak(profile: np.ndarray, level: float) -> tuple[int, float] | None:
    """Index and parabolic sub-sample offset of the first local maximum above ``level``."""
    p = profile
    ok = np.isfinite(p)
    for j in range(1, len(p) - 1):
        if not (ok[j - 1] and ok[j] and ok[j + 1]):
            continue
        if p[j] >= level and p[j] >= p[j - 1] and p[j] > p[j + 1]:
            denom = p[j - 1] - 2.0 * p[j] + p[j + 1]
            offset = 0.5 * (p[j - 1] - p[j + 1]) / denom if denom < 0 else 0.0
            return j, float(np.clip(offset, -0.5, 0.5))
    return None


def fit_separation(ridge: Ridge, radius_px: float, near_wall_px: float) -> SideProposal:
    """Fit the ridge's path near the ball and extrapolate it to the outline.

    The path is a quadratic ``zeta(xi)`` (side coordinates) fitted to the ridge points within
    ``near_wall_px + radius/2`` of the outline, the most upstream part of the layer; its crossing
    with the outline circle upstream of the first point is the proposed separation.
    """
    if ridge.xi_px.size < MIN_RIDGE_POINTS:
        if ridge.xi_px.size == 0:
            reason = "no shear layer next to the ball (attached flow, or too few valid vectors)"
        else:
            reason = (
                f"no separated shear layer long enough to follow (attached flow?): only "
                f"{ridge.xi_px.size} ridge points"
            )
        return SideProposal(None, None, 0.0, reason)
    gap = np.hypot(ridge.xi_px, ridge.zeta_px) - radius_px
    order = np.argsort(ridge.xi_px)
    xi, zeta, gap, strength = (v[order] for v in (ridge.xi_px, ridge.zeta_px, gap, ridge.strength))
    near = gap <= near_wall_px + 0.5 * radius_px
    if near.sum() < MIN_RIDGE_POINTS:
        return SideProposal(None, None, 0.0, "shear layer does not come near the ball")
    phi = np.degrees(np.arctan2(xi[near], zeta[near]))
    gap, strength = gap[near], strength[near]
    fit = _fit_departure(phi, gap, strength, radius_px)
    if fit is None:
        return SideProposal(None, None, 0.0, "fitted shear-layer path does not meet the ball")
    angle, spread = fit
    uncertainty = math.hypot(spread, MODEL_FLOOR_DEG)
    snr = float(np.median(strength) / max(ridge.noise, 1e-12))
    quality = float(np.clip(min(1.0, snr / 30.0) * min(1.0, near.sum() / 25.0), 0.0, 1.0))
    return SideProposal(round(angle, 2), round(uncertainty, 2), round(quality, 3), "")


def _fit_departure(phi_deg, gap_px, weight, radius_px):
    """Fit ``gap = R (c1 t + c2 t^2)``, ``t = radians(phi - phi_s)``, to the ridge's distance from
    the outline; the layer leaves the outline at ``phi_s`` with slope ``c1 >= 0`` (it cannot
    leave inward). Returns ``(phi_s, standard error)`` in deg, or None when the fit fails.
    """
    w = np.sqrt(np.clip(weight / np.max(weight), 1e-6, None))

    def residual(p):
        t = np.radians(phi_deg - p[0])
        return w * (radius_px * (p[1] * t + p[2] * t * t) - gap_px)

    first = float(phi_deg.min())
    sol = least_squares(
        residual, [first - 15.0, 0.2, 0.5], bounds=([first - 60.0, 0.0, -2.0], [first - 0.5, 1.0, 5.0])
    )
    if not sol.success:
        return None
    dof = max(1, len(phi_deg) - 3)
    sigma2 = float(np.sum(sol.fun**2) / dof)
    cov = np.linalg.pinv(sol.jac.T @ sol.jac) * sigma2
    return float(sol.x[0]), float(np.sqrt(max(cov[0, 0], 0.0)))


def wake_deflection(upper: Ridge, lower: Ridge, radius_px: float) -> float | None:
    """Direction of the wake centreline relative to the rearward axis (deg, + toward upper).

    The centreline is the midline of the two shear layers behind the ball (xi > 0.6 R),
    where both are seen at matching xi; its slope is fitted by least squares.
    """
    if upper.xi_px.size < MIN_RIDGE_POINTS or lower.xi_px.size < MIN_RIDGE_POINTS:
        return None
    lo = max(0.6 * radius_px, upper.xi_px.min(), lower.xi_px.min())
    hi = min(upper.xi_px.max(), lower.xi_px.max())
    if hi - lo < 0.3 * radius_px:
        return None
    xi = np.linspace(lo, hi, 20)
    ou, ol = np.argsort(upper.xi_px), np.argsort(lower.xi_px)
    zu = np.interp(xi, upper.xi_px[ou], upper.zeta_px[ou])
    zl = np.interp(xi, lower.xi_px[ol], lower.zeta_px[ol])
    mid = 0.5 * (zu - zl)  # lower's zeta points the other way
    slope = np.polyfit(xi, mid, 1)[0]
    return round(math.degrees(math.atan(slope)), 2)


def wake_state(upper: SideProposal, lower: SideProposal) -> str:
    """Our label for the shot: which side holds on longer, if the difference is clear.

    "symmetric" when ``|upper - lower| <= max(STATE_THRESHOLD_DEG, combined uncertainty)``,
    else "upper side holds on longer" / "lower side holds on longer" (the side with the larger,
    i.e. later, separation angle); "undetermined" without both proposals.
    """
    if upper.angle_deg is None or lower.angle_deg is None:
        return "undetermined"
    combined = math.hypot(upper.uncertainty_deg or 0.0, lower.uncertainty_deg or 0.0)
    diff = upper.angle_deg - lower.angle_deg
    if abs(diff) <= max(STATE_THRESHOLD_DEG, combined):
        return "symmetric"
    return "upper side holds on longer" if diff > 0 else "lower side holds on longer"
