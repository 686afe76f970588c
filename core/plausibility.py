"""Is a shot's ball and flight believable? Checks of the measured circles and flight against
what else is known of the shot: the launcher's nominal speed and direction (manifest), the
session's other shots, the two frames' circles, and the wake behind the ball.

A check that fails gives one line saying what disagrees with what; the review window and the
shot sheet show them, and the analyst can then set the circles or the flight by hand. Pure
Python on the stored summary: no field data is read.
"""

from __future__ import annotations

import math

from core.geometry import SIDES_SWAP_DEG, turn_deg
from core.summary import ShotSummary

#: The measured speed may differ from the launcher's nominal speed by this fraction (a wheel
#: launcher's spread is a few per cent; a wrong circle or scale is tens of per cent).
SPEED_TOLERANCE = 0.2
#: The flight may point this far (deg) from the manifest's direction or the session's usual one.
DIRECTION_TOLERANCE_DEG = 20.0
#: The frames' radii may differ by this fraction (the same ball, the same lens).
RADIUS_TOLERANCE = 0.03
#: The wake may leave this far (deg) from the flight axis; spin and seams turn wakes by some
#: degrees, not tens.
WAKE_TOLERANCE_DEG = 20.0
#: A flight this close (deg, or three of its standard uncertainties if more) to where the
#: names of the sides change places (``core.geometry.SIDES_SWAP_DEG``) is flagged: a launcher's
#: shots scatter by a few degrees, and those on the far side name the sides the other way.
SIDES_SWAP_MARGIN_DEG = 5.0
#: Shots needed for the session's usual direction, and the share of them that must agree.
USUAL_MIN_SHOTS = 3
USUAL_MIN_SHARE = 0.5


def flight_checks(summary: ShotSummary, metadata: dict | None = None,
                  usual_direction_deg: float | None = None) -> list[str]:
    """Disagreements of a shot's ball and flight with what else is known, one line each: what
    the ball and flight stages warned of (``ShotSummary.ball_warnings``: the two frames' radii
    beyond their uncertainties, a poorly fitted circle, the flight against the air moving with
    the ball, ...), then the checks here.

    Parameters
    ----------
    summary : ShotSummary
    metadata : dict, optional
        The shot's manifest values (``speed_nominal_m_s``, ``flight_deg``).
    usual_direction_deg : float, optional
        The direction most shots of the session fly in (``usual_direction``): checked only
        where the manifest gives no ``flight_deg``, so that a session launched both ways on
        purpose, each shot's direction in its manifest, is not flagged.
    """
    metadata = metadata or {}
    checks = list(summary.ball_warnings)
    flight = summary.flight
    if flight is not None:
        checks += _speed_check(flight.speed_m_s, _number(metadata.get("speed_nominal_m_s")))
        manifest_deg = _number(metadata.get("flight_deg"))
        checks += _moved_check(flight, manifest_deg)
        checks += _sides_swap_check(flight.direction_deg, flight.direction_sigma_deg)
        if manifest_deg is None:  # a direction the manifest states is the one to check against
            checks += _usual_check(flight.direction_deg, usual_direction_deg)
    checks += _radius_check(summary)
    checks += _wake_check(summary.separation.wake_deflection_deg)
    return checks


def session_direction(records) -> float | None:
    """The flight direction most measured shots of a session (its records) share, or None."""
    return usual_direction([r.summary.flight.direction_deg for r in records
                            if r.summary is not None and r.summary.flight is not None])


def shot_checks(record, usual_direction_deg: float | None = None) -> list[str]:
    """:func:`flight_checks` of one shot's record (its summary and manifest values), none
    while it is unmeasured. The readout, the sheet and the table show them."""
    if record.summary is None:
        return []
    return flight_checks(record.summary, record.metadata, usual_direction_deg)


def usual_direction(directions_deg) -> float | None:
    """The flight direction most of a session's shots share (mean of the largest group within
    ``DIRECTION_TOLERANCE_DEG`` of one of them), or None without a clear majority."""
    values = [float(d) for d in directions_deg if d is not None and math.isfinite(d)]
    if len(values) < USUAL_MIN_SHOTS:
        return None
    groups = [[v for v in values if abs(turn_deg(v, centre)) <= DIRECTION_TOLERANCE_DEG]
              for centre in values]
    best = max(groups, key=len)
    if len(best) < USUAL_MIN_SHARE * len(values):
        return None
    x = sum(math.cos(math.radians(v)) for v in best)
    y = sum(math.sin(math.radians(v)) for v in best)
    return math.degrees(math.atan2(y, x)) % 360.0


