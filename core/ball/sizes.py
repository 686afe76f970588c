"""Rulebook ball sizes, the scale from a fitted ball, and the ball's mask."""

from __future__ import annotations

import math

import numpy as np

from core import WakelineError
from core.ball.constants import (
    BALL_CIRCUMFERENCE_MM,
    DEFAULT_MASK_MARGIN_PX,
    NOMINAL_BALL_DIAMETER_MM,
)
from core.results import BallFit


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


def ball_mask(
    shape: tuple[int, int], ball: BallFit, margin_px: float = DEFAULT_MASK_MARGIN_PX
) -> np.ndarray:
    """Pixels covered by the ball plus a margin, ``(H, W)`` bool (True = excluded)."""
    mask = np.zeros(shape, dtype=bool)
    cx, cy = ball.center_px
    reach = ball.radius_px + margin_px
    if not all(math.isfinite(v) for v in (cx, cy, reach)):
        return mask
    # only the disc's bounding box is tested: the whole frame costs tens of ms on a large one
    y0, y1 = max(0, math.floor(cy - reach)), min(shape[0], math.ceil(cy + reach) + 1)
    x0, x1 = max(0, math.floor(cx - reach)), min(shape[1], math.ceil(cx + reach) + 1)
    if y0 >= y1 or x0 >= x1:
        return mask
    yy, xx = np.ogrid[y0:y1, x0:x1]
    mask[y0:y1, x0:x1] = (xx - cx) ** 2 + (yy - cy) ** 2 <= reach * reach
    return mask
