"""Round numbers for the scales wakeline draws, on screen and on the sheet: the ends of the
vorticity colour bar, the length of a scale bar or a reference vector (no Qt here)."""

from __future__ import annotations

import math

import numpy as np

from app.review import colours


def round_limit(value: float) -> float:
    """The next value of the 1-2-5 series at or above ``value``: a tidy colour-bar end that stays
    the same over shots of similar strength (so the scale is comparable and cheap to redraw)."""
    if value <= 0 or not math.isfinite(value):
        return 1.0
    decade = 10.0 ** math.floor(math.log10(value))
    for step in (1.0, 2.0, 5.0, 10.0):
        if value <= step * decade * (1 + 1e-9):
            return step * decade
    return 10.0 * decade


def round_length(value: float) -> float:
    """The largest value of the 1-2-5 series at or below ``value`` (10 when there is none): a
    scale bar or reference arrow that never outgrows its room."""
    if not value or not math.isfinite(value) or value <= 0:
        return 10.0
    mag = 10 ** math.floor(math.log10(value))
    return max(m * mag for m in (1, 2, 5) if m * mag <= value)


def shared_limit(vorticity_fields) -> float:
    """One colour-bar end for several shots: the median of their own ends (98th percentile of
    |vorticity| each), rounded up in the 1-2-5 series. Most shots then look as they do alone;
    the strongest saturate in their cores rather than washing the others out."""
    limits = [colours.symmetric_limit(w) for w in vorticity_fields if w is not None]
    return round_limit(float(np.median(limits))) if limits else 1.0
