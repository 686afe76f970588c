"""The wake behind the ball: its direction and the state the two separation angles imply."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.geometry import flight_unit, side_normal
from core.results import SideProposal, VectorField

#: Wake state threshold (deg): sides differ when |upper - lower| exceeds the larger of this and
#: the combined uncertainty.
STATE_THRESHOLD_DEG = 5.0
#: The state when the sides are not shown to differ. Not "symmetric": the two angles may well
#: differ by less than their uncertainties can tell (sessions written before this label say
#: "symmetric"; core.summary reads that as this).
NO_CLEAR_DIFFERENCE = "no clear difference"


#: The wake deflection's uncertainty is this many standard uncertainties, meant to cover the
#: truth in 95 % of shots like the separation angles': chosen on the physical family (the 95th
#: percentile of its |error| over the standard uncertainty, 2.74 on 84 shots, rounded up) and
#: reported on the kinematic one (docs/separation_accuracy.md). The normal distribution's 2
#: covered 86 % of the physical family's errors: the wake's own asymmetry is not all of it.
WAKE_COVERAGE_K = 2.75


@dataclass(frozen=True)
class WakeDirection:
    """The wake centreline's direction relative to the rearward axis (deg, + toward upper) and
    its expanded uncertainty (``WAKE_COVERAGE_K`` standard uncertainties)."""

    deflection_deg: float
    uncertainty_deg: float


def wake_direction(
    field: VectorField, origin_px, ball, *, lab_frame: bool = False,
    reach=(1.2, 4.0),
) -> WakeDirection | None:
    """Direction of the wake centreline relative to the rearward axis, with its uncertainty.

    Behind the ball (``reach`` radii from its centre along the axis, the ends faded in over a
    third of a radius, within 1.5 radii of it) the wake is the air that keeps up with the ball:
    weight ``1 - |u|/U`` in the ball frame, or the lab-frame motion along the flight over the
    ball's, ``u . D / |D|^2`` (clipped to 0..1). The centreline is the straight line fitted to
    the vectors' positions with those weights (weighted least squares of the cross-axis
    position on the along-axis one).

    Its uncertainty comes from what a straight, symmetric wake would not have: the weights'
    antisymmetric part about the fitted line (half the difference between each vector's weight
    and the weight at its mirror image across the line: roll-up, an uneven reverse flow, noise).
    Each such difference moves the slope by its first-order influence; they are summed in
    quadrature as if independent over one radius squared (the wake's structures are about that
    size), i.e. the sum is multiplied by the vectors in that area. A straight symmetric wake
    has none. None with too few wake vectors or too short a stretch of wake.
    """
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, "upper")
    cx, cy = ball.center_px[0] - origin_px[0], ball.center_px[1] - origin_px[1]
    xi = -((field.x_px - cx) * fx + (field.y_px - cy) * fy)  # rearward
    eta = (field.x_px - cx) * nx + (field.y_px - cy) * ny  # toward the upper side
    r = ball.radius_px
    keeps_up = _keeping_up(field, ball, lab_frame)
    # the reach's ends fade in: cut sharply, the grid's rows (tilted against the flight) would
    # enter unevenly across the wake and tilt the line by up to 1 deg
    fade = np.clip(np.minimum(xi - reach[0] * r, reach[1] * r - xi) / (r / 3.0), 0.0, 1.0)
    wake = (fade > 0) & (np.abs(eta) < 1.5 * r) & (keeps_up > 0)  # NaN (unusable) is not > 0
    weight = keeps_up[wake] * fade[wake]
    if weight.sum() < 5.0 or np.ptp(xi[wake]) < 0.5 * r:
        return None
    line = _Centreline.fit(xi[wake], eta[wake], weight)
    m_along, m_across = line.mirror(xi[wake], eta[wake])
    mirrored = _value_at(keeps_up, field, cx - m_along * fx + m_across * nx,
                         cy - m_along * fy + m_across * ny)
    asymmetric = 0.5 * (keeps_up[wake] - mirrored) * fade[wake]  # the fade is ours, not the wake's
    steps = [abs(step) for step in _grid_steps(field) if step]
    per_independent = (r / np.mean(steps)) ** 2 if steps else 1.0
    slope_sd = math.sqrt(per_independent) * line.moved_by(asymmetric, np.isfinite(asymmetric))
    sigma_deg = math.degrees(slope_sd / (1.0 + line.slope**2))  # d atan(s) = ds / (1 + s^2)
    return WakeDirection(round(math.degrees(math.atan(line.slope)), 2),
                         round(WAKE_COVERAGE_K * sigma_deg, 2))


def _keeping_up(field: VectorField, ball, lab_frame: bool) -> np.ndarray:
    """How far the air keeps up with the ball at each vector, 0..1; NaN where unusable."""
    usable = (field.valid | field.replaced) & np.isfinite(field.dx_px) & np.isfinite(field.dy_px)
    u, v = np.where(usable, field.dx_px, 0.0), np.where(usable, field.dy_px, 0.0)
    dx, dy = ball.displacement_px
    if lab_frame:
        follow = (u * dx + v * dy) / max(dx * dx + dy * dy, 1e-12)
    else:
        follow = 1.0 - np.hypot(u, v) / max(ball.stream, 1e-9)
    return np.where(usable, np.clip(follow, 0.0, 1.0), np.nan)


@dataclass(frozen=True)
class _Centreline:
    """The weighted least-squares line ``across = a + slope along`` of the wake's vectors."""

    slope: float
    along: np.ndarray  # positions from the weighted mean along the axis
    residual: np.ndarray  # cross-axis distances from the line
    spread: float  # sum of w along^2

    @classmethod
    def fit(cls, along, across, weight) -> _Centreline:
        total = weight.sum()
        along = along - np.sum(weight * along) / total
        across = across - np.sum(weight * across) / total
        spread = float(np.sum(weight * along * along))
        slope = float(np.sum(weight * along * across) / spread)
        return cls(slope, along, across - slope * along, spread)

    def mirror(self, along, across) -> tuple[np.ndarray, np.ndarray]:
        """Points ``(along, across)`` (as given to :meth:`fit`) reflected across the line."""
        norm = math.hypot(1.0, self.slope)
        off = self.residual / norm  # distance from the line, toward + across
        return along + 2.0 * off * (self.slope / norm), across - 2.0 * off / norm

    def moved_by(self, weight_change: np.ndarray, where: np.ndarray) -> float:
        """Root sum of squares of the slope's first-order moves, ``dw along residual /
        spread`` each, for changes ``dw`` of the weights (at ``where``). Written out: scipy
        and numpy have no weighted regression with per-point influences."""
        moves = weight_change[where] * self.along[where] * self.residual[where]
        return float(math.sqrt(np.sum(moves * moves)) / self.spread)


