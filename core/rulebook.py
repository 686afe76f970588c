"""Rulebook ball sizes, and the check that a given diameter can be its ball type's.

Kept apart from the ball finder (no image libraries) so that the session's import can check a
manifest's rows with it.
"""

from __future__ import annotations

import math

# Rulebook sizes: circumference range (mm); the nominal diameter is mid-range circumference / pi.
BALL_CIRCUMFERENCE_MM = {
    # Laws of Cricket, Law 4 (the ball), men's: circumference 22.4-22.9 cm.
    "cricket": (224.0, 229.0),
    # Official Baseball Rules 3.01: circumference 9-9.25 in.
    "baseball": (9.0 * 25.4, 9.25 * 25.4),
    # 12 in softball: circumference 11 7/8 - 12 1/8 in.
    "softball": (11.875 * 25.4, 12.125 * 25.4),
}

#: Every grade's circumference range (mm) of each ball type, for the check that a given diameter
#: can be that type's (from memory): Laws of Cricket, Law 4: women's 21.0-22.5 cm and junior
#: 20.5-22.0 cm beside the men's (ranges that join); softball: the 11 in ball, 10 7/8 - 11 1/8
#: in, beside the 12 in (a gap between them).
GRADE_CIRCUMFERENCES_MM = {
    "cricket": ((205.0, 229.0),),
    "baseball": (BALL_CIRCUMFERENCE_MM["baseball"],),
    "softball": ((10.875 * 25.4, 11.125 * 25.4), BALL_CIRCUMFERENCE_MM["softball"]),
}
#: The diameters (mm) every grade of every ball type above spans, smallest to largest.
RULEBOOK_DIAMETERS_MM = (min(lo for grades in GRADE_CIRCUMFERENCES_MM.values() for lo, _ in grades)
                         / math.pi,
                         max(hi for grades in GRADE_CIRCUMFERENCES_MM.values() for _, hi in grades)
                         / math.pi)
#: How far (share) a given diameter may lie outside a grade's range before it is questioned:
#: a worn or wet ball, a diameter measured with a caliper across the seam (common practice).
BALL_SIZE_SLACK = 0.01


def ball_size_problem(ball_type: str | None, diameter_mm: float | None) -> str:
    """Why a given diameter cannot be a ball of the given type, or "": the diameter lies more
    than ``BALL_SIZE_SLACK`` outside each grade's rulebook range of that type
    (``GRADE_CIRCUMFERENCES_MM``). The measurement uses the diameter given; the type or the
    diameter is then probably a slip (a softball's diameter under "cricket")."""
    key = (ball_type or "").strip().lower()
    if key not in GRADE_CIRCUMFERENCES_MM or not diameter_mm:
        return ""
    grades = [(lo / math.pi, hi / math.pi) for lo, hi in GRADE_CIRCUMFERENCES_MM[key]]
    if any((1.0 - BALL_SIZE_SLACK) * lo <= diameter_mm <= (1.0 + BALL_SIZE_SLACK) * hi
           for lo, hi in grades):
        return ""
    name = key if key.endswith("ball") else f"{key} ball"
    ranges = " or ".join(f"{lo:.1f}-{hi:.1f}" for lo, hi in grades)
    return (f"a ball diameter of {diameter_mm:g} mm does not fit a {name} (rulebook {ranges} "
            "mm): check the ball type and the diameter; the diameter given is used")
