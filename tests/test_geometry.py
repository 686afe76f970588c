"""Ball-side geometry against closed forms (the conventions of README.md)."""

import math

import pytest

from core.geometry import SIDES_SWAP_DEG, angle_of_point, point_at_angle, side_normal, upper_normal


@pytest.mark.parametrize("direction_deg", [0.0, 180.0, 5.0, -5.0, 175.0, 185.0, 30.0, 150.0])
def test_upper_side_is_toward_top_of_picture(direction_deg):
    nx, ny = upper_normal(direction_deg)
    assert ny < 0  # image y is downward
    assert math.isclose(math.hypot(nx, ny), 1.0)


@pytest.mark.parametrize("direction_deg", [90.0, -90.0, 90.5, 269.5])
def test_vertical_flight_tie_break_is_left_of_picture(direction_deg):
    nx, _ = upper_normal(direction_deg)
    assert nx < 0


@pytest.mark.parametrize("swap", SIDES_SWAP_DEG)
def test_the_sides_change_places_only_where_the_plausibility_check_says(swap):
    # Going round the flight directions in steps of 0.05 deg, the upper normal turns with the
    # flight (by the step) everywhere but at the end of each tie-break, where it jumps to the
    # other side of the ball (README, Conventions; derived): there the plausibility check warns.
    jumps = []
    for i in range(7200):
        d0, d1 = i * 0.05, (i + 1) * 0.05
        (ax, ay), (bx, by) = upper_normal(d0), upper_normal(d1)
        if ax * bx + ay * by < 0:
            jumps.append(round(d1, 2))
    assert jumps == [pytest.approx(s, abs=0.051) for s in SIDES_SWAP_DEG]
    (ax, ay), (bx, by) = upper_normal(swap - 0.1), upper_normal(swap + 0.1)
    assert ax < 0 < bx  # from the picture's left to its right


def test_zero_angle_lies_on_plane_normal_to_flight():
    # Flight to the right: the plane normal to the flight is vertical through the centre, so the
    # upper mark at 0 deg is straight above the centre (derived).
    x, y = point_at_angle((100.0, 50.0), 20.0, 0.0, "upper", 0.0)
    assert x == pytest.approx(100.0) and y == pytest.approx(30.0)


def test_positive_angle_is_rearward_for_both_flight_directions():
    # Rearward = opposite the flight (derived from the definition in README.md).
    right = point_at_angle((0.0, 0.0), 1.0, 0.0, "upper", 20.0)
    left = point_at_angle((0.0, 0.0), 1.0, 180.0, "upper", 20.0)
    assert right[0] == pytest.approx(-math.sin(math.radians(20)))
    assert left[0] == pytest.approx(math.sin(math.radians(20)))
    assert right[1] < 0 and left[1] < 0


def test_angle_from_stagnation_point():
    # Angle from the front stagnation point = separation angle + 90 deg (README convention):
    # -90 deg is the front stagnation point, +90 the rear one.
    front = point_at_angle((0.0, 0.0), 1.0, 0.0, "lower", -90.0)
    rear = point_at_angle((0.0, 0.0), 1.0, 0.0, "lower", 90.0)
    assert front == pytest.approx((1.0, 0.0))
    assert rear == pytest.approx((-1.0, 0.0))


@pytest.mark.parametrize("side", ["upper", "lower"])
@pytest.mark.parametrize("direction_deg", [0.0, 180.0, 12.0, 200.0, 90.0])
@pytest.mark.parametrize("angle_deg", [-30.0, -8.5, 0.0, 17.25, 45.0, 120.0])
def test_round_trip(side, direction_deg, angle_deg):
    p = point_at_angle((10.0, -4.0), 33.0, direction_deg, side, angle_deg)
    assert angle_of_point((10.0, -4.0), direction_deg, side, p) == pytest.approx(angle_deg)


def test_sides_are_opposite():
    ux, uy = side_normal(30.0, "upper")
    lx, ly = side_normal(30.0, "lower")
    assert (ux + lx, uy + ly) == pytest.approx((0.0, 0.0))
    with pytest.raises(ValueError):
        side_normal(0.0, "left")


def test_ball_coordinates_of_a_point_behind_and_above():
    # flight to the right: a point one diameter behind the centre and half a diameter above it
    # lies at x/D = +1 downstream, y/D = +0.5 on the upper side, at atan2(2, 1) = 63.43 deg
    # rearward of the normal plane (derived)
    from core.geometry import ball_coordinates

    along, across, side, angle = ball_coordinates((100.0, 80.0), 20.0, 0.0, (60.0, 60.0))
    assert (along, across, side) == (pytest.approx(1.0), pytest.approx(0.5), "upper")
    assert angle == pytest.approx(math.degrees(math.atan2(2.0, 1.0)))
    # flying left, the same point is ahead of the ball: upstream, still above
    along, across, side, angle = ball_coordinates((100.0, 80.0), 20.0, 180.0, (60.0, 60.0))
    assert (along, across, side) == (pytest.approx(-1.0), pytest.approx(0.5), "upper")
    assert angle == pytest.approx(-math.degrees(math.atan2(2.0, 1.0)))


def test_the_ball_at_mid_exposure_is_the_mean_of_its_two_circles():
    from core.geometry import mid_circle
    from core.results import BallFit

    a, b = BallFit((100.0, 50.0), 30.0), BallFit((90.0, 54.0), 31.0)
    assert mid_circle(a, b) == ((95.0, 52.0), 30.5)
    assert mid_circle(a) == ((100.0, 50.0), 30.0)
    assert mid_circle(a, BallFit((0.0, 0.0), float("nan"))) == ((100.0, 50.0), 30.0)
    assert mid_circle(None, b) is None


def test_an_angle_stays_on_its_side_between_the_stagnation_points():
    # -90 deg is the front stagnation point, +90 the rear one (README convention)
    from core.geometry import on_own_side

    assert on_own_side(142.3) == 90.0 and on_own_side(-120.0) == -90.0
    assert on_own_side(12.5) == 12.5
