"""Round numbers for the scales wakeline draws, on screen and on the sheet: the ends of the
vorticity colour bar, the length of a scale bar or a reference vector (no Qt here)."""

from __future__ import annotations

import math

import numpy as np

from app.review import colours

LIMIT_FIGURES = 2  # significant figures of a colour-bar end
#: Share of one drawn cell a large vector (the 95th percentile) spans, in the window and on the
#: sheet: at 0.9 the arrows of a uniform stretch (a launched ball's wake in the lab frame) ran
#: together into lines.
ARROW_CELL_SHARE = 0.7


def round_limit(value: float) -> float:
    """``value`` rounded up to two significant figures (2050 -> 2100, 0.0123 -> 0.013): a tidy
    colour-bar end at most a tenth above the field's own, so a shot looks the same whichever
    way it is drawn (the window, the sheet) and shear layers are not washed out."""
    if value <= 0 or not math.isfinite(value):
        return 1.0
    exponent = math.floor(math.log10(value)) - (LIMIT_FIGURES - 1)
    steps = math.ceil(value / 10.0 ** exponent * (1 - 1e-9))
    return round(steps * 10.0 ** exponent, -exponent)


def shot_limit(vorticity_1_s) -> float:
    """One shot's colour-bar end: the 98th percentile of its |vorticity|, rounded up to two
    significant figures (``round_limit``); 1 when it has no finite value."""
    return round_limit(colours.symmetric_limit(vorticity_1_s))


def round_length(value: float) -> float:
    """The largest value of the 1-2-5 series at or below ``value`` (10 when there is none): a
    scale bar or reference arrow that never outgrows its room."""
    if not value or not math.isfinite(value) or value <= 0:
        return 10.0
    mag = 10 ** math.floor(math.log10(value))
    return max(m * mag for m in (1, 2, 5) if m * mag <= value)


def shared_limit(vorticity_fields) -> float:
    """One colour-bar end for several shots: the median of their own ends (98th percentile of
    |vorticity| each), rounded up to two significant figures. Most shots then look as they do
    alone; the strongest saturate in their cores rather than washing the others out."""
    limits = [colours.symmetric_limit(w) for w in vorticity_fields if w is not None]
    return round_limit(float(np.median(limits))) if limits else 1.0
