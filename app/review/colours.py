"""The colours wakeline draws with: vorticity map, review statuses, ball and separation marks.

One definition shared by the window, the session overview and the PDF shot sheet, so a shot looks
the same on screen and on paper. Colours are hex strings; the vorticity map is a list of stops
from the most negative (clockwise) to the most positive (counter-clockwise) value.
"""

from __future__ import annotations

import numpy as np

from core.store import ReviewStatus

# Diverging map for vorticity: deep teal (clockwise) through a warm paper white (zero) to deep
# brick (counter-clockwise). Both ends are dark enough for white vectors on top to stay visible
# and the middle is light enough for black ones.
VORTICITY_STOPS: tuple[tuple[float, str], ...] = (
    (0.00, "#0c3c4c"),
    (0.22, "#2f7f8c"),
    (0.42, "#a9d2cf"),
    (0.50, "#f6f2e8"),
    (0.58, "#efc39a"),
    (0.78, "#c8643b"),
    (1.00, "#5e1a1d"),
)

STATUS_COLOURS: dict[ReviewStatus, str] = {
    ReviewStatus.TO_REVIEW: "#7d8597",
    ReviewStatus.ACCEPTED: "#2a7f62",
    ReviewStatus.ADJUSTED: "#c9871a",
    ReviewStatus.UNUSABLE: "#a8324a",
}

BALL_OUTLINE = "#1d1d1f"
FLIGHT_ARROW = "#1d1d1f"
PLANE_LINE = "#5b5f66"
UPPER_SIDE = "#2b4c9a"  # separation mark on the upper side
LOWER_SIDE = "#8a2c8f"  # separation mark on the lower side
PROPOSAL_MARK = "#6e6e73"  # the machine's proposal when the analyst moved the mark
OTHER_ANALYST = "#37b6c8"  # another analyst's marks (an imported review)
DISAGREEMENT = "#d7263d"  # the two analysts differ beyond their combined uncertainty
ACCENT = "#0c3c4c"  # title bars and rules on the sheet
INK = "#1d1d1f"
MUTED_INK = "#5b5f66"
RULE = "#c9c6bd"
PAPER_TINT = "#f6f2e8"


def hex_to_rgb(colour: str) -> tuple[int, int, int]:
    """``"#rrggbb"`` -> ``(r, g, b)`` in 0..255."""
    text = colour.lstrip("#")
    return int(text[0:2], 16), int(text[2:4], 16), int(text[4:6], 16)


def vorticity_lut(n: int = 256) -> np.ndarray:
    """Lookup table of the vorticity map.

    Returns
    -------
    (n, 3) ndarray of uint8
        RGB from the most negative (row 0) to the most positive value (row n-1).
    """
    positions = np.array([p for p, _ in VORTICITY_STOPS])
    rgb = np.array([hex_to_rgb(c) for _, c in VORTICITY_STOPS], dtype=float)
    t = np.linspace(0.0, 1.0, n)
    channels = [np.interp(t, positions, rgb[:, k]) for k in range(3)]
    return np.clip(np.rint(np.stack(channels, axis=1)), 0, 255).astype(np.uint8)


def vorticity_rgb(vorticity_1_s: np.ndarray, limit_1_s: float) -> np.ndarray:
    """Colour a vorticity field symmetrically about zero.

    Parameters
    ----------
    vorticity_1_s : (M, N) ndarray
        Vorticity in 1/s; NaN where there is no value.
    limit_1_s : float
        Magnitude mapped to the ends of the colour map (values beyond are clipped).

    Returns
    -------
    (M, N, 4) ndarray of uint8
        RGBA; NaN cells are fully transparent.
    """
    lut = vorticity_lut(255)  # odd length: zero falls exactly on the middle entry
    limit = float(limit_1_s) if limit_1_s and np.isfinite(limit_1_s) and limit_1_s > 0 else 1.0
    w = np.asarray(vorticity_1_s, dtype=float)
    finite = np.isfinite(w)
    t = np.clip((np.where(finite, w, 0.0) / limit + 1.0) / 2.0, 0.0, 1.0)
    index = np.rint(t * (len(lut) - 1)).astype(int)
    out = np.zeros(w.shape + (4,), dtype=np.uint8)
    out[..., :3] = lut[index]
    out[..., 3] = np.where(finite, 255, 0)
    return out


def symmetric_limit(vorticity_1_s: np.ndarray, percentile: float = 98.0) -> float:
    """Colour-scale limit: a high percentile of |vorticity| so a few outliers don't wash it out."""
    w = np.abs(np.asarray(vorticity_1_s, dtype=float))
    w = w[np.isfinite(w)]
    if w.size == 0:
        return 1.0
    value = float(np.percentile(w, percentile))
    return value if value > 0 else 1.0
