"""Ball-side geometry: flight and side directions, and separation angle <-> point on the outline.

All vectors are in image coordinates (x right, y down). The flight direction angle follows the
convention 0 deg = toward +x, 90 deg = toward the top of the picture (toward -y).
"""

from __future__ import annotations

import math

SIDES = ("upper", "lower")
VERTICAL_TIE_DEG = 1.0  # flights this close to vertical use the left/right tie-break
#: Flight directions (deg) where :func:`upper_normal` turns from one side of the ball to the
#: other: the end of the tie-break past each vertical (upper is the left side from the
#: horizontal up to them, the right side beyond).
SIDES_SWAP_DEG = (90.0 + VERTICAL_TIE_DEG, 270.0 + VERTICAL_TIE_DEG)


def flight_unit(direction_deg: float) -> tuple[float, float]:
    """Unit vector of the flight direction in image coordinates."""
    a = math.radians(direction_deg)
    return math.cos(a), -math.sin(a)


def upper_normal(direction_deg: float) -> tuple[float, float]:
    """Unit normal to the flight pointing to the *upper* side of the ball.

    Upper is the side toward the top of the picture whatever the flight direction (left or right).
    For a flight within ``VERTICAL_TIE_DEG`` of vertical the tie-break is: upper = the side toward
    the left of the picture (-x).
    """
    fx, fy = flight_unit(direction_deg)
    nx, ny = fy, -fx  # one of the two normals (the flight turned 90 deg counter-clockwise on screen)
    off_vertical = abs(math.degrees(math.asin(max(-1.0, min(1.0, abs(fx))))))
    if off_vertical < VERTICAL_TIE_DEG:
        return (nx, ny) if nx < 0 else (-nx, -ny)
    return (nx, ny) if ny < 0 else (-nx, -ny)


def side_normal(direction_deg: float, side: str) -> tuple[float, float]:
    """Unit normal to the flight pointing to ``side`` ("upper" or "lower")."""
    nx, ny = upper_normal(direction_deg)
    if side == "upper":
        return nx, ny
    if side == "lower":
        return -nx, -ny
    raise ValueError(f"side must be 'upper' or 'lower', not {side!r}")


def point_at_angle(
    center_px: tuple[float, float], radius_px: float, direction_deg: float, side: str, angle_deg: float
) -> tuple[float, float]:
    """Point on the ball outline at a separation angle (deg, positive rearward) on one side."""
    fx, fy = flight_unit(direction_deg)
    nx, ny = side_normal(direction_deg, side)
    a = math.radians(angle_deg)
    return (
        center_px[0] + radius_px * (math.cos(a) * nx - math.sin(a) * fx),
        center_px[1] + radius_px * (math.cos(a) * ny - math.sin(a) * fy),
    )


def angle_of_point(
    center_px: tuple[float, float], direction_deg: float, side: str, point_px: tuple[float, float]
) -> float:
    """Separation angle (deg) of the outline point nearest to ``point_px`` on ``side``.

    Range (-180, 180]; 0 on the plane normal to the flight, +90 at the rear stagnation point,
    -90 at the front stagnation point.
    """
    fx, fy = flight_unit(direction_deg)
    nx, ny = side_normal(direction_deg, side)
    rx, ry = point_px[0] - center_px[0], point_px[1] - center_px[1]
    return math.degrees(math.atan2(-(rx * fx + ry * fy), rx * nx + ry * ny))


def turn_deg(angle_deg: float, reference_deg: float) -> float:
    """How far a direction lies from another: ``angle - reference`` wrapped to [-180, 180)
    deg."""
    return (angle_deg - reference_deg + 180.0) % 360.0 - 180.0


def on_own_side(angle_deg: float) -> float:
    """A separation angle kept on its side of the ball: from the front stagnation point (-90)
    to the rear one (+90); beyond them an angle would be the other side's."""
    return min(max(float(angle_deg), -90.0), 90.0)


def mid_circle(ball_a, ball_b=None) -> tuple[tuple[float, float], float] | None:
    """The ball at mid-exposure: the mean of its circles in frames A and B (``center_px``,
    ``radius_px`` of each; frame A alone without B), as ``((cx, cy), r)`` px; None without a
    finite circle. The ball-frame measurements (fine field, fitted layers, separation angles)
    are made about this circle."""
    balls = [b for b in (ball_a, ball_b) if b is not None and math.isfinite(b.radius_px)
             and b.radius_px > 0]
    if ball_a is None or not balls:
        return None
    cx = sum(float(b.center_px[0]) for b in balls) / len(balls)
    cy = sum(float(b.center_px[1]) for b in balls) / len(balls)
    return (cx, cy), sum(float(b.radius_px) for b in balls) / len(balls)


def ball_coordinates(
    center_px: tuple[float, float], radius_px: float, direction_deg: float,
    point_px: tuple[float, float],
) -> tuple[float, float, str, float]:
    """Where a point lies relative to the ball: ``(x/D, y/D, side, angle_deg)``.

    ``x/D`` along the flight axis, positive downstream (behind the ball), ``y/D`` across it,
    positive toward the upper side, both over the diameter from the centre; ``side`` the side
    the point is on and ``angle_deg`` its separation angle there (``angle_of_point``).
    """
    fx, fy = flight_unit(direction_deg)
    nx, ny = upper_normal(direction_deg)
    rx, ry = point_px[0] - center_px[0], point_px[1] - center_px[1]
    diameter = 2.0 * radius_px
    across = (rx * nx + ry * ny) / diameter
    side = "upper" if across >= 0 else "lower"
    return (-(rx * fx + ry * fy) / diameter, across, side,
            angle_of_point(center_px, direction_deg, side, point_px))