def _speed_check(speed: float | None, nominal: float | None) -> list[str]:
    if speed is None or not nominal or nominal <= 0:
        return []
    off = speed / nominal - 1.0
    if abs(off) <= SPEED_TOLERANCE:
        return []
    word = "above" if off > 0 else "below"
    return [(f"measured speed {speed:.1f} m/s is {100 * abs(off):.0f} % {word} the launcher's "
            f"nominal {nominal:g} m/s: check the ball's circles and the scale")]


def _moved_check(flight, manifest_deg: float | None) -> list[str]:
    """With the manifest's direction given, the ball's own displacement must go that way."""
    dx, dy = flight.displacement_px
    if manifest_deg is None or math.hypot(dx, dy) < 1.0:
        return []
    moved = math.degrees(math.atan2(-dy, dx)) % 360.0
    gap = turn_deg(moved, manifest_deg)
    if abs(gap) <= DIRECTION_TOLERANCE_DEG:
        return []
    if abs(gap) >= 180.0 - DIRECTION_TOLERANCE_DEG:  # both circles fitted, the other way
        return [(f"the ball's circles moved toward {moved:.1f}°, against the manifest's flight "
                 f"direction {manifest_deg:g}°: the manifest's flight_deg is the wrong way "
                 "round, or the frames are swapped (frames_swapped); correct shots.csv and "
                 "import it again with --correct-values")]
    return [(f"the ball's circles moved toward {moved:.1f}°, {abs(gap):.0f}° from the manifest's "
            f"flight direction {manifest_deg:g}°: check the circles in frames A and B")]


def _usual_check(direction: float, usual: float | None) -> list[str]:
    if usual is None:
        return []
    gap = turn_deg(direction, usual)
    if abs(gap) <= DIRECTION_TOLERANCE_DEG:
        return []
    line = (f"flight direction {direction:.1f}° is {abs(gap):.0f}° from the {usual:.1f}° most "
            "shots of the session fly in")
    if abs(gap) >= 180.0 - DIRECTION_TOLERANCE_DEG:
        line += (": frames A and B swapped (frames_swapped), or launched the other way on "
                 "purpose (then give its flight_deg in shots.csv)")
    return [line]


def _sides_swap_check(direction: float, sigma: float | None) -> list[str]:
    """A flight near vertical, where upper and lower change places (README, Conventions)."""
    margin = max(SIDES_SWAP_MARGIN_DEG, 3.0 * sigma if sigma and math.isfinite(sigma) else 0.0)
    for swap in SIDES_SWAP_DEG:
        gap = turn_deg(direction, swap)
        if abs(gap) <= margin:
            return [(f"flight direction {direction:.1f}° is {abs(gap):.1f}° from {swap:g}°, "
                     "where upper and lower change places (upper: toward the top of the "
                     "picture, toward its left within 1° of vertical): a shot flying on the "
                     "other side of it names the two sides the other way round")]
    return []


def _radius_check(summary: ShotSummary) -> list[str]:
    a, b = summary.ball_a, summary.ball_b
    if a is None or b is None or any(w.startswith("the ball's radius differs")
                                     for w in summary.warnings):
        return []  # the ball finder's own warning (with uncertainties) says it already
    mean = 0.5 * (a.radius_px + b.radius_px)
    if not mean > 0 or abs(a.radius_px - b.radius_px) <= RADIUS_TOLERANCE * mean:
        return []
    return [(f"the ball's circles in frames A and B differ in radius ({a.radius_px:.1f} vs "
            f"{b.radius_px:.1f} px): one of them is off")]


def _wake_check(deflection: float | None) -> list[str]:
    if deflection is None or abs(deflection) <= WAKE_TOLERANCE_DEG:
        return []
    return [f"the wake leaves {deflection:+.0f}° off the flight axis: check the flight direction"]


def _number(value) -> float | None:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None