def _grid_steps(field: VectorField) -> tuple[float, float]:
    """The grid's steps along x and y (px), from its first row and column (0 for one vector)."""
    step_x = float(field.x_px[0, 1] - field.x_px[0, 0]) if field.x_px.shape[1] > 1 else 0.0
    step_y = float(field.y_px[1, 0] - field.y_px[0, 0]) if field.y_px.shape[0] > 1 else 0.0
    return step_x, step_y


def _value_at(values: np.ndarray, field: VectorField, x: np.ndarray, y: np.ndarray):
    """``values`` (on the field's grid) at points ``x, y``: bilinear, NaN outside the grid or
    next to a NaN."""
    from scipy.ndimage import map_coordinates

    x0, y0 = float(field.x_px[0, 0]), float(field.y_px[0, 0])
    step_x, step_y = (step or 1.0 for step in _grid_steps(field))
    return map_coordinates(values, [(y - y0) / step_y, (x - x0) / step_x], order=1,
                           mode="constant", cval=np.nan)


def wake_state(upper: SideProposal, lower: SideProposal) -> str:
    """Our label for the shot: which side holds on longer, if the difference is clear.

    ``NO_CLEAR_DIFFERENCE`` when ``|upper - lower| <= max(STATE_THRESHOLD_DEG, combined
    uncertainty)`` (the sides are not shown to differ, which is not that they are alike),
    else "upper side holds on longer" / "lower side holds on longer" (the side with the larger,
    i.e. later, separation angle); "undetermined" without both proposals.
    """
    if upper.angle_deg is None or lower.angle_deg is None:
        return "undetermined"
    combined = math.hypot(upper.uncertainty_deg or 0.0, lower.uncertainty_deg or 0.0)
    diff = upper.angle_deg - lower.angle_deg
    if abs(diff) <= max(STATE_THRESHOLD_DEG, combined):
        return NO_CLEAR_DIFFERENCE
    return "upper side holds on longer" if diff > 0 else "lower side holds on longer"
