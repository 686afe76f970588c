"""The wake behind the ball: its direction and the state the two separation angles imply."""

from __future__ import annotations

import math

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


def wake_deflection(
    field: VectorField, origin_px, ball, *, lab_frame: bool = False,
    reach=(1.2, 4.0),
) -> float | None:
    """Direction of the wake centreline relative to the rearward axis (deg, + toward upper).

    Behind the ball (``reach`` radii from its centre along the axis, within 1.5 radii of it)
    the wake is the air that keeps up with the ball: weight ``1 - |u|/U`` in the ball frame, or
    the lab-frame motion along the flight over the ball's, ``u . D / |D|^2`` (clipped to 0..1).
    The centreline is the straight line fitted to the vectors' positions with those weights
    (weighted least squares of the cross-axis position on the along-axis one).
    """
    fx, fy = flight_unit(ball.flight_deg)
    nx, ny = side_normal(ball.flight_deg, "upper")
    rx = field.x_px + origin_px[0] - ball.center_px[0]
    ry = field.y_px + origin_px[1] - ball.center_px[1]
    xi = -(rx * fx + ry * fy)
    eta = rx * nx + ry * ny
    dx, dy = ball.displacement_px
    speed2 = max(dx * dx + dy * dy, 1e-12)
    stream = max(ball.stream, 1e-9)
    r = ball.radius_px
    usable = (field.valid | field.replaced) & np.isfinite(field.dx_px) & np.isfinite(field.dy_px)
    region = usable & (xi >= reach[0] * r) & (xi <= reach[1] * r) & (np.abs(eta) < 1.5 * r)
    u, v = np.where(region, field.dx_px, 0.0), np.where(region, field.dy_px, 0.0)
    if lab_frame:
        follow = (u * dx + v * dy) / speed2
    else:
        follow = 1.0 - np.hypot(u, v) / stream
    weight = np.where(region, np.clip(follow, 0.0, 1.0), 0.0)
    if weight.sum() < 5.0 or np.ptp(xi[weight > 0]) < 0.5 * r:
        return None
    mean_xi = np.sum(weight * xi) / weight.sum()
    mean_eta = np.sum(weight * eta) / weight.sum()
    slope = np.sum(weight * (xi - mean_xi) * (eta - mean_eta)) / np.sum(weight * (xi - mean_xi) ** 2)
    return round(math.degrees(math.atan(slope)), 2)


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
